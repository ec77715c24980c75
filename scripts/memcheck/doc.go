// Command memcheck measures the peak resident set size of every route of
// limpid on one large single-band UInt16 scene (DEVELOPERS.md, "Memory"):
// restore to a GeoTIFF and to a COG, tiles pack, restore of a tile stream
// (stream to stream, stream to raster, raster to stream), tiles unpack, the
// piped form tiles pack | restore | tiles unpack, and optionally the default
// command (automatic smoothing and stop). Each route runs the limpid binary
// as a child process; its peak RSS is the kernel's ru_maxrss of that child
// (getrusage(2), the figure /usr/bin/time -v prints as "Maximum resident set
// size"), so the generator's own memory is not counted.
//
// Usage, from the repository root:
//
//	go run ./scripts/memcheck [-n 20000] [-dir DIR] [-default] [-routes gtiff,cog,...] [-limit 400]
//
// It builds ./cmd/limpid and makes the scene in DIR (default: a new
// directory under TMPDIR, removed at the end unless -keep): a sharp invented
// pattern written as a 16-bit binary PGM, which limpid simulate blurs, makes noisy and
// writes as a tiled DEFLATE GeoTIFF (its peak RSS is reported too). It runs the
// routes with fixed settings (PSF sigma 0.7, --smooth 0.2 --stop change
// --iterations 2 --tolerance 0: memory does not depend on the iteration
// count) and prints a markdown table of peak RSS and wall time per route.
// It exits 1 when a route fails or exceeds -limit MiB (0: no limit).
//
// Disk: at -n 20000 the scene and each output take about 0.8 GB and the
// streams 1.7 GB each (float32); -routes limits what is run.
package main
