package main

import (
	"bufio"
	"bytes"
	"flag"
	"fmt"
	"golang.org/x/sys/cpu"
	"log"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"runtime"
	"strconv"
	"strings"

	"limpid/scripts/internal/measure"
)

// kernelRow is a throughput row of the table, read from one benchmark of
// ./step and its variants.
type kernelRow struct {
	what  string // the row's label
	bench string // the top-level benchmark
	unit  string // the metric go test reports
	scale float64
	shown string // the unit shown
}

// kernelRows are the benchmarks the table shows. Each runs one tile on
// one goroutine, so its rate is per core. A new path is one more row.
var kernelRows = []kernelRow{
	{"grid EMS, separable (Gaussian sigma 1.5, 13 taps)", "BenchmarkGridEMS512", "Mpix-iter/s", 1, "Mpix-iter/s per core"},
	{"grid EMS, direct (turned Gaussian 1.0 x 0.5, 9 x 7 taps)", "BenchmarkGridEMS512Direct", "Mpix-iter/s", 1, "Mpix-iter/s per core"},
	{"grid EMS, large kernel (turned Gaussian 1.5 x 0.8, 13 x 9 taps, FFT)", "BenchmarkGridEMS512FFT", "Mpix-iter/s", 1, "Mpix-iter/s per core"},
	{"grid EMS, large kernel (turned Gaussian 2.5 x 1.0, 19 x 15 taps, FFT)", "BenchmarkGridEMS512FFTLarge", "Mpix-iter/s", 1, "Mpix-iter/s per core"},
	{"risk-carrying iteration of the automatic choice (512 x 512, DCT risk every iteration)", "BenchmarkRiskIteration512", "Mpix-iter/s", 1, "Mpix-iter/s per core"},
	{"particle EMS (16 per pixel, 4 clouds)", "BenchmarkParticleEMS512", "Mpart-iter/s", 1, "M particle-iter/s per core"},
}

// variants are the table's columns for the kernel rows: the default build
// (BenchmarkX itself), and sub-benchmarks BenchmarkX/NAME when the package
// has them (the portable Go path and the vector path); a variant the
// benchmark does not have prints n/a. portable also takes a second run
// with -portable-env set, when given.
var variants = []struct {
	name string
	subs []string
}{
	{"default build", nil},
	{"portable", []string{"portable", "scalar", "generic"}},
	{"vector", []string{"vector", "avx2", "simd"}},
}

func main() {
	benchtime := flag.String("benchtime", "10x", "go test -benchtime of the kernel benchmarks")
	count := flag.Int("count", 1, "go test -count of the kernel benchmarks (the best run is kept)")
	portableEnv := flag.String("portable-env", "", "NAME=VALUE forcing the portable path: the kernel benchmarks run again with it for the portable column")
	sizes := flag.String("sizes", "2048,4096", "scene sizes of the whole-command rows, comma-separated (empty: none)")
	workers := flag.Int("workers", 2, "--workers of the whole-command runs")
	repeat := flag.Int("repeat", 1, "runs per whole-command measurement; the fastest is kept")
	dir := flag.String("dir", "", "working directory of the whole-command runs (default: a new one under TMPDIR, removed at the end)")
	bin := flag.String("bin", "", "a built limpid binary (default: go build ./cmd/limpid)")
	flag.Parse()
	log.SetFlags(0)
	log.SetPrefix("bench: ")

	loadStart := measure.Load()
	var pat []string
	for _, r := range kernelRows {
		pat = append(pat, r.bench, r.bench+"Portable")
	}
	regex := "^(" + strings.Join(pat, "|") + ")$"
	log.Printf("go test -bench '%s' ./step", regex)
	res, err := goBench(regex, *benchtime, *count, nil)
	if err != nil {
		log.Fatal(err)
	}
	var portable map[string]float64
	if *portableEnv != "" {
		log.Printf("again with %s", *portableEnv)
		if portable, err = goBench(regex, *benchtime, *count, []string{*portableEnv}); err != nil {
			log.Fatal(err)
		}
	}

	var scenes []sceneResult
	if strings.TrimSpace(*sizes) != "" {
		if scenes, err = wholeCommand(*sizes, *workers, *repeat, *dir, *bin); err != nil {
			log.Fatal(err)
		}
	}

	fmt.Printf("limpid benchmarks: %s, %s/%s, %d CPUs (GOMAXPROCS %d), load average %s at the start, %s at the end; kernel rows: go test -bench ./step -benchtime %s (best of %d)\n\n",
		runtime.Version(), runtime.GOOS, runtime.GOARCH, runtime.NumCPU(), runtime.GOMAXPROCS(0), loadStart, measure.Load(), *benchtime, *count)
	fmt.Println("| measurement | variant | value | unit |")
	fmt.Println("|---|---|---|---|")
	for _, r := range kernelRows {
		for _, v := range variants {
			val, ok := 0.0, false
			if v.subs == nil {
				val, ok = res[r.bench+" "+r.unit]
			}
			for _, s := range v.subs {
				if x, found := res[r.bench+"/"+s+" "+r.unit]; found {
					val, ok = x, true
					break
				}
			}
			if !ok && v.name == "portable" {
				// step's twins that force package vec's portable kernels.
				val, ok = res[r.bench+"Portable "+r.unit]
			}
			if !ok && v.name == "portable" && portable != nil {
				val, ok = portable[r.bench+" "+r.unit]
			}
			if !ok && v.name == "vector" && vectorCPU() {
				// The default build takes the vector kernels on this CPU.
				val, ok = res[r.bench+" "+r.unit]
			}
			cell := "n/a"
			if ok {
				cell = strconv.FormatFloat(val*r.scale, 'f', 1, 64)
			}
			fmt.Printf("| %s | %s | %s | %s |\n", r.what, v.name, cell, r.shown)
		}
	}
	for _, s := range scenes {
		fmt.Printf("| default / fixed cost, %d x %d UInt16 (default %.1f s, fixed %.1f s) | default build | %.1f | ratio |\n",
			s.n, s.n, s.auto.Seconds, s.fixed.Seconds, s.auto.Seconds/s.fixed.Seconds)
		fmt.Printf("| peak RSS, %d x %d (the larger of fixed %d MiB and default %d MiB) | default build | %d | MiB |\n",
			s.n, s.n, s.fixed.RSSMiB, s.auto.RSSMiB, max(s.fixed.RSSMiB, s.auto.RSSMiB))
	}
	if len(scenes) > 0 {
		fmt.Printf("\nWhole command (best of %d): limpid restore as a child process, --workers %d; fixed: %s; default: %s (peak RSS: getrusage ru_maxrss of the child).\n",
			*repeat, *workers, strings.Join(fixedArgs, " "), strings.Join(defaultArgs, " "))
	}
}

