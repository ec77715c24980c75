package main

import (
	"encoding/json"
	"flag"
	"fmt"
	"log"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"

	"limpid/scripts/internal/measure"
)

// rlScript times scikit-image's Richardson-Lucy: argv is the band, the
// repeat count and kernel files by name; it prints {name: best seconds}.
// Only the richardson_lucy call is timed.
const rlScript = `
import json, sys, time
import numpy as np
from osgeo import gdal
from skimage.restoration import richardson_lucy
gdal.UseExceptions()
ds = gdal.Open(sys.argv[1])
# ReadRaster and numpy rather than ReadAsArray: Debian's gdal_array
# crashed in this process once scikit-image was loaded.
# float32, as limpid computes: scikit-image keeps float32 input in float32
# (float64 input took about twice as long here).
raw = ds.GetRasterBand(1).ReadRaster(buf_type=gdal.GDT_Float32)
d = np.frombuffer(raw, dtype=np.float32).reshape(ds.RasterYSize, ds.RasterXSize).copy()
d = d / d.max()
rep = int(sys.argv[2])
out = {}
for spec in sys.argv[3:]:
    name, path = spec.split("=", 1)
    k = np.loadtxt(path, comments="#").astype(np.float32)
    best = None
    for _ in range(rep):
        t = time.perf_counter()
        richardson_lucy(d, k, num_iter=20, clip=False)
        el = time.perf_counter() - t
        best = el if best is None else min(best, el)
    out[name] = best
print(json.dumps(out))
`

func main() {
	n := flag.Int("n", 2048, "scene width and height in pixels")
	workers := flag.Int("workers", 2, "--workers of every limpid run")
	repeat := flag.Int("repeat", 1, "runs per measurement; the fastest is kept")
	demo := flag.Bool("demo", false, "also time limpid demo")
	dir := flag.String("dir", "", "working directory (default: a new one under TMPDIR, removed at the end)")
	keep := flag.Bool("keep", false, "keep the working directory")
	bin := flag.String("bin", "", "a built limpid binary (default: go build ./cmd/limpid)")
	python := flag.String("python", "/usr/bin/python3", "the Python with scikit-image and GDAL")
	flag.Parse()
	log.SetFlags(0)
	log.SetPrefix("sidebyside: ")
	if *n < 64 {
		log.Fatal("-n must be at least 64")
	}
	d, removeDir, err := measure.WorkDir(*dir, "limpid-sidebyside-", *keep)
	if err != nil {
		log.Fatal(err)
	}
	defer removeDir()
	*dir = d
	if err := run(*dir, *bin, *python, *n, *workers, *repeat, *demo); err != nil {
		log.Print(err)
		removeDir() // os.Exit skips the deferred call
		os.Exit(1)
	}
}

