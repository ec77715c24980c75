#!/usr/bin/python3
"""Reference figures for limpid assess's side-by-side comparison (step/assess
Measure: OBSERVED and RESTORED each against the reference, over the same
valid pixels, with the same peak L).

Run with Debian's interpreter (python3-skimage 0.19.3, python3-numpy,
python3-scipy):
    /usr/bin/python3 testdata/ref/make_assess_reference.py
Writes testdata/ref/assess_skimage.json: for each case the reference, observed
and restored planes (float32 values, row-major), the valid mask (1 valid,
0 not), the peak L and, for "observed" and "restored" against the reference,
the figures of skimage_fidelity.fidelity (PSNR, SSIM, RMSE, MAE, bias by
scikit-image and numpy over the valid pixels).
"""
import json
import os
import sys

import numpy as np
from scipy.ndimage import gaussian_filter

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import skimage  # noqa: E402
from skimage_fidelity import fidelity  # noqa: E402

rng = np.random.RandomState(16_05)
cases = []


def add(name, ref, obs, res, valid, L):
    ref, obs, res = (a.astype(np.float32) for a in (ref, obs, res))
    cases.append({"name": name, "width": ref.shape[1], "height": ref.shape[0], "L": L,
                  "ref": [float(v) for v in ref.ravel()], "obs": [float(v) for v in obs.ravel()],
                  "res": [float(v) for v in res.ravel()], "valid": [int(v) for v in valid.ravel()],
                  "observed": fidelity(ref, obs, valid, L), "restored": fidelity(ref, res, valid, L)})


# 12-bit blocks: observed blurred and noisy, restored sharper and noisier; a
# nodata hole and scattered nodata pixels; garbage under the mask.
h, w = 40, 48
ref = np.kron(rng.uniform(200, 3800, size=(5, 6)), np.ones((8, 8)))[:h, :w]
obs = gaussian_filter(ref, 1.6, mode="reflect") + rng.normal(0, 6, size=(h, w))
res = gaussian_filter(ref, 0.7, mode="reflect") + rng.normal(0, 12, size=(h, w))
valid = np.ones((h, w), bool)
valid[10:19, 25:37] = False
valid[rng.uniform(size=(h, w)) < 0.01] = False
obs[~valid], res[~valid] = 60000, -5000
add("blocks hole L=4095", ref, obs, res, valid, 4095.0)

# Float reflectance: a smooth texture, observed with a contrast loss and an
# offset, restored closer; the left columns and a corner are nodata.
h, w = 36, 44
refl = gaussian_filter(rng.uniform(0, 1, size=(h, w)), 1.2) * 0.5 + 0.05
obs = 0.8 * gaussian_filter(refl, 1.0) + 0.03 + rng.normal(0, 0.004, size=(h, w))
res = 0.95 * refl + 0.01 + rng.normal(0, 0.008, size=(h, w))
valid = np.ones((h, w), bool)
valid[:, :3] = False
valid[28:, 36:] = False
v32 = refl.astype(np.float32)[valid]
add("reflectance corner L=range", refl, obs, res, valid, float(v32.max() - v32.min()))

out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "assess_skimage.json")
with open(out, "w") as f:
    json.dump({"generator": "scikit-image " + skimage.__version__, "cases": cases}, f)
print("wrote", out)
