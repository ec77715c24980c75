// Command tune is the measurement behind step.DefaultSmooth and
// step.DefaultIterations (DEVELOPERS.md, "Choosing the defaults"): grid EMS
// over a sweep of smoothing bandwidths and iteration counts on the tuning
// scenes (scripts/internal/tunescene, 160 x 160), against scikit-image
// 0.19.3's richardson_lucy per iteration (Debian python3-skimage, through
// scripts/rl_psnr.py, whose loop is bit-identical to the library function).
//
// Usage, from the repository root (about 20 s):
//
//	go run ./scripts/tune [-out FILE.md]
//
// It prints the markdown tables (and writes them to -out) and says whether
// the defaults meet the target (at least RL@20 and within 0.5 dB of RL's
// best iteration count on every scene); it reports, it does not fail.
package main
