package main

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"limpid/step/watch"
)

// fakeClock is the progress display's clock in tests: it moves only when
// the test says so.
type fakeClock struct{ t time.Time }

func (c *fakeClock) now() time.Time { return c.t }

func testProgress(tty bool, choices, finalTiles int) (*runProgress, *fakeClock, *bytes.Buffer) {
	c := &fakeClock{t: time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)}
	var b bytes.Buffer
	p := newRunProgress(&b, choices, finalTiles) // a buffer is not a terminal
	p.now, p.start, p.lastLine, p.tty = c.now, c.t, c.t, tty
	return p, c, &b
}

// scriptedPass is one pass of a fixed event sequence: its tiles each take
// perTile of the fake clock.
type scriptedPass struct {
	kind    watch.Kind
	what    string
	tiles   int
	perTile time.Duration
}

// scriptedRun is the default command's shape on a 16-tile scene: the noise
// pass, three of the four expected choice passes (the choice stops early),
// the final pass.
var scriptedRun = []scriptedPass{
	{watch.Noise, "estimating the noise model", 16, 50 * time.Millisecond},
	{watch.Choice, "choosing smoothing and stop: bandwidth 0 on 16 sample tiles", 16, 2 * time.Second},
	{watch.Choice, "choosing smoothing and stop: bandwidth 0.3 on 16 sample tiles", 16, 2 * time.Second},
	{watch.Choice, "choosing smoothing and stop: bandwidth 0.5 on 16 sample tiles", 16, 2 * time.Second},
	{watch.Final, "restoring", 16, 500 * time.Millisecond},
}

// play feeds passes to p; before is called as each pass starts (before
// Start), after as each ends (after its last Done).
func play(p *runProgress, c *fakeClock, passes []scriptedPass, before, after func(i int)) time.Duration {
	var total time.Duration
	for i, s := range passes {
		if before != nil {
			before(i)
		}
		p.Start(watch.Pass{Kind: s.kind, What: s.what, Tiles: s.tiles})
		for k := 0; k < s.tiles; k++ {
			c.t = c.t.Add(s.perTile)
			total += s.perTile
			p.Done(1)
		}
		if after != nil {
			after(i)
		}
	}
	p.Close()
	return total
}

var runPct = regexp.MustCompile(`; run (\d+)%`)

// Plain mode (stderr not a terminal): the engine's pass descriptions as
// lines, sparse progress lines with the run's percentage never going back,
// no carriage return, and the last line in the form scripts wait for.
// Source: POSIX.1-2017 XBD 10.1 (diagnostics on standard error); the line
// forms are the project's own contract (README "Set up and run"), no outside
// source.
func TestProgressPlain(t *testing.T) {
	p, c, out := testProgress(false, 4, 16)
	total := play(p, c, scriptedRun, nil, nil)
	s := out.String()
	if strings.Contains(s, "\r") {
		t.Errorf("plain mode wrote a carriage return:\n%q", s)
	}
	lines := strings.Split(strings.TrimSuffix(s, "\n"), "\n")
	var starts, progress []string
	for _, l := range lines {
		if !strings.HasPrefix(l, "limpid: ") {
			t.Errorf("line %q: want the limpid: prefix", l)
		}
		if strings.Contains(l, " tiles (") {
			progress = append(progress, l)
		} else {
			starts = append(starts, strings.TrimPrefix(l, "limpid: "))
		}
	}
	var want []string
	for _, s := range scriptedRun[:4] {
		want = append(want, s.what)
	}
	if strings.Join(starts, "|") != strings.Join(want, "|") {
		t.Errorf("pass lines %q, want %q", starts, want)
	}
	// At most one line per 10 % of the run and one per plainEvery, plus
	// the final one (the brief's bound for logs; common practice, no
	// source).
	if maxLines := 10 + 1 + int(total/plainEvery); len(progress) > maxLines || len(progress) < 3 {
		t.Errorf("%d progress lines over %s, want 3 to %d:\n%s", len(progress), total, maxLines, s)
	}
	last := -1
	for _, l := range progress {
		if m := runPct.FindStringSubmatch(l); m != nil {
			v, _ := strconv.Atoi(m[1])
			if v < last {
				t.Errorf("the run's percentage went back to %d%% after %d%%: %q", v, last, l)
			}
			last = v
		}
	}
	wantLast := fmt.Sprintf("limpid: restored 16/16 tiles (100%%) in %s", total.Round(time.Second))
	if got := lines[len(lines)-1]; got != wantLast {
		t.Errorf("last line %q, want %q", got, wantLast)
	}
}

