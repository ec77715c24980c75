"""One image's fidelity to a reference over a valid mask, by scikit-image
0.19.3 and numpy (Debian python3-skimage, python3-numpy, python3-scipy): the
outside reference for limpid assess's --reference figures. Imported by
make_assess_reference.py and assess_files_skimage.py.

  - psnr: skimage.metrics.peak_signal_noise_ratio(data_range=L) on the valid
    pixels;
  - ssim: the mean of skimage.metrics.structural_similarity(gaussian_weights=True,
    sigma=1.5, use_sample_covariance=False, data_range=L, full=True)'s map
    (the settings of Wang, Bovik, Sheikh & Simoncelli 2004) over the pixels
    scikit-image keeps (5 or more from the border) whose 11x11 window holds
    only valid pixels (invalid pixels set to 0 first; such windows never
    read them);
  - rmse: sqrt(skimage.metrics.mean_squared_error) on the valid pixels;
    mae, bias: numpy means of |image - reference| and image - reference.
"""
import numpy as np
import skimage
from scipy.ndimage import minimum_filter
from skimage.metrics import mean_squared_error, peak_signal_noise_ratio, structural_similarity

assert skimage.__version__ == "0.19.3", skimage.__version__

RADIUS = 5  # skimage 0.19: truncate 3.5, sigma 1.5 -> int(3.5 * 1.5 + 0.5) = 5


def fidelity(ref, img, valid, L):
    """ref, img: float32 2-D arrays; valid: bool array; L: the peak."""
    r = np.where(valid, ref, 0).astype(np.float64)
    m = np.where(valid, img, 0).astype(np.float64)
    _, smap = structural_similarity(r, m, gaussian_weights=True, sigma=1.5,
                                    use_sample_covariance=False, data_range=L, full=True)
    keep = minimum_filter(valid.astype(np.uint8), size=2 * RADIUS + 1, mode="constant", cval=0) == 1
    keep[:RADIUS, :] = False
    keep[-RADIUS:, :] = False
    keep[:, :RADIUS] = False
    keep[:, -RADIUS:] = False
    rv, mv = ref[valid].astype(np.float64), img[valid].astype(np.float64)
    return {"psnr": float(peak_signal_noise_ratio(rv, mv, data_range=L)),
            "ssim": float(smap[keep].mean()),
            "rmse": float(np.sqrt(mean_squared_error(rv, mv))),
            "mae": float(np.mean(np.abs(mv - rv))),
            "bias": float(np.mean(mv - rv)),
            "ssim_pixels": int(keep.sum())}
