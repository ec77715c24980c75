#!/usr/bin/python3
"""limpid assess --reference's side-by-side figures for three rasters,
computed independently with GDAL's Python bindings and scikit-image 0.19.3
(Debian python3-gdal, python3-skimage), for cmd/limpid's
TestAssessSideBySideFiles:

    /usr/bin/python3 testdata/ref/assess_files_skimage.py REFERENCE OBSERVED RESTORED L

prints JSON {"bands": [{"valid_pixels": N, "observed": {...}, "restored": {...}}]}:
per band, the pixels valid in all three files (finite and not the band's
nodata value, as GDAL reports it) and skimage_fidelity.fidelity of OBSERVED
and RESTORED against REFERENCE over them with peak L.
"""
import json
import os
import sys

import numpy as np
from osgeo import gdal

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from skimage_fidelity import fidelity  # noqa: E402

gdal.UseExceptions()


def band(path, b):
    ds = gdal.Open(path)  # keep the dataset alive while its band is read
    bd = ds.GetRasterBand(b)
    a = bd.ReadAsArray().astype(np.float32)
    ok = np.isfinite(a)
    nd = bd.GetNoDataValue()
    if nd is not None:
        ok &= a != np.float32(nd)
    return a, ok


ref_path, obs_path, res_path, L = sys.argv[1], sys.argv[2], sys.argv[3], float(sys.argv[4])
bands = []
for b in range(1, gdal.Open(ref_path).RasterCount + 1):
    (r, vr), (o, vo), (m, vm) = band(ref_path, b), band(obs_path, b), band(res_path, b)
    valid = vr & vo & vm
    bands.append({"valid_pixels": int(valid.sum()),
                  "observed": fidelity(r, o, valid, L), "restored": fidelity(r, m, valid, L)})
json.dump({"bands": bands}, sys.stdout)
