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
import math
import sys

import numpy as np
from scipy.signal import convolve

d, maxit = sys.argv[1], int(sys.argv[2])
cases = json.load(open(d + "/cases.json"))
print("| case | geometry | RL best dB (iterations) | limpid oracle dB | limpid default dB |")
print("|---|---|---|---|---|")
by_geom = {}
for c in cases:
    w, h = c["width"], c["height"]
    obs = np.fromfile(d + "/" + c["name"] + ".obs.f32", dtype="<f4").reshape(h, w).astype(np.float64) / 4095.0
    ref = np.fromfile(d + "/" + c["name"] + ".ref.f32", dtype="<f4").reshape(h, w).astype(np.float64)
    score = np.fromfile(d + "/" + c["name"] + ".score.u8", dtype=np.uint8).reshape(h, w) == 1
    sg = c["psf_sigma"]
    r = max(1, math.ceil(4 * sg))
    x = np.arange(-r, r + 1)
    g = np.exp(-0.5 * x**2 / sg**2)
    g /= g.sum()
    psf = np.outer(g, g)
    # skimage.restoration.richardson_lucy 0.19.3, unrolled to record every
    # iteration (same arithmetic: float64, start 0.5, eps 1e-12, clip at end).
    est = np.full(obs.shape, 0.5)
    mirror = np.flip(psf)
    best, best_it = -1e9, 0
    for it in range(1, maxit + 1):
        conv = convolve(est, psf, mode="same") + 1e-12
        est = est * convolve(obs / conv, mirror, mode="same")
        e = np.clip(est, -1, 1) * 4095.0
        err = (e - ref)[score]
        p = 10 * math.log10(4095.0**2 / np.mean(err**2))
        if p > best:
            best, best_it = p, it
    print("| %s | %s | %.2f (%d) | %.2f | %.2f |" % (c["name"], c["geometry"], best, best_it, c["oracle"], c["auto"]))
    by_geom.setdefault(c["geometry"], []).append((best, c["oracle"], c["auto"]))
print()
print("| geometry | cases | RL best mean dB | limpid oracle mean dB | limpid default mean dB | default - RL dB |")
print("|---|---|---|---|---|---|")
for gname, v in by_geom.items():
    a = np.array(v)
    print("| %s | %d | %.2f | %.2f | %.2f | %+.2f |" % (gname, len(v), a[:, 0].mean(), a[:, 1].mean(), a[:, 2].mean(), a[:, 2].mean() - a[:, 0].mean()))
