// Package noise estimates the noise of an observed band from the image
// itself: Immerkaer's single Gaussian sigma (Immerkaer, "Fast noise variance
// estimation", CVIU 64(2):300-302, 1996) and a per-scene Poisson-Gaussian
// model var(d) = a d + b fitted from local residuals binned by local mean,
// after the idea of Foi, Trimeche, Katkovnik & Egiazarian (IEEE TIP
// 17(10):1737-1754, 2008), simplified (robust MAD variance per bin over the
// smoother half of its pixels, weighted least squares through the bins).
//
// The restoration engine (package step) pools Samplers over sample tiles
// and uses the Model in its automatic choice and discrepancy stop.
package noise