func run(dir, bin, python string, n, workers, repeat int, demo bool) error {
	if bin == "" {
		var err error
		if bin, err = measure.Build(dir); err != nil {
			return err
		}
	}
	loadStart := measure.Load()
	p := func(name string) string { return filepath.Join(dir, name) }
	in := p("observed.tif")
	log.Printf("writing the %d x %d band", n, n)
	if _, err := measure.Scene(bin, in, n, "gaussian:sigma=1.5", "poisson:gain=0.5,read=3"); err != nil {
		return err
	}
	gauss, aniso := p("gauss.txt"), p("turned.txt")
	for _, k := range [][2]string{{"gaussian:sigma=1.5", gauss}, {"gaussian:sx=2.5,sy=1,angle=30", aniso}} {
		if _, err := measure.Run(bin, "psf", "build", k[0], k[1]); err != nil {
			return err
		}
	}
	w := fmt.Sprint(workers)
	fixed := []string{"--smooth", "0", "--stop", "change", "--tolerance", "0", "--iterations", "20", "--workers", w}
	runs := []struct {
		name string
		args []string
	}{
		{"fixed", append(append([]string{"restore", "--psf", "gaussian:sigma=1.5"}, fixed...), in, p("fixed.tif"))},
		{"kernel", append(append([]string{"restore", "--psf", "kernel:" + aniso}, fixed...), in, p("kernel.tif"))},
		{"default", []string{"restore", "--psf", "gaussian:sigma=1.5", "--workers", w, in, p("default.tif")}},
	}
	if demo {
		runs = append(runs, struct {
			name string
			args []string
		}{"demo", []string{"demo", "--out", p("demo")}})
	}
	// Rounds: every measurement once per round, limpid and scikit-image
	// alternating, so that both sides of a ratio see the same load; each
	// keeps its fastest round (and the largest peak RSS).
	res := map[string]measure.Result{}
	rl := map[string]float64{}
	var rlErr error
	rss := 0
	for round := 1; round <= max(repeat, 1); round++ {
		for _, r := range runs {
			log.Printf("round %d: limpid %s", round, r.name)
			m, err := measure.Run(bin, r.args...)
			if err != nil {
				return err
			}
			if old, ok := res[r.name]; !ok || m.Seconds < old.Seconds {
				res[r.name] = m
			}
			rss = max(rss, m.RSSMiB)
			os.RemoveAll(r.args[len(r.args)-1])
		}
		if rlErr != nil {
			continue
		}
		log.Printf("round %d: scikit-image richardson_lucy", round)
		var got map[string]float64
		if got, rlErr = richardsonLucy(python, in, map[string]string{"gauss": gauss, "kernel": aniso}); rlErr != nil {
			log.Printf("scikit-image rows: n/a (%v)", rlErr)
			rl = nil
			continue
		}
		for k, v := range got {
			if old, ok := rl[k]; !ok || v < old {
				rl[k] = v
			}
		}
	}
	fmt.Printf("Side by side, %d x %d UInt16 band (1/f-like field + blocks, blurred gaussian:sigma=1.5, noise poisson:gain=0.5,read=3), "+
		"limpid --workers %d (whole command), scikit-image richardson_lucy 20 iterations (iterations only); best of %d rounds; %s, %d CPUs, load average %s at the start, %s at the end\n\n",
		n, n, workers, repeat, runtime.Version(), runtime.NumCPU(), loadStart, measure.Load())
	fmt.Println("| run | limpid (s) | scikit-image RL, 20 it (s) | ratio | target | result |")
	fmt.Println("|---|---|---|---|---|---|")
	row := func(what, name, rlName string, target float64) {
		m := res[name]
		r, ok := rl[rlName]
		if !ok {
			fmt.Printf("| %s | %.2f | n/a | n/a | <= %.1fx | n/a |\n", what, m.Seconds, target)
			return
		}
		ratio := m.Seconds / r
		fmt.Printf("| %s | %.2f | %.2f | %.2f | <= %.1fx | %s |\n", what, m.Seconds, r, ratio, target, verdict(ratio <= target))
	}
	row("fixed 20 iterations, gaussian:sigma=1.5 (separable), `--smooth 0 --stop change --tolerance 0`", "fixed", "gauss", 0.2)
	row("fixed 20 iterations, turned anisotropic Gaussian as a kernel file (non-separable)", "kernel", "kernel", 0.3)
	row("the default command (automatic smoothing and stop), sigma 1.5; RL: its 20 iterations", "default", "gauss", 1.0)
	if demo {
		fmt.Printf("| `limpid demo` | %.1f | - | - | <= 60 s | %s |\n", res["demo"].Seconds, verdict(res["demo"].Seconds <= 60))
	}
	fmt.Printf("| peak RSS, largest limpid run | %d MiB | - | - | <= 400 MiB | %s |\n", rss, verdict(rss <= 400))
	return nil
}

func verdict(ok bool) string {
	if ok {
		return "PASS"
	}
	return "MISS"
}

// richardsonLucy runs rlScript under python on the band with each named
// kernel file and returns the best seconds per name.
func richardsonLucy(python, band string, kernels map[string]string) (map[string]float64, error) {
	args := []string{"-c", rlScript, band, "1"}
	for name, path := range kernels {
		args = append(args, name+"="+path)
	}
	c := exec.Command(python, args...)
	// numpy and scipy run with their defaults, as a library user's would
	// (scipy.fft, which scipy.signal's convolutions use, runs one thread
	// unless given workers: recalled from scipy's documentation).
	var e strings.Builder
	c.Stderr = &e
	out, err := c.Output()
	if err != nil {
		return nil, fmt.Errorf("%s: %v: %s", python, err, strings.TrimSpace(e.String()))
	}
	m := map[string]float64{}
	if err := json.Unmarshal(out, &m); err != nil {
		return nil, fmt.Errorf("%s printed %q: %v", python, out, err)
	}
	return m, nil
}
