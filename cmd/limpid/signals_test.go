package main

import (
	"bufio"
	"bytes"
	"io"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"limpid/raster"
	"limpid/raster/gdal"
)

// buildBinary builds the limpid command into dir (signals and a closed
// stdout need a real process).
func buildBinary(t *testing.T, dir string) string {
	t.Helper()
	bin := filepath.Join(dir, "limpid")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	return bin
}

// noiseScene writes an n x n UInt16 scene of uniform noise (slow to
// compress: the COG phase lasts long enough to be interrupted).
func noiseScene(t *testing.T, path string, n int) {
	t.Helper()
	meta := raster.Meta{Width: n, Height: n, DataType: "UInt16", Bands: []raster.BandInfo{{Description: "pan"}}}
	rng := rand.New(rand.NewPCG(3, 4))
	p := make([]float32, n*n)
	for i := range p {
		p[i] = float32(rng.IntN(4000))
	}
	if err := gdal.WriteFloat32(path, meta, [][]float32{p}, gdal.WriteOptions{Format: gdal.GTiff, DataType: "UInt16"}); err != nil {
		t.Fatal(err)
	}
}

// proc is a started limpid process with its stderr collected line by line.
type proc struct {
	cmd   *exec.Cmd
	lines chan string
	all   *bytes.Buffer
	done  chan struct{}
}

func startLimpid(t *testing.T, bin, tmp string, stdin io.Reader, stdout io.Writer, args ...string) *proc {
	t.Helper()
	cmd := exec.Command(bin, args...)
	cmd.Env = append(os.Environ(), "TMPDIR="+tmp)
	cmd.Stdin, cmd.Stdout = stdin, stdout
	er, err := cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	p := &proc{cmd: cmd, lines: make(chan string, 100), all: new(bytes.Buffer), done: make(chan struct{})}
	go func() {
		sc := bufio.NewScanner(er)
		for sc.Scan() {
			p.all.WriteString(sc.Text() + "\n")
			select {
			case p.lines <- sc.Text():
			default:
			}
		}
		close(p.done)
	}()
	return p
}

// waitLine waits for a stderr line containing s.
func (p *proc) waitLine(t *testing.T, s string) {
	t.Helper()
	deadline := time.After(60 * time.Second)
	for {
		select {
		case l := <-p.lines:
			if strings.Contains(l, s) {
				return
			}
		case <-deadline:
			t.Fatalf("no line with %q", s)
		}
	}
}

// waitFile waits for an entry of dir whose name has the suffix.
func waitFile(t *testing.T, dir, suffix string) {
	t.Helper()
	for i := 0; i < 3000; i++ {
		for _, n := range limpidTemps(t, dir) {
			if strings.HasSuffix(n, suffix) {
				return
			}
		}
		time.Sleep(10 * time.Millisecond)
	}
	t.Fatalf("no .limpid-*%s in %s", suffix, dir)
}

// signalAndWait sends sig and returns the exit status and the time from
// the signal to the exit.
func (p *proc) signalAndWait(t *testing.T, sig syscall.Signal) (int, time.Duration) {
	t.Helper()
	t0 := time.Now()
	if err := p.cmd.Process.Signal(sig); err != nil {
		t.Fatal(err)
	}
	<-p.done // stderr read to its end before Wait closes the pipe
	p.cmd.Wait()
	el := time.Since(t0)
	return p.cmd.ProcessState.ExitCode(), el
}

