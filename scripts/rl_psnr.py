#!/usr/bin/python3
"""PSNR of scikit-image's Richardson-Lucy per iteration on limpid's tuning scenes.

Usage: /usr/bin/python3 scripts/rl_psnr.py DIR MAXITER
DIR holds scenes.json (list of {name, width, height, psf_sigma, margin}) and for
each scene NAME.obs.f32 / NAME.ref.f32 (little-endian float32, row-major, DN).
The PSF is the point-sampled Gaussian of radius ceil(4 sigma), as limpid's.
Data are divided by 4095 (12-bit full scale) as a user of scikit-image would,
with the default clip=True. Prints JSON {name: [psnr_1, ..., psnr_MAXITER]}.
"""
import json
import math
import sys

import numpy as np
from scipy.signal import convolve


def gaussian_psf(sigma):
    """The point-sampled Gaussian PSF of radius ceil(4 sigma), as limpid's."""
    r = max(1, math.ceil(4 * sigma))
    x = np.arange(-r, r + 1)
    g = np.exp(-0.5 * x**2 / sigma**2)
    g /= g.sum()
    return np.outer(g, g)


def read_f32(path, w, h):
    """A little-endian float32 row-major plane as float64."""
    return np.fromfile(path, dtype="<f4").reshape(h, w).astype(np.float64)


def rl_psnr_curve(obs, ref, psf, maxit, scored):
    """PSNR (12-bit full scale) of every iteration 1..maxit on ref[scored].

    skimage.restoration.richardson_lucy 0.19.3, unrolled to record every
    iteration (same arithmetic: float64, start 0.5, eps 1e-12, clip at end);
    obs is already divided by 4095.
    """
    est = np.full(obs.shape, 0.5)
    mirror = np.flip(psf)
    curve = []
    for _ in range(maxit):
        conv = convolve(est, psf, mode="same") + 1e-12
        est = est * convolve(obs / conv, mirror, mode="same")
        e = np.clip(est, -1, 1) * 4095.0
        err = (e - ref)[scored]
        curve.append(10 * math.log10(4095.0**2 / np.mean(err**2)))
    return curve


def main():
    d, maxit = sys.argv[1], int(sys.argv[2])
    scenes = json.load(open(d + "/scenes.json"))
    out = {}
    for s in scenes:
        w, h, m = s["width"], s["height"], s["margin"]
        obs = read_f32(d + "/" + s["name"] + ".obs.f32", w, h) / 4095.0
        ref = read_f32(d + "/" + s["name"] + ".ref.f32", w, h)
        out[s["name"]] = rl_psnr_curve(obs, ref, gaussian_psf(s["psf_sigma"]), maxit, np.s_[m:h - m, m:w - m])
    print(json.dumps(out))


if __name__ == "__main__":
    main()
