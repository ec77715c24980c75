package main

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"flag"
	"fmt"
	lm "limpid/scripts/internal/measure"
	"log"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"syscall"
	"time"
)

// fixed are the restoration settings of every route but "default": a fixed
// pair and two iterations (the buffers do not depend on the iteration
// count; the run time does).
var fixed = []string{"--psf", "gaussian:sigma=0.7", "--smooth", "0.2", "--stop", "change", "--iterations", "2", "--tolerance", "0"}

// route is one measured command line (or pipeline of them).
type route struct {
	name string
	desc string
	// needs names the file an earlier route leaves (the scene is always
	// there).
	needs string
	// makes is the file the route leaves for later routes (kept until the
	// last route that needs it has run).
	makes string
	// cmds are the processes; more than one are piped stdout to stdin.
	cmds [][]string
}

func routes(in string, dir string) []route {
	p := func(name string) string { return filepath.Join(dir, name) }
	restore := func(extra ...string) []string { return append(append([]string{"restore"}, fixed...), extra...) }
	return []route{
		{name: "gtiff", desc: "restore, GeoTIFF output", cmds: [][]string{restore(in, p("out.tif"))}},
		{name: "cog", desc: "restore --format cog", cmds: [][]string{restore("--format", "cog", in, p("out_cog.tif"))}},
		{name: "pack", desc: "tiles pack", makes: p("packed.arrows"), cmds: [][]string{{"tiles", "pack", in, p("packed.arrows")}}},
		{name: "stream", desc: "restore --input-format arrow --output-format arrow", needs: p("packed.arrows"), makes: p("restored.arrows"),
			cmds: [][]string{restore("--input-format", "arrow", "--output-format", "arrow", p("packed.arrows"), p("restored.arrows"))}},
		{name: "unpack", desc: "tiles unpack (a restored stream)", needs: p("restored.arrows"), cmds: [][]string{{"tiles", "unpack", p("restored.arrows"), p("unpacked.tif")}}},
		{name: "arrow2raster", desc: "restore --input-format arrow (GeoTIFF output)", needs: p("packed.arrows"),
			cmds: [][]string{restore("--input-format", "arrow", p("packed.arrows"), p("a2r.tif"))}},
		{name: "raster2arrow", desc: "restore --output-format arrow", cmds: [][]string{restore("--output-format", "arrow", in, p("r2a.arrows"))}},
		{name: "pipe", desc: "tiles pack - \\| restore (arrow) - - \\| tiles unpack -", cmds: [][]string{
			{"tiles", "pack", in, "-"},
			restore("--input-format", "arrow", "--output-format", "arrow", "-", "-"),
			{"tiles", "unpack", "-", p("piped.tif")}}},
		{name: "default", desc: "restore with the defaults (automatic smoothing and stop)",
			cmds: [][]string{{"restore", "--psf", "gaussian:sigma=0.7", in, p("default.tif")}}},
	}
}

func main() {
	n := flag.Int("n", 20000, "scene width and height in pixels")
	dir := flag.String("dir", "", "working directory (default: a new one under TMPDIR, removed at the end)")
	keep := flag.Bool("keep", false, "keep the working directory")
	withDefault := flag.Bool("default", false, "also run the default command (automatic choice: much slower)")
	only := flag.String("routes", "", "comma-separated routes to run (default: all but default)")
	limit := flag.Int("limit", 400, "fail when a route's peak RSS exceeds this many MiB (0: no limit)")
	bin := flag.String("bin", "", "a built limpid binary (default: go build ./cmd/limpid)")
	workers := flag.Int("workers", 2, "--workers of every restore (LIMPID_WORKERS)")
	flag.Parse()
	log.SetFlags(0)
	log.SetPrefix("memcheck: ")
	if *n < 64 {
		log.Fatal("-n must be at least 64")
	}
	d, removeDir, err := lm.WorkDir(*dir, "limpid-memcheck-", *keep)
	if err != nil {
		log.Fatal(err)
	}
	defer removeDir()
	*dir = d
	if *bin == "" {
		*bin = filepath.Join(*dir, "limpid")
		if out, err := exec.Command("go", "build", "-o", *bin, "./cmd/limpid").CombinedOutput(); err != nil {
			log.Fatalf("go build ./cmd/limpid (run from the repository root): %v\n%s", err, out)
		}
	}
	in := filepath.Join(*dir, fmt.Sprintf("scene%d.tif", *n))
	simRSS := 0
	if _, err := os.Stat(in); err != nil {
		start := time.Now()
		if simRSS, err = writeScene(*bin, in, *n); err != nil {
			log.Fatal(err)
		}
		log.Printf("wrote %s in %s", in, time.Since(start).Round(time.Second))
	}
	var want []string
	if *only != "" {
		want = strings.Split(*only, ",")
	}
	all := routes(in, *dir)
	var run []route
	for _, r := range all {
		if (want == nil && (r.name != "default" || *withDefault)) || slices.Contains(want, r.name) {
			run = append(run, r)
		}
	}
	os.Setenv("LIMPID_WORKERS", fmt.Sprint(*workers))
	fmt.Printf("Peak RSS, %d x %d UInt16, one band, %d workers, fixed settings `%s` (default: `--psf gaussian:sigma=0.7` only); %s, GOMAXPROCS %d\n\n",
		*n, *n, *workers, strings.Join(fixed, " "), runtime.Version(), runtime.GOMAXPROCS(0))
	fmt.Println("| route | command | peak RSS (MiB) | wall (s) |")
	fmt.Println("|---|---|---|---|")
	if simRSS > 0 {
		fmt.Printf("| simulate | limpid simulate (making the scene) | %d | |\n", simRSS)
	}
	failed := false
	for i, r := range run {
		if r.needs != "" {
			if _, err := os.Stat(r.needs); err != nil {
				log.Printf("%s: skipped, needs %s (run the route that makes it first)", r.name, filepath.Base(r.needs))
				continue
			}
		}
		rss, wall, err := measure(*bin, r.cmds)
		var cells []string
		for k, m := range rss {
			cell := fmt.Sprint(m)
			if len(rss) > 1 {
				cell = fmt.Sprintf("%s %d", procName(r.cmds[k]), m)
			}
			cells = append(cells, cell)
			if *limit > 0 && m > *limit {
				failed = true
			}
		}
		status := ""
		if err != nil {
			status = " (FAILED: " + err.Error() + ")"
			failed = true
		}
		fmt.Printf("| %s | %s | %s%s | %.0f |\n", r.name, r.desc, strings.Join(cells, ", "), status, wall)
		cleanup(r, run[i+1:])
	}
	if failed {
		if *limit > 0 {
			log.Printf("a route failed or exceeded %d MiB", *limit)
		}
		os.Exit(1)
	}
}