// SIGINT, SIGTERM and SIGHUP stop a real limpid in every phase (stdin
// spooling from a producer that sends nothing, solving, the COG finishing
// inside GDAL, writing to a stdout nobody reads) within 1 s, with exit
// 128 + n, one line, and no temporary in the output directory or TMPDIR.
// Source: POSIX.1-2017 Shell & Utilities 2.8.2 "Exit Status for Commands"
// (> 128 for a signal; shells report 128 + n) and kill -l's numbers
// (SIGHUP 1, SIGINT 2, SIGTERM 15); the 1 s bound is the project's.
func TestSignalsBinary(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary")
	}
	bdir := t.TempDir()
	bin := buildBinary(t, bdir)
	big := filepath.Join(bdir, "noise.tif")
	noiseScene(t, big, 2048)
	slow := []string{"--psf", "gaussian:sigma=0.7", "--smooth", "0.2", "--stop", "change", "--tolerance", "0", "--iterations", "100000"}
	cogArgs := []string{"--psf", "gaussian:sigma=0.7", "--smooth", "0.2", "--stop", "change", "--iterations", "1", "--format", "cog"}
	type phase struct {
		name string
		run  func(t *testing.T, tmp, out string) *proc
	}
	phases := []phase{
		{"stdin", func(t *testing.T, tmp, out string) *proc {
			r, w, _ := os.Pipe() // a producer that sends nothing and stays
			t.Cleanup(func() { r.Close(); w.Close() })
			p := startLimpid(t, bin, tmp, r, nil, append(append([]string{"restore"}, slow...), "-", out)...)
			waitFile(t, tmp, ".stdin")
			return p
		}},
		{"solving", func(t *testing.T, tmp, out string) *proc {
			p := startLimpid(t, bin, tmp, nil, nil, append(append([]string{"restore"}, slow...), fixture("observed.tif"), out)...)
			waitFile(t, filepath.Dir(out), ".d")
			time.Sleep(200 * time.Millisecond)
			return p
		}},
		{"cog", func(t *testing.T, tmp, out string) *proc {
			p := startLimpid(t, bin, tmp, nil, nil, append(append([]string{"restore"}, cogArgs...), big, out)...)
			p.waitLine(t, "(100%)")
			time.Sleep(100 * time.Millisecond)
			return p
		}},
		{"stdout blocked", func(t *testing.T, tmp, out string) *proc {
			r, w, _ := os.Pipe() // nobody reads: the copy blocks once the pipe is full
			t.Cleanup(func() { r.Close(); w.Close() })
			p := startLimpid(t, bin, tmp, nil, w, append(append([]string{"restore"}, cogArgs[:8]...), fixture("observed.tif"), "-")...)
			p.waitLine(t, "(100%)")
			time.Sleep(300 * time.Millisecond)
			return p
		}},
	}
	sigs := []syscall.Signal{syscall.SIGINT, syscall.SIGTERM, syscall.SIGHUP}
	for i, ph := range phases {
		// Every signal in the cheap phases, one each in the others.
		use := sigs
		if i >= 2 {
			use = sigs[i-1 : i]
		}
		for _, sig := range use {
			t.Run(ph.name+" "+sigName(sig), func(t *testing.T) {
				tmp, dir := t.TempDir(), t.TempDir()
				out := filepath.Join(dir, "out.tif")
				p := ph.run(t, tmp, out)
				code, el := p.signalAndWait(t, sig)
				if code != 128+int(sig) {
					t.Errorf("exit %d, want %d; stderr:\n%s", code, 128+int(sig), p.all)
				}
				t.Logf("exit %d %v after %s", code, el.Round(time.Millisecond), sigName(sig))
				if el > time.Second {
					t.Errorf("exit %v after the signal, want within 1 s", el)
				}
				var lines []string
				for _, l := range strings.Split(strings.TrimSpace(p.all.String()), "\n") {
					if !strings.HasPrefix(l, "limpid: restored") {
						lines = append(lines, l)
					}
				}
				if len(lines) != 1 || !strings.HasPrefix(lines[0], "limpid: interrupted ("+sigName(sig)+")") || strings.Contains(p.all.String(), "context canceled") {
					t.Errorf("stderr, want one interrupted line:\n%s", p.all)
				}
				for _, d := range []string{tmp, dir} {
					if n := limpidTemps(t, d); len(n) > 0 {
						t.Errorf("temporaries left in %s: %v", d, n)
					}
				}
				if _, err := os.Stat(out); !os.IsNotExist(err) {
					t.Errorf("OUTPUT exists after the interruption (%v)", err)
				}
			})
		}
	}

	// limpid restore IN - | head -c 100: exit 141, one line, TMPDIR clean.
	// Source: POSIX.1-2017 write() EPIPE, 2.8.2 (128 + SIGPIPE 13).
	t.Run("closed stdout", func(t *testing.T) {
		tmp := t.TempDir()
		r, w, _ := os.Pipe()
		p := startLimpid(t, bin, tmp, nil, w, append(append([]string{"restore"}, cogArgs[:8]...), fixture("observed.tif"), "-")...)
		w.Close()
		io.ReadFull(r, make([]byte, 100))
		r.Close()
		<-p.done
		p.cmd.Wait()
		if code := p.cmd.ProcessState.ExitCode(); code != exitBrokenPipe {
			t.Errorf("exit %d (state %v), want %d; stderr:\n%s", code, p.cmd.ProcessState, exitBrokenPipe, p.all)
		}
		if !strings.Contains(p.all.String(), "limpid: the reader of stdout closed it before the end") {
			t.Errorf("stderr:\n%s", p.all)
		}
		if n := limpidTemps(t, tmp); len(n) > 0 {
			t.Errorf("temporaries left in TMPDIR: %v", n)
		}
	})

	// kill -9 leaves the temporaries (nothing can catch SIGKILL); the next
	// run names them in one line and limpid clean removes them. Source:
	// POSIX.1-2017 signal.h: SIGKILL "cannot be caught or ignored".
	t.Run("kill -9", func(t *testing.T) {
		tmp, dir := t.TempDir(), t.TempDir()
		p := startLimpid(t, bin, tmp, nil, nil, append(append([]string{"restore"}, slow...), fixture("observed.tif"), filepath.Join(dir, "a.tif"))...)
		waitFile(t, dir, ".d")
		p.signalAndWait(t, syscall.SIGKILL)
		if len(limpidTemps(t, dir)) != 1 {
			t.Fatalf("kill -9 left %v, expected the run's temporary directory", limpidTemps(t, dir))
		}
		q := startLimpid(t, bin, tmp, nil, nil, append([]string{"restore"}, append(fastPSF, fixture("observed.tif"), filepath.Join(dir, "b.tif"))...)...)
		<-q.done
		q.cmd.Wait()
		if !strings.Contains(q.all.String(), "limpid: note: 1 temporary of killed limpid runs") {
			t.Errorf("the next run did not name the leftover:\n%s", q.all)
		}
		c := startLimpid(t, bin, tmp, nil, nil, "clean", dir)
		<-c.done
		c.cmd.Wait()
		if c.cmd.ProcessState.ExitCode() != 0 || len(limpidTemps(t, dir)) != 0 {
			t.Errorf("clean: exit %d, left %v:\n%s", c.cmd.ProcessState.ExitCode(), limpidTemps(t, dir), c.all)
		}
	})
}
