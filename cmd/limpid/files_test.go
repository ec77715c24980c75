package main

import (
	"bytes"
	"context"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"limpid/raster/scratch"
)

// fastPSF is a cheap fixed restore for tests about files, not results.
var fastPSF = []string{"--psf", "gaussian:sigma=0.7", "--smooth", "0.2", "--stop", "change", "--iterations", "3"}

// dirState lists a directory's entries (names) for before/after checks.
func dirState(t *testing.T, dir string) map[string]bool {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	m := map[string]bool{}
	for _, e := range ents {
		m[e.Name()] = true
	}
	return m
}

// newEntries are the names in dir that were not in before.
func newEntries(t *testing.T, dir string, before map[string]bool) []string {
	t.Helper()
	var out []string
	for n := range dirState(t, dir) {
		if !before[n] {
			out = append(out, n)
		}
	}
	return out
}

// limpidTemps lists the limpid temporaries (.limpid-*) in dir.
func limpidTemps(t *testing.T, dir string) []string {
	t.Helper()
	var out []string
	for n := range dirState(t, dir) {
		if strings.HasPrefix(n, scratch.Prefix) {
			out = append(out, n)
		}
	}
	return out
}

// limpidTo runs limpid in-process with stdout going to w.
func limpidTo(t *testing.T, ctx context.Context, stdin io.Reader, w io.Writer, args ...string) (int, string) {
	t.Helper()
	var e bytes.Buffer
	if stdin == nil {
		stdin = bytes.NewReader(nil)
	}
	code := run(ctx, append([]string{"limpid"}, args...), stdin, w, &e)
	return code, e.String()
}

func oneLine(t *testing.T, stderr, want string) {
	t.Helper()
	var lines []string
	for _, l := range strings.Split(strings.TrimSpace(stderr), "\n") {
		if !strings.HasPrefix(l, "limpid: restored") {
			lines = append(lines, l)
		}
	}
	if len(lines) != 1 || !strings.HasPrefix(lines[0], "limpid: ") || !strings.Contains(lines[0], want) {
		t.Errorf("stderr %q: want one limpid: line with %q", stderr, want)
	}
}

// privateTMPDIR points TMPDIR (os.TempDir) at a fresh directory.
func privateTMPDIR(t *testing.T) string {
	t.Helper()
	d := t.TempDir()
	t.Setenv("TMPDIR", d)
	return d
}

