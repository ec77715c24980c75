#!/usr/bin/python3
"""Best PSNR of scikit-image's Richardson-Lucy on masktune's nodata cases.

Usage: /usr/bin/python3 scripts/rl_psnr_masked.py DIR MAXITER
DIR is what `go run ./scripts/masktune -rl DIR` wrote: cases.json (list of
{name, width, height, psf_sigma, geometry, oracle, auto}) and for each case
NAME.obs.f32 (nodata already filled with the valid mean, as a user of the
library would), NAME.ref.f32 (little-endian float32, DN) and NAME.score.u8
(1 on the pixels scored). The PSF is the point-sampled Gaussian of radius
ceil(4 sigma), as limpid's. Data are divided by 4095 (12-bit full scale)
with the default clip=True. Prints a markdown table (best PSNR over
iterations 1..MAXITER and the iteration) and the mean per geometry beside
limpid's oracle and default restore.
"""
import json
import sys

import numpy as np

# rl_psnr.py sits beside this script (sys.path[0]): its PSF, reader and
# unrolled Richardson-Lucy are the ones used here.
from rl_psnr import gaussian_psf, read_f32, rl_psnr_curve

d, maxit = sys.argv[1], int(sys.argv[2])
cases = json.load(open(d + "/cases.json"))
print("| case | geometry | RL best dB (iterations) | limpid oracle dB | limpid default dB |")
print("|---|---|---|---|---|")
by_geom = {}
for c in cases:
    w, h = c["width"], c["height"]
    obs = read_f32(d + "/" + c["name"] + ".obs.f32", w, h) / 4095.0
    ref = read_f32(d + "/" + c["name"] + ".ref.f32", w, h)
    score = np.fromfile(d + "/" + c["name"] + ".score.u8", dtype=np.uint8).reshape(h, w) == 1
    curve = rl_psnr_curve(obs, ref, gaussian_psf(c["psf_sigma"]), maxit, score)
    best_it = int(np.argmax(curve)) + 1
    best = curve[best_it - 1]
    print("| %s | %s | %.2f (%d) | %.2f | %.2f |" % (c["name"], c["geometry"], best, best_it, c["oracle"], c["auto"]))
    by_geom.setdefault(c["geometry"], []).append((best, c["oracle"], c["auto"]))
print()
print("| geometry | cases | RL best mean dB | limpid oracle mean dB | limpid default mean dB | default - RL dB |")
print("|---|---|---|---|---|---|")
for gname, v in by_geom.items():
    a = np.array(v)
    print("| %s | %d | %.2f | %.2f | %.2f | %+.2f |" % (gname, len(v), a[:, 0].mean(), a[:, 1].mean(), a[:, 2].mean(), a[:, 2].mean() - a[:, 0].mean()))
