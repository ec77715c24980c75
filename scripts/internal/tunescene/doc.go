// Package tunescene builds the invented scenes of the measurement programs
// scripts/tune and scripts/autotune (DEVELOPERS.md, "Choosing the defaults"
// and "Automatic regularisation"): six contents (field parcels in red and
// NIR, river and roads, the calibration tarp with point targets, an invented
// town, smooth relief) x Gaussian blur sigma 1, 1.5, 2 x two
// Poisson-Gaussian noise levels, 12-bit.
package tunescene
