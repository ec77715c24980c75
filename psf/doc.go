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
package psf
