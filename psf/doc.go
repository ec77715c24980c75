// Package psf builds, measures and validates point-spread functions (PSFs)
// for limpid: the kernels the restoration engine deconvolves with, and the
// measurement of those kernels from the scene itself.
//
// A PSF here maps the scene as an ideal sensor on the same pixel grid would
// record it (pixel-integrated, nothing else) to the observation, so the pixel
// aperture is never part of a kernel. Kernels are odd-sized, non-negative and
// normalised to sum 1.
//
// The package is pure Go: it knows nothing of GDAL or Arrow. Reading a kernel
// from a raster file is delegated to a loader the caller injects (see Env);
// measurements take float32 planes (NaN = invalid).
//
// Gaussian MTF relation used in documentation, fits and checks: for a
// Gaussian PSF of standard deviation sigma pixels, MTF(f) =
// exp(-2 pi^2 sigma^2 f^2) with f in cycles per pixel (the Fourier transform
// of a Gaussian).
//
// Building (spec.go, models.go, mtf.go, gaussian.go, kernel.go): sensor
// models follow the linear-systems cascade, the system transfer function
// being the product of the parts' (Boreman, Modulation Transfer Function in
// Optical and Electro-Optical Systems, SPIE 2001): diffraction by a circular
// pupil (Goodman, Introduction to Fourier Optics, sec. 6.3; annular pupil:
// O'Neill, JOSA 46:285, 1956), detector footprint, linear smear and Gaussian
// blur. Products are written part*part*... .
//
// Measuring (measure.go, sfr.go, point.go):
//   - MeasureEdge implements the slanted-edge e-SFR of ISO 12233:2017
//     (Photography - Electronic still picture imaging - Resolution and
//     spatial frequency responses), in the stages of Burns' sfrmat
//     description (Burns, "Slanted-edge MTF for digital camera and scanner
//     analysis", Proc. IS&T PICS 2000, pp. 135-138), and fits
//     exp(-2 pi^2 s^2 f^2) |sinc f| to the e-SFR for the restoration sigma s.
//   - MeasurePoint fits a pixel-integrated 2-D Gaussian to a point target by
//     Levenberg-Marquardt least squares (Marquardt, J. SIAM 11:431, 1963).
//
// Automatic measurement (auto.go, combine.go, noise.go): FindEdges searches a
// plane for straight edges fit for MeasureEdge, MeasureAuto measures them and
// Combine merges several measurements into one estimate (per-axis median with
// MAD-based outlier rejection; Rousseeuw & Croux, JASA 88:1273, 1993).
// SceneNoise is the robust pixel-noise estimate the search judges edges
// against (MAD of second differences).
package psf
