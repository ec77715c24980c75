#!/usr/bin/python3
"""Reference vectors for limpid's Richardson-Lucy check.

Run with Debian's interpreter (python3-skimage 0.19.3, python3-numpy):
    /usr/bin/python3 testdata/ref/make_rl_reference.py
Writes testdata/ref/rl_skimage.json: for each case the input image, the PSF,
the iteration count and skimage.restoration.richardson_lucy's output
(clip=False so no value is clipped).
"""
import json
import os

import numpy as np
import skimage
from skimage import restoration

assert skimage.__version__ == "0.19.3", skimage.__version__

rng = np.random.RandomState(20261201)
n = 96
# A smooth random image in [0.1, 0.6]: white noise blurred by a 5x5 box, plus
# a bright square (structure with edges).
img = rng.uniform(0.1, 0.6, size=(n, n))
k = np.ones((5, 5)) / 25.0
from scipy.signal import convolve2d

img = convolve2d(img, k, mode="same", boundary="symm")
img[40:56, 30:50] += 0.3

yy, xx = np.mgrid[-2:3, -2:3]
gauss = np.exp(-(xx**2 + yy**2) / (2 * 1.0**2))
gauss /= gauss.sum()
asym = np.exp(-((xx - 0.7) ** 2 / (2 * 0.9**2) + (yy + 0.4) ** 2 / (2 * 1.3**2)))
asym[0, 4] = 0.0
asym /= asym.sum()

cases = []
for name, psf in (("gaussian5x5", gauss), ("asymmetric5x5", asym)):
    it = 5
    out = restoration.richardson_lucy(img, psf, num_iter=it, clip=False)
    cases.append({
        "name": name,
        "width": n,
        "height": n,
        "iterations": it,
        "image": img.ravel().tolist(),
        "psf": psf.ravel().tolist(),
        "psf_size": list(psf.shape),
        "skimage": out.ravel().tolist(),
    })

path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "rl_skimage.json")
with open(path, "w") as f:
    json.dump({"generator": "skimage.restoration.richardson_lucy " + skimage.__version__, "cases": cases}, f)
print("wrote", path)
