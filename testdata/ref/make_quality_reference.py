#!/usr/bin/python3
"""Reference vectors for limpid's PSNR and SSIM (step.PSNR, step.SSIM).

Run with Debian's interpreter (python3-skimage 0.19.3, python3-numpy):
    /usr/bin/python3 testdata/ref/make_quality_reference.py
Writes testdata/ref/quality_skimage.json: for each case two images (float32
values, row-major), the peak L and scikit-image's
structural_similarity(gaussian_weights=True, sigma=1.5,
use_sample_covariance=False, data_range=L) (the settings of Wang, Bovik,
Sheikh & Simoncelli 2004) and peak_signal_noise_ratio(data_range=L).
"""
import json
import os

import numpy as np
import skimage
from scipy.ndimage import gaussian_filter
from skimage.metrics import peak_signal_noise_ratio, structural_similarity

assert skimage.__version__ == "0.19.3", skimage.__version__

rng = np.random.RandomState(20261202)
cases = []


def add(name, ref, img, L):
    ref = ref.astype(np.float32)
    img = img.astype(np.float32)
    r64, i64 = ref.astype(np.float64), img.astype(np.float64)
    ssim = structural_similarity(r64, i64, gaussian_weights=True, sigma=1.5,
                                 use_sample_covariance=False, data_range=L)
    psnr = peak_signal_noise_ratio(r64, i64, data_range=L)
    cases.append({"name": name, "width": ref.shape[1], "height": ref.shape[0], "L": L,
                  "ref": [float(v) for v in ref.ravel()], "img": [float(v) for v in img.ravel()],
                  "ssim": float(ssim), "psnr": float(psnr)})


# 8-bit-like texture with additive noise.
h, w = 40, 48
base = gaussian_filter(rng.uniform(0, 255, size=(h, w)), 2.0)
base = (base - base.min()) / (base.max() - base.min()) * 200 + 20
add("texture+noise L=255", base, base + rng.normal(0, 8, size=(h, w)), 255.0)
# 12-bit blocks, blurred (structure loss), non-square.
h, w = 37, 29
blk = np.kron(rng.uniform(200, 3800, size=(5, 4)), np.ones((8, 8)))[:h, :w]
add("blocks blurred L=4095", blk, gaussian_filter(blk, 1.3, mode="reflect"), 4095.0)
# Float reflectance, contrast change and offset, L = max - min of the reference.
h, w = 33, 33
refl = gaussian_filter(rng.uniform(0, 1, size=(h, w)), 1.0) * 0.6
L = float(refl.astype(np.float32).max() - refl.astype(np.float32).min())
add("reflectance contrast L=range", refl, 0.8 * refl + 0.02 + rng.normal(0, 0.01, size=(h, w)), L)

out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "quality_skimage.json")
with open(out, "w") as f:
    json.dump({"generator": "scikit-image " + skimage.__version__, "cases": cases}, f)
print("wrote", out)
