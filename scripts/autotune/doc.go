// Command autotune is the measurement behind --smooth auto and --stop auto
// (DEVELOPERS.md, "Automatic regularisation"). On the tuning scenes
// (scripts/internal/tunescene, 192 x 192) it compares the automatic choice
// (global and per tile), the discrepancy stop and the fixed default pair
// against the oracle: the best PSNR against the reference (interior, 16 px
// margin) over eps in step.AutoSmooths x iterations 1..200. Costs are wall
// time ratios on one worker.
//
// Usage, from the repository root (about 2 minutes on 2 cores):
//
//	go run ./scripts/autotune [-out FILE.md] [-scenes SUBSTRING]
//
// It prints the markdown table (and writes it to -out) and the bars (mean
// loss <= 0.1 dB, worst <= 0.3 dB, cost <= 5x the fixed default run, noise
// variance ratio 0.9-1.1) as met or missed; it reports, it does not fail.
package main