// benchLine matches a benchmark result line: the name (with the
// -GOMAXPROCS suffix go test adds) and iterations, then value-unit pairs.
var benchLine = regexp.MustCompile(`^(Benchmark\S+?)(-\d+)?\s+\d+\s+(.*)$`)

// goBench runs the benchmarks matching regex in ./step and returns the
// largest value per "name unit" over the -count runs.
func goBench(regex, benchtime string, count int, env []string) (map[string]float64, error) {
	c := exec.Command("go", "test", "-run", "^$", "-bench", regex, "-benchtime", benchtime, "-count", fmt.Sprint(count), "./step")
	c.Env = append(os.Environ(), env...)
	var e bytes.Buffer
	c.Stderr = &e
	out, err := c.Output()
	if err != nil {
		return nil, fmt.Errorf("go test -bench: %v\n%s%s", err, out, e.String())
	}
	return parseBench(out), nil
}

// parseBench reads go test -bench output (testing package's format:
// "BenchmarkName-P  N  v1 unit1  v2 unit2 ...").
func parseBench(out []byte) map[string]float64 {
	res := map[string]float64{}
	sc := bufio.NewScanner(bytes.NewReader(out))
	for sc.Scan() {
		m := benchLine.FindStringSubmatch(sc.Text())
		if m == nil {
			continue
		}
		f := strings.Fields(m[3])
		for i := 0; i+1 < len(f); i += 2 {
			v, err := strconv.ParseFloat(f[i], 64)
			if err != nil {
				continue
			}
			k := m[1] + " " + f[i+1]
			if old, ok := res[k]; !ok || v > old {
				res[k] = v
			}
		}
	}
	return res
}

// The whole-command runs: limpid's fixed 20 iterations and the default
// command (issue 13's side-by-side settings).
var (
	fixedArgs   = []string{"--psf", "gaussian:sigma=1.5", "--smooth", "0", "--stop", "change", "--tolerance", "0", "--iterations", "20"}
	defaultArgs = []string{"--psf", "gaussian:sigma=1.5"}
)

type sceneResult struct {
	n           int
	fixed, auto measure.Result
}

// wholeCommand times the fixed and the default command on an invented n x
// n UInt16 band per size.
func wholeCommand(sizes string, workers, repeat int, dir, bin string) ([]sceneResult, error) {
	if dir == "" {
		d, err := os.MkdirTemp("", "limpid-bench-")
		if err != nil {
			return nil, err
		}
		defer os.RemoveAll(d)
		dir = d
	}
	if bin == "" {
		var err error
		if bin, err = measure.Build(dir); err != nil {
			return nil, err
		}
	}
	var out []sceneResult
	for _, s := range strings.Split(sizes, ",") {
		n, err := strconv.Atoi(strings.TrimSpace(s))
		if err != nil || n < 64 {
			return nil, fmt.Errorf("-sizes: %q is not a size of at least 64", s)
		}
		in := filepath.Join(dir, fmt.Sprintf("scene%d.tif", n))
		log.Printf("%d x %d: writing the band", n, n)
		if _, err := measure.Scene(bin, in, n, "gaussian:sigma=1.5", "poisson:gain=0.5,read=3"); err != nil {
			return nil, err
		}
		w := []string{"--workers", fmt.Sprint(workers)}
		r := sceneResult{n: n}
		out1 := filepath.Join(dir, "out.tif")
		log.Printf("%d x %d: fixed", n, n)
		if r.fixed, err = measure.Best(repeat, bin, append(append(append([]string{"restore"}, fixedArgs...), w...), in, out1)...); err != nil {
			return nil, err
		}
		log.Printf("%d x %d: default", n, n)
		if r.auto, err = measure.Best(repeat, bin, append(append(append([]string{"restore"}, defaultArgs...), w...), in, out1)...); err != nil {
			return nil, err
		}
		os.Remove(out1)
		os.Remove(in)
		out = append(out, r)
	}
	return out, nil
}

// vectorCPU reports whether this CPU has what package vec's kernels use
// (AVX2 and FMA, read by golang.org/x/sys/cpu as vec does at start-up).
func vectorCPU() bool { return cpu.X86.HasAVX2 && cpu.X86.HasFMA }