// A FIFO or a character device as OUTPUT is written into, never replaced:
// the FIFO's reader gets exactly the bytes a file OUTPUT gets, /dev/null
// stays the null device, and a reader that closes early makes the run fail
// (EPIPE, exit 141) with nothing left in TMPDIR. Source: POSIX.1-2017
// mkfifo() and write() ("[EPIPE] An attempt is made to write to a pipe or
// FIFO that is not open for reading by any process"); S_ISFIFO/S_ISCHR.
func TestOutputFIFOAndDevice(t *testing.T) {
	tmp := privateTMPDIR(t)
	dir := t.TempDir()
	in := cropFixture(t, dir, 64)
	ref := filepath.Join(dir, "ref.tif")
	for _, c := range []struct{ name, out string }{{"restore", ref}, {"pack", filepath.Join(dir, "ref.arrows")}} {
		args := append(append([]string{"restore"}, fastPSF...), in, c.out)
		if c.name == "pack" {
			args = []string{"tiles", "pack", in, c.out}
		}
		if code, e := limpidTo(t, context.Background(), nil, io.Discard, args...); code != 0 {
			t.Fatalf("%s to a file: exit %d: %s", c.name, code, e)
		}
	}
	for _, c := range []struct {
		name string
		args func(out string) []string
		want string
	}{
		{"restore", func(out string) []string { return append(append([]string{"restore"}, fastPSF...), in, out) }, ref},
		{"restore cog", func(out string) []string {
			return append(append([]string{"restore", "--format", "cog"}, fastPSF...), in, out)
		}, ""},
		{"tiles pack", func(out string) []string { return []string{"tiles", "pack", in, out} }, filepath.Join(dir, "ref.arrows")},
		{"tiles unpack", func(out string) []string { return []string{"tiles", "unpack", filepath.Join(dir, "ref.arrows"), out} }, ""},
		{"report", func(out string) []string {
			return append(append([]string{"restore", "--report", out}, fastPSF...), in, filepath.Join(dir, "r.tif"))
		}, ""},
	} {
		t.Run(c.name, func(t *testing.T) {
			before := dirState(t, dir)
			fifo := filepath.Join(t.TempDir(), "fifo")
			if err := syscall.Mkfifo(fifo, 0o644); err != nil {
				t.Fatal(err)
			}
			got := make(chan []byte, 1)
			go func() {
				f, err := os.Open(fifo)
				if err != nil {
					got <- nil
					return
				}
				b, _ := io.ReadAll(f)
				f.Close()
				got <- b
			}()
			code, e := limpidTo(t, context.Background(), nil, io.Discard, c.args(fifo)...)
			if code != 0 {
				t.Fatalf("exit %d: %s", code, e)
			}
			b := <-got
			if len(b) == 0 {
				t.Fatal("the FIFO's reader got nothing")
			}
			if c.want != "" && !bytes.Equal(b, mustRead(t, c.want)) {
				t.Errorf("the FIFO's reader got %d bytes, not the %d of the file output", len(b), len(mustRead(t, c.want)))
			}
			if st, err := os.Stat(fifo); err != nil || st.Mode()&os.ModeNamedPipe == 0 {
				t.Errorf("the FIFO was replaced: %v %v", st.Mode(), err)
			}
			os.Remove(filepath.Join(dir, "r.tif"))
			if n := newEntries(t, dir, before); len(n) > 0 {
				t.Errorf("new files in the output directory: %v", n)
			}
			if n := limpidTemps(t, tmp); len(n) > 0 {
				t.Errorf("temporaries left in TMPDIR: %v", n)
			}
		})
	}
	t.Run("dev null", func(t *testing.T) {
		code, e := limpidTo(t, context.Background(), nil, io.Discard, append(append([]string{"restore", "--report", os.DevNull}, fastPSF...), in, os.DevNull)...)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, e)
		}
		if st, err := os.Stat(os.DevNull); err != nil || st.Mode()&os.ModeCharDevice == 0 {
			t.Fatalf("%s is no longer a character device: %v %v", os.DevNull, st.Mode(), err)
		}
	})
	t.Run("reader leaves", func(t *testing.T) {
		in := fixture("observed.tif") // its product (289 KB) overfills a pipe's buffer (64 KiB on Linux)
		fifo := filepath.Join(t.TempDir(), "fifo")
		syscall.Mkfifo(fifo, 0o644)
		go func() {
			f, err := os.Open(fifo)
			if err == nil {
				f.Read(make([]byte, 100))
				f.Close()
			}
		}()
		code, e := limpidTo(t, context.Background(), nil, io.Discard, append(append([]string{"restore"}, fastPSF...), in, fifo)...)
		if code != exitBrokenPipe {
			t.Fatalf("exit %d, want %d: %s", code, exitBrokenPipe, e)
		}
		oneLine(t, e, "closed it before the end")
		if n := limpidTemps(t, tmp); len(n) > 0 {
			t.Errorf("temporaries left in TMPDIR: %v", n)
		}
	})
}

// A closed stdout (limpid restore IN - | head -c 100) ends the run with
// one line, exit 141 (128 + SIGPIPE, as a shell reports a command killed
// by SIGPIPE) and no temporary in TMPDIR. Source: POSIX.1-2017 write()
// EPIPE; Shell & Utilities 2.8.2 (status > 128 for a signal).
func TestClosedStdout(t *testing.T) {
	tmp := privateTMPDIR(t)
	in := fixture("observed.tif") // its products overfill a pipe's buffer (64 KiB on Linux)
	for _, args := range [][]string{
		append(append([]string{"restore"}, fastPSF...), in, "-"),
		{"tiles", "pack", in, "-"},
	} {
		r, w, err := os.Pipe()
		if err != nil {
			t.Fatal(err)
		}
		go func() {
			r.Read(make([]byte, 100))
			r.Close()
		}()
		code, e := limpidTo(t, context.Background(), nil, w, args...)
		w.Close()
		if code != exitBrokenPipe {
			t.Errorf("%v: exit %d, want %d: %s", args[:2], code, exitBrokenPipe, e)
		}
		oneLine(t, e, "stdout")
		if n := limpidTemps(t, tmp); len(n) > 0 {
			t.Errorf("%v: temporaries left in TMPDIR: %v", args[:2], n)
		}
	}
}