// The time left follows the estimate's definition (runProgress's doc
// comment; the project's own model, no outside source): measured costs per
// tile of each kind, a prior ratio for kinds not timed yet, the expected
// choice passes dropped when the final pass starts.
func TestProgressEstimate(t *testing.T) {
	// Exact up to float64 rounding of a few sums of seconds.
	const tolSeconds = 1e-6
	p, c, _ := testProgress(false, 4, 16)
	choiceCost := 2.0 // s a choice tile (scriptedRun)
	finalCost := choiceCost * priorCost[watch.Final] / priorCost[watch.Choice]
	check := func(when string, wantLeft float64) {
		t.Helper()
		_, left, known := p.estimate(c.now())
		if !known || math.Abs(left.Seconds()-wantLeft) > tolSeconds {
			t.Errorf("%s: time left %v (known %v), want %.3f s", when, left, known, wantLeft)
		}
	}
	pass := func(s scriptedPass, tiles int) {
		p.Start(watch.Pass{Kind: s.kind, What: s.what, Tiles: s.tiles})
		for k := 0; k < tiles; k++ {
			c.t = c.t.Add(s.perTile)
			p.Done(1)
		}
	}
	pass(scriptedRun[0], 16)
	pass(scriptedRun[1], 16)
	pass(scriptedRun[2], 0)
	// Choice pass 2 of 4 starts: itself and two more, then the final pass.
	check("choice pass 2 started", 3*16*choiceCost+16*finalCost)
	for k := 0; k < 16; k++ {
		c.t = c.t.Add(scriptedRun[2].perTile)
		p.Done(1)
	}
	pass(scriptedRun[3], 16)
	check("choice pass 3 done", 16*choiceCost+16*finalCost)
	pass(scriptedRun[4], 0)
	// The final pass starts: the fourth choice pass is dropped.
	check("the final pass started", 16*finalCost)
	for k := 0; k < 16; k++ {
		c.t = c.t.Add(scriptedRun[4].perTile)
		p.Done(1)
	}
	if pct, left, _ := p.estimate(c.now()); pct != 100 || left != 0 {
		t.Errorf("at the end: %d%%, %v left; want 100%%, 0", pct, left)
	}
}

// Terminal mode: one line redrawn in place (every draw starts with "\r"
// and the erase-in-line sequence, never a newline, never wider than the
// terminal), redraws throttled, the line cleared at the end.
// Source: ECMA-48 5th ed., 8.3.41 EL (CSI K erases to the end of the line);
// carriage return moves to the line's start (ASCII CR).
func TestProgressTTY(t *testing.T) {
	p, c, out := testProgress(true, 4, 16)
	p.width = 60
	total := play(p, c, scriptedRun, nil, nil)
	s := out.String()
	if strings.Contains(s, "\n") {
		t.Errorf("terminal mode wrote a newline:\n%q", s)
	}
	const clear = "\r\x1b[K"
	if !strings.HasPrefix(s, clear) || !strings.HasSuffix(s, clear) {
		t.Errorf("want every draw to start with %q and the line cleared at the end: %q", clear, s)
	}
	draws := strings.Split(strings.TrimSuffix(strings.TrimPrefix(s, clear), clear), clear)
	// A draw per pass start and end, plus at most one per drawEvery.
	if maxDraws := 2*len(scriptedRun) + int(total/drawEvery) + 1; len(draws) > maxDraws {
		t.Errorf("%d draws over %s, want at most %d", len(draws), total, maxDraws)
	}
	sawLeft := false
	for _, d := range draws {
		if len(d) > p.width-1 {
			t.Errorf("draw %q is %d wide, terminal %d", d, len(d), p.width)
		}
		if !strings.HasPrefix(d, "limpid: [") {
			t.Errorf("draw %q: want the bar", d)
		}
		sawLeft = sawLeft || strings.Contains(d, "left")
	}
	if !sawLeft {
		t.Errorf("no draw showed the time left: %q", draws)
	}
	if last := draws[len(draws)-1]; !strings.Contains(last, "100%") {
		t.Errorf("last draw %q: want 100%%", last)
	}
}

// A real restore with the automatic choice (noise pass, choice passes,
// final pass) on a 16-tile band, to stdout as the data: the progress is on
// stderr only, in plain lines (stderr is not a terminal), sparse, and ends
// with the final pass's 100 % line; stdout is the GeoTIFF alone. Both
// methods run the passes (the particle method's choice uses the grid risk).
// Source: TIFF 6.0, section 2 (a little-endian file starts "II", 42);
// POSIX.1-2017 XBD 10.1 (diagnostics go to standard error).
func TestProgressRestoreLines(t *testing.T) {
	for _, method := range []string{"grid", "particle"} {
		t.Run(method, func(t *testing.T) {
			code, stdout, stderr := limpid(t, nil, "restore", "--method", method, "--psf", "gaussian:sigma=0.7", "--tile", "64",
				"--bands", "1", "--workers", "2", fixture("observed.tif"), "-")
			if code != 0 {
				t.Fatalf("exit %d: %s", code, stderr)
			}
			if !strings.HasPrefix(stdout, "II*\x00") || strings.Contains(stdout, "limpid: ") || strings.Contains(stdout, " tiles (") {
				t.Errorf("stdout is not the GeoTIFF alone (starts %q)", stdout[:min(len(stdout), 16)])
			}
			if strings.Contains(stderr, "\r") {
				t.Errorf("stderr is not a terminal but holds a carriage return:\n%q", stderr)
			}
			lines := strings.Split(strings.TrimSuffix(stderr, "\n"), "\n")
			passes := strings.Count(stderr, "limpid: estimating") + strings.Count(stderr, "limpid: choosing")
			if passes < 2 {
				t.Errorf("want the noise and choice passes announced:\n%s", stderr)
			}
			// Pass lines, one per 10 % of the run and one for the end (the
			// run takes seconds, far below plainEvery); common practice,
			// no source.
			if len(lines) > passes+11 {
				t.Errorf("%d stderr lines for %d passes, want at most %d:\n%s", len(lines), passes, passes+11, stderr)
			}
			if last := lines[len(lines)-1]; !strings.HasPrefix(last, "limpid: restored 16/16 tiles (100%) in ") {
				t.Errorf("last line %q: want the final pass's 100 %% line", last)
			}
		})
	}
}

