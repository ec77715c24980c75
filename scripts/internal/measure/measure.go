// Package measure holds what the measurement scripts share: building the
// limpid binary, timing it as a child process with its peak RSS, and
// writing invented scenes.
package measure

import (
	"bufio"
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"time"
)

// Build builds ./cmd/limpid (run from the repository root) into dir.
func Build(dir string) (string, error) {
	bin := filepath.Join(dir, "limpid")
	if out, err := exec.Command("go", "build", "-o", bin, "./cmd/limpid").CombinedOutput(); err != nil {
		return "", fmt.Errorf("go build ./cmd/limpid (run from the repository root): %v\n%s", err, out)
	}
	return bin, nil
}

// Result is one child process's wall time and peak resident set size.
type Result struct {
	Seconds float64
	RSSMiB  int
}

// Run runs bin with args, standard output discarded, and returns its wall
// time and peak RSS (getrusage(2) ru_maxrss of the child: KiB on Linux).
// On failure the error holds the child's standard error.
func Run(bin string, args ...string) (Result, error) {
	c := exec.Command(bin, args...)
	var e bytes.Buffer
	c.Stderr = &e
	start := time.Now()
	err := c.Run()
	r := Result{Seconds: time.Since(start).Seconds()}
	if c.ProcessState != nil {
		r.RSSMiB = int(c.ProcessState.SysUsage().(*syscall.Rusage).Maxrss / 1024)
	}
	if err != nil {
		return r, fmt.Errorf("%s %s: %v: %s", filepath.Base(bin), strings.Join(args, " "), err, strings.TrimSpace(e.String()))
	}
	return r, nil
}

// Best runs bin n times (at least once) and keeps the fastest wall time
// and the largest peak RSS.
func Best(n int, bin string, args ...string) (Result, error) {
	var best Result
	for i := 0; i < max(n, 1); i++ {
		r, err := Run(bin, args...)
		if err != nil {
			return r, err
		}
		if i == 0 || r.Seconds < best.Seconds {
			best.Seconds = r.Seconds
		}
		best.RSSMiB = max(best.RSSMiB, r.RSSMiB)
	}
	return best, nil
}

// WritePGM writes an n x n 16-bit binary PGM at path with values v(x, y)
// (clamped to 0-65535). Binary PGM: "P5", width, height, maxval; with a
// maxval above 255 each sample is 2 bytes, most significant first (Netpbm,
// "PGM format specification", netpbm.sourceforge.net/doc/pgm.html).
func WritePGM(path string, n int, v func(x, y int) float64) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(f, 1<<20)
	fmt.Fprintf(bw, "P5\n%d %d\n65535\n", n, n)
	row := make([]byte, 2*n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			binary.BigEndian.PutUint16(row[2*x:], uint16(min(max(math.Round(v(x, y)), 0), 65535)))
		}
		bw.Write(row)
	}
	if err := bw.Flush(); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}

// Field is an invented n x n sharp scene in DN: a 1/f-like random field
// (octaves of bilinearly interpolated random grids with spacing 4 to 512
// px, each octave's amplitude proportional to its spacing, so that the
// amplitude spectrum falls about as 1/f) plus random rectangular blocks of
// constant offset (fields, roofs), on a base level of 1800, clamped to 50-4000
// DN. key picks the random stream.
func Field(n int, key uint64) []float32 {
	rng := rand.New(rand.NewPCG(key, 13))
	out := make([]float32, n*n)
	for s := 4; s <= 512; s *= 2 {
		g := n/s + 2
		grid := make([]float64, g*g)
		for i := range grid {
			grid[i] = rng.NormFloat64()
		}
		amp := 0.8 * float64(s) // about 470 DN in all
		for y := 0; y < n; y++ {
			fy := float64(y) / float64(s)
			iy := int(fy)
			ty := fy - float64(iy)
			for x := 0; x < n; x++ {
				fx := float64(x) / float64(s)
				ix := int(fx)
				tx := fx - float64(ix)
				a := grid[iy*g+ix]*(1-tx) + grid[iy*g+ix+1]*tx
				b := grid[(iy+1)*g+ix]*(1-tx) + grid[(iy+1)*g+ix+1]*tx
				out[y*n+x] += float32(amp * (a*(1-ty) + b*ty))
			}
		}
	}
	for k := 0; k < n*n/4096; k++ {
		w, h := 4+rng.IntN(60), 4+rng.IntN(60)
		x0, y0 := rng.IntN(n), rng.IntN(n)
		d := float32(rng.NormFloat64() * 500)
		for y := y0; y < min(y0+h, n); y++ {
			for x := x0; x < min(x0+w, n); x++ {
				out[y*n+x] += d
			}
		}
	}
	for i := range out {
		out[i] = min(max(out[i]+1800, 50), 4000)
	}
	return out
}

// Scene writes the observed n x n UInt16 scene at path: Field(n, 1) as a
// PGM next to it (removed afterwards), blurred and made noisy by limpid
// simulate with psfSpec and noiseSpec. It returns simulate's run.
func Scene(bin, path string, n int, psfSpec, noiseSpec string) (Result, error) {
	raw := strings.TrimSuffix(path, filepath.Ext(path)) + "-sharp.pgm"
	defer os.Remove(raw)
	f := Field(n, 1)
	if err := WritePGM(raw, n, func(x, y int) float64 { return float64(f[y*n+x]) }); err != nil {
		return Result{}, err
	}
	return Run(bin, "simulate", "--psf", psfSpec, "--noise", noiseSpec, "--quantize", "UInt16", raw, path)
}

// Load is the 1-minute load average from /proc/loadavg (Linux proc(5)),
// or "?" where there is none: the measurements' context on a shared
// machine.
func Load() string {
	b, err := os.ReadFile("/proc/loadavg")
	if f := strings.Fields(string(b)); err == nil && len(f) > 0 {
		return f[0]
	}
	return "?"
}

// WorkDir returns the working directory of a measurement run: dir when
// given (created if missing), else a new one under TMPDIR named prefix*;
// cleanup removes a new one unless keep (and does nothing for a given dir).
func WorkDir(dir, prefix string, keep bool) (string, func(), error) {
	if dir != "" {
		return dir, func() {}, os.MkdirAll(dir, 0o755)
	}
	d, err := os.MkdirTemp("", prefix)
	if err != nil {
		return "", nil, err
	}
	if keep {
		return d, func() {}, nil
	}
	return d, func() { os.RemoveAll(d) }, nil
}