// No output may name an input or another output (issue: --report equal to
// INPUT overwrote the scene): each case exits 2 with one line before any
// work, the inputs are unchanged and no file appears. Source: the project's
// error contract (README, "Exit codes"); identity by os.SameFile (device
// and inode, POSIX.1-2017 <sys/stat.h> st_dev/st_ino).
func TestOutputsNeverClash(t *testing.T) {
	dir := t.TempDir()
	in := cropFixture(t, dir, 64)
	orig := mustRead(t, in)
	restored := filepath.Join(dir, "restored.tif")
	if code, e := limpidTo(t, context.Background(), nil, io.Discard, append(append([]string{"restore"}, fastPSF...), in, restored)...); code != 0 {
		t.Fatalf("exit %d: %s", code, e)
	}
	kernel := filepath.Join(dir, "k.txt")
	os.WriteFile(kernel, []byte("0 1 0\n1 4 1\n0 1 0\n"), 0o644)
	link := filepath.Join(dir, "link.tif")
	os.Symlink(in, link)
	os.Mkdir(filepath.Join(dir, "sub"), 0o755)
	out := filepath.Join(dir, "out.tif")
	r := func(extra ...string) []string {
		return append(append(append([]string{"restore"}, fastPSF...), extra...), in, out)
	}
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"report is input", r("--report", in), "--report " + in + " is the INPUT"},
		{"report via link", r("--report", link), "is the INPUT"},
		{"report via dot-dot", r("--report", filepath.Join(dir, "sub", "..", filepath.Base(in))), "is the INPUT"},
		{"report is output", r("--report", out), "are the same file"},
		{"report is output spelled otherwise", r("--report", filepath.Join(dir, "sub", "..", "out.tif")), "are the same file"},
		{"quicklook is report", r("--report", filepath.Join(dir, "x.json"), "--quicklook", filepath.Join(dir, "x.json")), "are the same file"},
		{"html is output", r("--report-html", out), "are the same file"},
		{"uncertainty is report", r("--method", "particle", "--uncertainty", filepath.Join(dir, "u.tif"), "--report", filepath.Join(dir, "u.tif")), "are the same file"},
		{"report is kernel", append([]string{"restore", "--psf", "kernel:" + kernel, "--report", kernel}, in, out), "is the --psf kernel:"},
		{"report is directory", r("--report", dir), "is a directory"},
		{"report dir missing", r("--report", filepath.Join(dir, "no", "r.json")), "does not exist"},
		{"noise json is input", []string{"noise", "--json", in, in}, "is the INPUT"},
		{"assess json is observed", []string{"assess", "--json", in, in, restored}, "is the OBSERVED"},
		{"assess json is restored", []string{"assess", "--json", restored, in, restored}, "is the RESTORED"},
		{"assess json is reference", []string{"assess", "--reference", kernel, "--json", kernel, in, restored}, "is the --reference"},
		{"pack output is input", []string{"tiles", "pack", in, link}, "is the INPUT"},
		{"simulate output is input", []string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "none", in, link}, "is the INPUT"},
		{"psf measure json is input", []string{"psf", "measure", "--auto", "--json", in, in}, "is the INPUT"},
		{"psf build output is kernel", []string{"psf", "build", "kernel:" + kernel, kernel}, "is the --psf kernel:"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			before := dirState(t, dir)
			code, e := limpidTo(t, context.Background(), nil, io.Discard, c.args...)
			if code != exitUsage {
				t.Fatalf("exit %d, want 2: %s", code, e)
			}
			oneLine(t, e, c.want)
			if strings.Contains(e, "limpid: restored") {
				t.Errorf("work started before the refusal: %s", e)
			}
			if !bytes.Equal(mustRead(t, in), orig) {
				t.Fatal("the INPUT changed")
			}
			if n := newEntries(t, dir, before); len(n) > 0 {
				t.Errorf("new files: %v", n)
			}
		})
	}
}

