// Command bench runs limpid's throughput benchmarks and whole-command
// measurements and prints one markdown table (make bench; DEVELOPERS.md,
// "Benchmarks"):
//
//   - Mpix-iter/s per core of grid EMS on a 512 x 512 tile for the
//     separable, direct and large-kernel paths (BenchmarkGridEMS512,
//     BenchmarkGridEMS512Direct, BenchmarkGridEMS512FFT in ./step);
//   - million particle-iterations/s per core of the particle method
//     (BenchmarkParticleEMS512);
//   - the cost of the default command (automatic smoothing and stop)
//     over the fixed 20 iterations, whole command, on invented UInt16
//     bands of each -sizes (2048 and 4096 by default), and the peak RSS of
//     those runs (getrusage(2) ru_maxrss of the child process).
//
// Each kernel row has a line per variant: "default build" is the benchmark
// itself; "portable" and "vector" are its sub-benchmarks
// BenchmarkX/portable (or /scalar, /generic) and BenchmarkX/vector (or
// /avx2, /simd) when the package has them, else n/a. A new path is one
// more entry in kernelRows, a new variant one more in variants.
//
// Usage, from the repository root:
//
//	go run ./scripts/bench [-benchtime 10x] [-count 1] [-portable-env NAME=VALUE]
//	    [-sizes 2048,4096] [-workers 2] [-repeat 1] [-dir DIR] [-bin PATH]
//
// Flags:
//
//	-benchtime T       go test -benchtime of the kernel benchmarks (default 10x)
//	-count N           go test -count; the best of the N runs is kept (default 1)
//	-portable-env E    NAME=VALUE that forces the portable Go path: the
//	                   kernel benchmarks run a second time with it in the
//	                   environment for the portable variant (when the
//	                   benchmarks have no /portable sub-benchmark)
//	-sizes LIST        scene sizes of the whole-command rows (default
//	                   2048,4096; -sizes 2048 skips the 4096^2 part, about 3
//	                   minutes less; -sizes '' skips them all)
//	-workers W         --workers of the whole-command runs (default 2)
//	-repeat R          run each whole-command measurement R times and keep
//	                   the fastest (peak RSS: the largest; default 1)
//	-dir DIR           working directory for the scenes (default: a new
//	                   one under TMPDIR, removed at the end)
//	-bin PATH          a built limpid binary (default: go build ./cmd/limpid)
//
// The scenes are scripts/sidebyside's band (a 1/f-like field and blocks,
// blurred by limpid simulate with gaussian:sigma=1.5 and Poisson-Gaussian
// noise); fixed is restore --psf gaussian:sigma=1.5 --smooth 0 --stop
// change --tolerance 0 --iterations 20, default restore --psf
// gaussian:sigma=1.5. Timings on a shared machine are noisy: compare rows
// of one run, use -count 3 for the kernel rows.
package main
