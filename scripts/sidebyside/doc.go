// Command sidebyside times limpid against a general-purpose Richardson-Lucy
// (scikit-image's restoration.richardson_lucy on scipy's convolutions) on
// the same band in one run, and prints the ratio table of issue 13 with
// its targets and PASS or MISS per row.
//
// Usage, from the repository root:
//
//	go run ./scripts/sidebyside [-n 2048] [-workers 2] [-repeat 1] [-demo]
//	    [-dir DIR] [-keep] [-bin PATH] [-python /usr/bin/python3]
//
// Flags:
//
//	-n N        scene width and height in pixels (default 2048)
//	-workers W  --workers of every limpid run (default 2)
//	-repeat R   rounds: every measurement runs once per round, limpid and
//	            scikit-image alternating so both sides of a ratio see the
//	            same load; the fastest round is kept (the peak RSS is the
//	            largest; default 1)
//	-demo       also time `limpid demo` (about a minute)
//	-dir DIR    working directory (default: a new one under TMPDIR,
//	            removed at the end unless -keep)
//	-keep       keep the working directory
//	-bin PATH   a built limpid binary (default: go build ./cmd/limpid)
//	-python P   the Python with scikit-image (default /usr/bin/python3,
//	            Debian's python3-skimage and python3-gdal)
//
// The band is invented: a 1/f-like random field (octaves of bilinearly
// interpolated random grids, each octave's amplitude proportional to its
// grid spacing, so the amplitude spectrum falls about as 1/f) plus random
// rectangular blocks of constant offset, written as a 16-bit binary PGM;
// `limpid simulate --psf gaussian:sigma=1.5 --noise poisson:gain=0.5,read=3
// --quantize UInt16` blurs it and makes it noisy. The non-separable kernel
// is a turned anisotropic Gaussian (gaussian:sx=2.5,sy=1,angle=30) written
// as a kernel file by `limpid psf build`, restored with --psf kernel:FILE.
//
// Each limpid row is the whole command run as a child process (wall time;
// peak RSS from getrusage(2) ru_maxrss of the child). The scikit-image
// rows time only the 20 iterations of richardson_lucy(d / max(d), k,
// num_iter=20, clip=False) on float32 data, as limpid computes (scikit-image
// keeps float32 in float32; float64 data took about twice as long; reading the band and building
// the kernel are not timed), with limpid's own kernels (the Gaussian from
// `limpid psf build gaussian:sigma=1.5`, the same kernel file). Targets
// (issue 13): fixed separable <= 0.2x, kernel file <= 0.3x, default
// command <= 1.0x the Gaussian RL, demo <= 60 s, peak RSS <= 400 MiB.
//
// It installs nothing: it needs the Go toolchain with the cgo build of
// limpid (make build's packages) and, for the scikit-image rows,
// python3-skimage and python3-gdal (make test's packages); without them
// those rows print n/a. Timings on a shared machine are noisy: read the
// ratios (both sides run in the same minute), use -repeat 2 or 3.
package main
