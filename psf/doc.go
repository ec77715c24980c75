// Package psf builds and validates point-spread functions (PSFs) for limpid.
//
// A PSF here maps the scene as an ideal sensor on the same pixel grid would
// record it (pixel-integrated, nothing else) to the observation, so the pixel
// aperture is never part of a kernel. Kernels are odd-sized, non-negative and
// normalised to sum 1.
//
// The package is pure Go: it knows nothing of GDAL or Arrow. Reading a kernel
// from a raster file is delegated to a loader the caller injects (see Env).
//
// Gaussian MTF relation used in documentation and checks: for a Gaussian PSF of
// standard deviation sigma pixels, MTF(f) = exp(-2 pi^2 sigma^2 f^2) with f in
// cycles per pixel (the Fourier transform of a Gaussian).
//
// Sensor models (mtf.go, models.go) follow the linear-systems cascade: the
// system transfer function is the product of the parts' (Boreman, Modulation
// Transfer Function in Optical and Electro-Optical Systems, SPIE 2001):
// diffraction by a circular pupil (Goodman, Introduction to Fourier Optics,
// sec. 6.3; annular pupil: O'Neill, JOSA 46:285, 1956), detector footprint,
// linear smear and Gaussian blur. Products are written part*part*... .
//
// Measurement (measure.go) implements the slanted-edge e-SFR of ISO 12233
// (Electronic still picture imaging - Resolution and spatial frequency
// responses) and a 2-D Gaussian fit to point targets.
package psf