// Two outputs may share the null device: nothing written there is kept.
// Source: POSIX.1-2017 Base Definitions 10.1, /dev/null: "data written ...
// shall be discarded".
func TestOutputsShareDevNull(t *testing.T) {
	dir := t.TempDir()
	in := cropFixture(t, dir, 64)
	code, e := limpidTo(t, context.Background(), nil, io.Discard, append(append([]string{"restore", "--report", os.DevNull}, fastPSF...), in, os.DevNull)...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, e)
	}
}

// A report that cannot be written for lack of space exits 1, not 2 (it is
// not the command line's fault), and leaves nothing at OUTPUT. /dev/full
// fails every write with ENOSPC. Source: Linux null(4)/full(4) manual:
// "Writes to the /dev/full device fail with an ENOSPC error".
func TestReportDiskFull(t *testing.T) {
	if _, err := os.Stat("/dev/full"); err != nil {
		t.Skip("no /dev/full")
	}
	dir := t.TempDir()
	in := cropFixture(t, dir, 64)
	out := filepath.Join(dir, "out.tif")
	before := dirState(t, dir)
	code, e := limpidTo(t, context.Background(), nil, io.Discard, append(append([]string{"restore", "--report", "/dev/full"}, fastPSF...), in, out)...)
	if code != exitFailure {
		t.Fatalf("exit %d, want 1: %s", code, e)
	}
	oneLine(t, e, "no space left on device")
	if n := newEntries(t, dir, before); len(n) > 0 {
		t.Errorf("left behind: %v", n)
	}
}

// Side files go through a unique temporary created exclusively in the
// target's directory: links planted at the old fixed name (path + ".tmp")
// and at the output itself are never written through to their targets
// (the output replaces the link to a file at the link's end only for an
// existing regular file the user named), and a failing fill leaves
// nothing. Source: POSIX.1-2017 open() O_CREAT|O_EXCL ("If O_EXCL and
// O_CREAT are set, and path names a symbolic link, open() shall fail with
// [EEXIST]"); rename() replaces the name atomically.
func TestSideFileTemporaries(t *testing.T) {
	dir := t.TempDir()
	victim := filepath.Join(dir, "victim")
	os.WriteFile(victim, []byte("keep"), 0o644)
	path := filepath.Join(dir, "report.json")
	os.Symlink(victim, path+".tmp")
	var tmpSeen string
	err := writeSideFile(path, 0o644, func(w io.Writer) error {
		ents, _ := os.ReadDir(dir)
		for _, e := range ents {
			if strings.HasPrefix(e.Name(), ".limpid-") {
				tmpSeen = e.Name()
			}
		}
		_, err := io.WriteString(w, "{}\n")
		return err
	})
	if err != nil {
		t.Fatal(err)
	}
	if string(mustRead(t, victim)) != "keep" || string(mustRead(t, path)) != "{}\n" {
		t.Errorf("victim %q, report %q", mustRead(t, victim), mustRead(t, path))
	}
	if !strings.HasPrefix(tmpSeen, ".limpid-") || !strings.HasSuffix(tmpSeen, ".json") {
		t.Errorf("temporary %q: want .limpid-*.json", tmpSeen)
	}
	before := dirState(t, dir)
	err = writeSideFile(filepath.Join(dir, "b.json"), 0o644, func(w io.Writer) error { return syscall.ENOSPC })
	var se *sideFileError
	if !asSide(err, &se) || se.Op != "write" {
		t.Fatalf("failing fill: %v, want a write error", err)
	}
	if exitCode(writeJSONErr(se)) != exitFailure {
		t.Errorf("a write failure maps to exit %d, want 1", exitCode(writeJSONErr(se)))
	}
	if n := newEntries(t, dir, before); len(n) > 0 {
		t.Errorf("left behind: %v", n)
	}
}

