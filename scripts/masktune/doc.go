// Command masktune measures the automatic choice (--smooth auto --stop auto)
// on scenes whose valid area is not the whole rectangle (DEVELOPERS.md,
// "Automatic regularisation", "Nodata collars and footprints"). On the
// tuning scenes (scripts/internal/tunescene, 192 x 192, PSF sigma 1.5,
// noise level n0) it masks a nodata collar of 1, 3, 8 or 16 pixels, or
// the corners of a footprint turned 5, 15 or 30 degrees, and compares the
// default restore with limpid's oracle: the best PSNR against the
// reference over eps in step.AutoSmooths x iterations 1..200 (valid pixels
// at least 16 px from the scene border). The "tiled" geometry restores the
// 8-pixel collar in 96-pixel tiles (4 tiles plus halo) against the same
// whole-scene oracle.
//
// With -rl DIR it also writes each case (observed with nodata filled by the
// valid mean, as a user of a general-purpose library would, the reference
// and the scored pixels) for scripts/rl_psnr_masked.py, which scores
// scikit-image's Richardson-Lucy at its best iteration.
//
// Usage, from the repository root (several minutes on 2 cores):
//
//	go run ./scripts/masktune [-out FILE.md] [-scenes SUBSTRING] [-rl DIR]
//
// It prints the markdown table (and writes it to -out) with the mean and
// worst loss per geometry; it reports, it does not fail.
package main