// procName is a process's subcommand ("restore", "tiles pack").
func procName(args []string) string {
	if args[0] == "tiles" {
		return "tiles " + args[1]
	}
	return args[0]
}

// cleanup removes the outputs of route r (each command's last argument
// when it is a file) and the file it read, unless a later route needs them.
// Nothing else in the directory is touched (another run may share it).
func cleanup(r route, later []route) {
	keep := map[string]bool{}
	for _, l := range later {
		if l.needs != "" {
			keep[l.needs] = true
		}
	}
	for _, c := range r.cmds {
		out := c[len(c)-1]
		if out != "-" && !keep[out] {
			os.Remove(out)
		}
	}
	if r.needs != "" && !keep[r.needs] {
		os.Remove(r.needs) // the last route that reads it
	}
}

// measure runs cmds (piped one into the next) and returns each process's
// peak RSS in MiB and the wall time in seconds.
func measure(bin string, cmds [][]string) ([]int, float64, error) {
	procs := make([]*exec.Cmd, len(cmds))
	logs := make([]*bytes.Buffer, len(cmds))
	for i, args := range cmds {
		c := exec.Command(bin, args...)
		logs[i] = &bytes.Buffer{}
		c.Stderr = logs[i] // progress lines; shown when the process fails
		procs[i] = c
	}
	var closers []*os.File
	for i := 0; i+1 < len(procs); i++ {
		r, w, err := os.Pipe()
		if err != nil {
			return nil, 0, err
		}
		procs[i].Stdout, procs[i+1].Stdin = w, r
		closers = append(closers, r, w)
	}
	start := time.Now()
	for _, c := range procs {
		if err := c.Start(); err != nil {
			return nil, 0, err
		}
	}
	for _, f := range closers {
		f.Close() // the children hold their own ends
	}
	var first error
	rss := make([]int, len(procs))
	for i, c := range procs {
		err := c.Wait()
		if err != nil && first == nil {
			first = fmt.Errorf("%s: %v: %s", procName(cmds[i]), err, strings.TrimSpace(logs[i].String()))
		}
		if c.ProcessState != nil {
			// Linux reports ru_maxrss in KiB (getrusage(2)).
			rss[i] = int(c.ProcessState.SysUsage().(*syscall.Rusage).Maxrss / 1024)
		}
	}
	return rss, time.Since(start).Seconds(), first
}

// writeScene writes the observed n x n scene at path: a sharp 16-bit band
// (an invented pattern of relief and fields) as a binary PGM next to it,
// which limpid simulate blurs (PSF sigma 0.7), makes noisy (Poisson-Gaussian,
// gain 0.4 DN/e-, read noise 3 DN) and writes as limpid's tiled DEFLATE
// GeoTIFF (UInt16). It returns simulate's peak RSS in MiB.
func writeScene(bin, path string, n int) (int, error) {
	raw := strings.TrimSuffix(path, filepath.Ext(path)) + "-sharp.pgm"
	defer os.Remove(raw)
	f, err := os.Create(raw)
	if err != nil {
		return 0, err
	}
	bw := bufio.NewWriterSize(f, 1<<20)
	// Binary PGM: "P5", width, height, maxval; with a maxval above 255 each
	// sample is 2 bytes, most significant first (Netpbm, "PGM format
	// specification", netpbm.sourceforge.net/doc/pgm.html).
	fmt.Fprintf(bw, "P5\n%d %d\n65535\n", n, n)
	sx := make([]float64, n)
	for x := range sx {
		sx[x] = math.Sin(float64(x) / 7)
	}
	row := make([]byte, 2*n)
	for y := 0; y < n; y++ {
		cy := 800 * math.Cos(float64(y)/11)
		for x := 0; x < n; x++ {
			v := 1500 + cy*sx[x] + 300*float64((x/97+y/61)%3)
			binary.BigEndian.PutUint16(row[2*x:], uint16(v))
		}
		bw.Write(row)
	}
	if err := bw.Flush(); err != nil {
		f.Close()
		return 0, err
	}
	if err := f.Close(); err != nil {
		return 0, err
	}
	rss, _, err := measure(bin, [][]string{{"simulate", "--psf", "gaussian:sigma=0.7", "--noise", "poisson:gain=0.4,read=3",
		"--quantize", "UInt16", raw, path}})
	return rss[0], err
}