func asSide(err error, se **sideFileError) bool {
	e, ok := err.(*sideFileError)
	*se = e
	return ok
}

// writeJSONErr is how writeJSON reports a failed write.
func writeJSONErr(se *sideFileError) error {
	if se.Op == "create" {
		return usagef("--report x: %v", se.Err)
	}
	return se
}

// SIGINT, SIGTERM and SIGHUP in-process: the run's context canceled by the
// signal ends it with 128 + n and one line, no temporary left in the output
// directory or TMPDIR; the stdin copy stops at once even when the producer
// sends nothing. Source: POSIX.1-2017 Shell & Utilities 2.8.2 (status
// > 128 for a signal; SIGHUP 1, SIGINT 2, SIGTERM 15 per kill -l).
func TestInterruptInProcess(t *testing.T) {
	tmp := privateTMPDIR(t)
	dir := t.TempDir()
	in := cropFixture(t, dir, 64)
	slow := []string{"--psf", "gaussian:sigma=0.7", "--smooth", "0.2", "--stop", "change", "--tolerance", "0", "--iterations", "100000"}
	for _, c := range []struct {
		sig   syscall.Signal
		want  int
		phase string
	}{{syscall.SIGINT, 130, "stdin"}, {syscall.SIGTERM, 143, "stdin"}, {syscall.SIGHUP, 129, "stdin"},
		{syscall.SIGINT, 130, "solving"}, {syscall.SIGTERM, 143, "solving"}, {syscall.SIGHUP, 129, "solving"}} {
		t.Run(c.phase+" "+sigName(c.sig), func(t *testing.T) {
			before := dirState(t, dir)
			// stdin that never sends: a pipe whose writer stays open.
			pr, pw := io.Pipe()
			defer pw.Close()
			args := append(append([]string{"restore"}, slow...), "-", filepath.Join(dir, "out.tif"))
			if c.phase == "solving" {
				args = append(append([]string{"restore"}, slow...), in, filepath.Join(dir, "out.tif"))
			}
			ctx, stop := withSignal(context.Background())
			time.AfterFunc(300*time.Millisecond, func() { stop(c.sig) })
			t0 := time.Now()
			code, e := limpidTo(t, ctx, pr, io.Discard, args...)
			if el := time.Since(t0) - 300*time.Millisecond; el > time.Second {
				t.Errorf("stopped %v after the signal, want within 1 s", el)
			}
			if code != c.want {
				t.Fatalf("exit %d, want %d: %s", code, c.want, e)
			}
			if strings.TrimSpace(e) != "limpid: interrupted ("+sigName(c.sig)+"), nothing written" || strings.Contains(e, "context canceled") {
				t.Errorf("stderr %q", e)
			}
			if n := newEntries(t, dir, before); len(n) > 0 {
				t.Errorf("left in the output directory: %v", n)
			}
			if n := limpidTemps(t, tmp); len(n) > 0 {
				t.Errorf("left in TMPDIR: %v", n)
			}
		})
	}
}

