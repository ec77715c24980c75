package main

import (
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"limpid/raster"
	"limpid/raster/gdal"
)

// BenchmarkScene8192 restores an 8192x8192 UInt16 band (PSF sigma 0.7, the
// default 50 iterations, tolerance 0 so every tile does the same work) with 1
// and 2 workers, running the limpid binary as a child process so that its peak
// RSS (getrusage ru_maxrss) is the program's own. Targets (issue): peak RSS
// <= 400 MiB, 2 workers >= 1.8x faster than 1. Needs LIMPID_BENCH_SCENE=1
// (it writes a 128 MiB input and takes a few minutes); run with
// `make bench`.
func BenchmarkScene8192(b *testing.B) {
	if os.Getenv("LIMPID_BENCH_SCENE") == "" {
		b.Skip("set LIMPID_BENCH_SCENE=1")
	}
	const n = 8192
	dir := b.TempDir()
	bin, in := benchScene(b, dir, n)
	var secs [3]float64
	for _, workers := range []string{"1", "2"} {
		out := filepath.Join(dir, "out"+workers+".tif")
		// The fixed-parameter path (the automatic choice adds passes whose
		// cost DEVELOPERS.md measures separately).
		cmd := exec.Command(bin, "restore", "--psf", "gaussian:sigma=0.7", "--smooth", "0.2", "--stop", "change",
			"--iterations", "50", "--tolerance", "0", "--workers", workers, in, out)
		start := time.Now()
		if msg, err := cmd.CombinedOutput(); err != nil {
			b.Fatalf("restore: %v %s", err, msg)
		}
		el := time.Since(start).Seconds()
		rss := cmd.ProcessState.SysUsage().(*syscall.Rusage).Maxrss / 1024
		b.Logf("workers %s: %.1f s, peak RSS %d MiB", workers, el, rss)
		b.ReportMetric(float64(rss), "MiB-peak-rss-w"+workers)
		if workers == "1" {
			secs[1] = el
		} else {
			secs[2] = el
		}
		os.Remove(out)
	}
	b.ReportMetric(secs[1]/secs[2], "speedup-2w")
}

// benchScene builds the limpid binary and writes an n x n UInt16 scene of
// invented relief with noise into dir.
func benchScene(b *testing.B, dir string, n int) (bin, in string) {
	bin = filepath.Join(dir, "limpid")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		b.Fatalf("build: %v %s", err, out)
	}
	in = filepath.Join(dir, "scene.tif")
	meta := raster.Meta{Width: n, Height: n, DataType: "UInt16", Bands: []raster.BandInfo{{Description: "pan"}}}
	w, err := gdal.Create(in, meta, gdal.WriteOptions{Format: gdal.GTiff, DataType: "UInt16"})
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 5))
	rows := make([]float32, n*256)
	for y0 := 0; y0 < n; y0 += 256 {
		for i := range rows {
			x, y := i%n, y0+i/n
			rows[i] = float32(1500 + 800*math.Sin(float64(x)/7)*math.Cos(float64(y)/11) + 30*rng.NormFloat64())
		}
		if err := w.WriteRows(y0, y0+256, [][]float32{rows}); err != nil {
			b.Fatal(err)
		}
	}
	if err := w.Commit(); err != nil {
		b.Fatal(err)
	}
	return bin, in
}

// BenchmarkSceneAuto4096 compares the default automatic choice with the
// fixed default run on a 4096x4096 UInt16 band (64 tiles), 2 workers, child
// process: the scene-scale cost of --smooth auto --stop auto (noise pass and
// choice on 16 sample tiles, then one pass) and its peak RSS. Needs
// LIMPID_BENCH_SCENE=1.
func BenchmarkSceneAuto4096(b *testing.B) {
	if os.Getenv("LIMPID_BENCH_SCENE") == "" {
		b.Skip("set LIMPID_BENCH_SCENE=1")
	}
	dir := b.TempDir()
	bin, in := benchScene(b, dir, 4096)
	run := func(name string, args ...string) float64 {
		out := filepath.Join(dir, name+".tif")
		cmd := exec.Command(bin, append(append([]string{"restore", "--psf", "gaussian:sigma=0.7", "--workers", "2"}, args...), in, out)...)
		start := time.Now()
		if msg, err := cmd.CombinedOutput(); err != nil {
			b.Fatalf("restore %s: %v %s", name, err, msg)
		}
		el := time.Since(start).Seconds()
		rss := cmd.ProcessState.SysUsage().(*syscall.Rusage).Maxrss / 1024
		b.Logf("%s: %.1f s, peak RSS %d MiB", name, el, rss)
		b.ReportMetric(float64(rss), "MiB-peak-rss-"+name)
		os.Remove(out)
		return el
	}
	fixed := run("fixed", "--smooth", "0.2", "--stop", "change")
	auto := run("auto")
	b.ReportMetric(auto/fixed, "cost-auto/fixed")
}