// The tile-stream route keeps its one line at the end (a stream's length is
// not known in advance): stdout carries the restored stream only, stderr
// the count. Source: POSIX.1-2017 XBD 10.1 (diagnostics on standard error).
func TestProgressStreamStdout(t *testing.T) {
	packed := mustRun(t, nil, "tiles", "pack", "--tile", "64", "--overlap", "32", "--bands", "1", fixture("observed.tif"), "-")
	code, stdout, stderr := limpid(t, packed, args([]string{"restore", "--input-format", "arrow", "--output-format", "arrow"}, streamArgs, []string{"-", "-"})...)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if strings.Contains(stdout, "limpid: ") || strings.Contains(stdout, "tiles (") {
		t.Error("progress text on stdout")
	}
	if strings.TrimSpace(stderr) != "limpid: restored 16 tiles" {
		t.Errorf("stderr %q: want the one count line", stderr)
	}
}

// A pipe is not a terminal: the plain mode. Source: POSIX.1-2017 isatty()
// (true only for a terminal device); golang.org/x/term IsTerminal.
func TestProgressPipeIsPlain(t *testing.T) {
	r, w, err := os.Pipe()
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	defer w.Close()
	if p := newRunProgress(w, 0, 1); p.tty {
		t.Error("a pipe taken for a terminal")
	}
}

// The time left is shown no finer than it is worth (the project's rounding
// rule, roundLeft; common practice, no source); the text form of a
// duration is Go's time.Duration.String (Source: go doc time.Duration.String).
func TestProgressLeftText(t *testing.T) {
	for _, c := range []struct {
		d    time.Duration
		want string
	}{
		{400 * time.Millisecond, "under 1s left"},
		{42*time.Second + 400*time.Millisecond, "about 42s left"},
		{time.Minute + 13*time.Second, "about 1m15s left"},
		{12*time.Minute + 20*time.Second, "about 12m0s left"},
	} {
		if got := leftText(c.d); got != c.want {
			t.Errorf("leftText(%v) = %q, want %q", c.d, got, c.want)
		}
	}
}

// On a real terminal the run draws one line redrawn in place and leaves it
// cleared: the test binary runs as limpid under util-linux script(1),
// which gives it a pseudo-terminal (stderr is then a terminal:
// golang.org/x/term IsTerminal, POSIX isatty), and every redraw starts
// with CR and ECMA-48 EL (erase in line, CSI K; ECMA-48 5th ed. 8.3.41).
// Skipped where script(1) is missing.
func TestProgressTerminal(t *testing.T) {
	scriptBin, err := exec.LookPath("script")
	if err != nil {
		t.Skip("script(1) not installed")
	}
	out := filepath.Join(t.TempDir(), "out.tif")
	line := strings.Join([]string{os.Args[0], "restore", "--psf", "gaussian:sigma=0.7", "--tile", "64", "--bands", "1",
		"--workers", "2", fixture("observed.tif"), out}, " ")
	cmd := exec.Command(scriptBin, "-qec", line, "/dev/null")
	cmd.Env = append(os.Environ(), childEnv+"=1")
	got, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("%s under script(1): %v\n%q", line, err, got)
	}
	s := string(got)
	if !strings.Contains(s, "\r\x1b[Klimpid: [") {
		t.Fatalf("no redrawn progress bar on the terminal:\n%q", s)
	}
	if strings.Contains(s, "tiles (100%)") {
		t.Errorf("the plain log lines were written on a terminal:\n%q", s)
	}
	// The last redraw is erased at the end: the terminal's final output
	// is the clearing sequence (script(1) may add its own CR LF).
	if end := strings.TrimRight(s, "\r\n"); !strings.HasSuffix(end, "\r\x1b[K") {
		t.Errorf("the progress line is not cleared at the end: ends %q", end[max(0, len(end)-60):])
	}
	if _, err := os.Stat(out); err != nil {
		t.Errorf("no output: %v", err)
	}
}