// Temporaries of a killed run (its process gone, started earlier) are
// reported in one line by the next run and removed by limpid clean; those
// of a live process stay. Source: POSIX.1-2017 kill() with signal 0 (ESRCH
// for no such process).
func TestStaleTemporaries(t *testing.T) {
	tmp := privateTMPDIR(t)
	dir := t.TempDir()
	in := cropFixture(t, dir, 64)
	dead := exitedPID(t)
	tag := hostTagForTest(t)
	old := time.Now().Add(-time.Hour).UnixMilli()
	stale := filepath.Join(dir, ".limpid-"+tag+"-"+itoa(dead)+"-"+itoa64(old)+"-1.tif")
	staleTmp := filepath.Join(tmp, ".limpid-"+tag+"-"+itoa(dead)+"-"+itoa64(old)+"-2.stdin")
	live := filepath.Join(dir, ".limpid-"+tag+"-"+itoa(os.Getppid())+"-"+itoa64(old)+"-3.tif")
	for _, p := range []string{stale, staleTmp, live} {
		os.WriteFile(p, make([]byte, 2048), 0o600)
	}
	code, e := limpidTo(t, context.Background(), nil, io.Discard, append(append([]string{"restore"}, fastPSF...), in, filepath.Join(dir, "out.tif"))...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, e)
	}
	if !strings.Contains(e, "limpid: note: 2 temporaries of killed limpid runs (4.0 KiB)") || !strings.Contains(e, "limpid clean") {
		t.Errorf("no note of the stale temporaries: %s", e)
	}
	code, e = limpidTo(t, context.Background(), nil, io.Discard, "clean", dir, tmp)
	if code != 0 {
		t.Fatalf("clean: exit %d: %s", code, e)
	}
	for _, p := range []string{stale, staleTmp} {
		if _, err := os.Stat(p); !os.IsNotExist(err) {
			t.Errorf("clean left %s", p)
		}
	}
	if _, err := os.Stat(live); err != nil {
		t.Errorf("clean removed a live process's temporary: %v", err)
	}
	if !strings.Contains(e, "removed 2 temporaries") {
		t.Errorf("clean's summary: %s", e)
	}
}

// exitedPID is the id of a process that has exited and been reaped.
func exitedPID(t *testing.T) int {
	t.Helper()
	c := exec.Command("true")
	if err := c.Run(); err != nil {
		t.Skipf("cannot run true: %v", err)
	}
	return c.Process.Pid
}

// hostTagForTest is this host's tag in temporary names (scratch.Pattern:
// .limpid-HOST-PID-START-*).
func hostTagForTest(t *testing.T) string {
	f := strings.Split(strings.TrimPrefix(scratch.Pattern(""), scratch.Prefix), "-")
	if len(f) < 3 {
		t.Fatalf("pattern %q", scratch.Pattern(""))
	}
	return f[0]
}

func itoa(n int) string     { return strconv.Itoa(n) }
func itoa64(n int64) string { return strconv.FormatInt(n, 10) }

// OUTPUT - and a side file naming stdout's own file are one file: refused
// (stdout is compared by its descriptor's identity, os.File.Stat).
// Source: os.SameFile (device and inode).
func TestStdoutClashesWithSideFile(t *testing.T) {
	dir := t.TempDir()
	in := cropFixture(t, dir, 64)
	outPath := filepath.Join(dir, "stdout.tif")
	f, err := os.Create(outPath)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	code, e := limpidTo(t, context.Background(), nil, f, append(append([]string{"restore", "--report", outPath}, fastPSF...), in, "-")...)
	if code != exitUsage {
		t.Fatalf("exit %d, want 2: %s", code, e)
	}
	oneLine(t, e, "OUTPUT - (stdout) and --report "+outPath+" are the same file")
}

// A read from stdin returns as soon as the run is interrupted, even while
// the producer sends nothing; bytes before that arrive unchanged. Source:
// Go context package documentation (Done is closed on cancel); the 1 s
// bound is the project's.
func TestInterruptibleStdin(t *testing.T) {
	pr, pw := io.Pipe()
	ctx, stop := withSignal(context.Background())
	r := interruptible(ctx, pr)
	go pw.Write([]byte("abc"))
	b := make([]byte, 10)
	n, err := r.Read(b)
	if err != nil || string(b[:n]) != "abc" {
		t.Fatalf("read %q, %v; want abc", b[:n], err)
	}
	time.AfterFunc(50*time.Millisecond, func() { stop(syscall.SIGTERM) })
	t0 := time.Now()
	if _, err := r.Read(b); !errors.Is(err, context.Canceled) {
		t.Fatalf("read after the signal: %v, want context.Canceled", err)
	}
	if el := time.Since(t0); el > time.Second {
		t.Errorf("the read returned %v after the signal", el)
	}
	if sig, ok := interrupted(ctx); !ok || sig != syscall.SIGTERM {
		t.Errorf("interrupted(ctx) = %v, %v", sig, ok)
	}
	pw.Close()
}
