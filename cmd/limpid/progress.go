package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
	"time"

	"golang.org/x/term"

	"limpid/step"
	"limpid/step/watch"
)

// runProgress shows the progress of one run over all its passes (the noise
// pass, the passes of the automatic choice, the final pass) as one total
// with an estimate of the time left. It is the engine's watch.Watcher.
//
// On a terminal (stderr is a TTY) it redraws one line in place ("\r", at
// most every drawEvery) and clears it at Close. Otherwise it writes plain
// log lines: "limpid: <what>" when a noise or choice pass starts (the
// engine's description), and a progress line when the run's percentage
// reaches a new multiple of 10 or plainEvery has gone by since the last
// line; the final pass's lines keep the form "limpid: restored 4/16 tiles
// (25%) in 16s" (scripts and tests wait for "(100%)").
//
// How the time left is estimated: each kind of pass has a cost per tile in
// seconds, measured in this run (time spent in passes of that kind over
// their tiles done, the running pass included once it has finished a
// tile). A kind not timed yet takes a timed kind's cost scaled by
// priorCost. The time left is the running pass's tiles to go, plus the
// choice passes still expected (choices minus those started, each of the
// last sample pass's tiles), plus the final pass (finalTiles), each
// times its kind's cost. The choice passes still expected are dropped
// when the final pass starts (a choice stops early when every band's risk
// rose), so the total shrinks then. The percentage is elapsed / (elapsed +
// time left) and never goes back.
type runProgress struct {
	mu    sync.Mutex
	w     io.Writer
	tty   bool
	width int              // terminal columns (tty)
	now   func() time.Time // the clock (a fake one in tests)
	start time.Time

	choices    int // choice passes expected in all (an estimate)
	finalTiles int // tiles of the final pass; 0: none (limpid plan)

	cur     *passRun
	spent   map[watch.Kind]time.Duration // finished passes, per kind
	tiles   map[watch.Kind]int           // their tiles, per kind
	nChoice int                          // choice passes started
	sample  int                          // tiles of the last noise or choice pass
	final   bool                         // the final pass has started

	shown      int // the largest percentage shown
	drawn      bool
	lastDraw   time.Time
	lastLine   time.Time
	lastDecile int
	closed     bool
}

type passRun struct {
	p     watch.Pass
	n     int // its index among the choice passes (1-based)
	done  int
	began time.Time
}

const (
	// drawEvery bounds the redraws of the terminal line (common practice
	// for progress displays, no source: about 4 a second is smooth to the
	// eye and costs nothing).
	drawEvery = 250 * time.Millisecond
	// plainEvery is the longest gap between plain progress lines when the
	// percentage moves slowly (common practice, no source).
	plainEvery = 30 * time.Second
	// barWidth is the width of the bar on a terminal, in characters.
	barWidth = 20
)

// priorCost is the cost of one tile of each kind of pass relative to a
// tile of the final pass, used until the run has timed that kind. Measured
// on a 2048 x 2048 UInt16 band, restore --psf gaussian:sigma=1.5
// --workers 2 with the default automatic choice, after issue 13 (a quiet
// 2-core machine; stderr lines timestamped): 16 noise tiles in 0.37 s, 16
// choice tiles in 0.27-0.40 s per candidate, the 16 final tiles in 0.58 s.
// A noise tile only samples the data; a choice tile runs one candidate
// bandwidth with the risk estimate on a window of at most 1 Mpixel / 16
// (the pixel budget), so it stays below a final tile on large scenes.
var priorCost = map[watch.Kind]float64{watch.Noise: 0.6, watch.Choice: 0.6, watch.Final: 1}

// newRunProgress is the progress of a run on stderr: choices is the number
// of choice passes expected, finalTiles the final pass's tiles (bands x
// tiles; 0 when the run has no final pass).
func newRunProgress(stderr io.Writer, choices, finalTiles int) *runProgress {
	p := &runProgress{w: stderr, now: time.Now, choices: choices, finalTiles: finalTiles, width: 80}
	if f, ok := stderr.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
		p.tty = true
		if w, _, err := term.GetSize(int(f.Fd())); err == nil && w > 20 {
			p.width = w
		}
	}
	p.start = p.now()
	p.lastLine = p.start
	return p
}

// expectedChoices is the number of choice passes cfg's run makes at most:
// one per candidate bandwidth for a global choice of the smoothing, one
// pass for a per-tile choice or the automatic stop alone, none with fixed
// settings or replayed decisions.
func expectedChoices(cfg step.Config) int {
	switch {
	case cfg.Decided != nil || (!cfg.SmoothAuto && cfg.Stop != step.StopAuto):
		return 0
	case !cfg.SmoothAuto || cfg.Choose == step.ChoosePerTile:
		return 1
	}
	return len(step.AutoSmooths)
}

// Start begins a pass (watch.Watcher).
func (r *runProgress) Start(p watch.Pass) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.closed {
		return
	}
	now := r.now()
	r.endPass(now)
	pr := &passRun{p: p, began: now}
	switch p.Kind {
	case watch.Choice:
		r.nChoice++
		pr.n = r.nChoice
		r.choices = max(r.choices, r.nChoice)
		r.sample = p.Tiles
	case watch.Noise:
		r.sample = p.Tiles
	case watch.Final:
		r.final = true
		r.finalTiles = p.Tiles
	}
	r.cur = pr
	if r.tty {
		r.draw(now)
		return
	}
	if p.Kind != watch.Final {
		fmt.Fprintf(r.w, "limpid: %s\n", p.What)
	}
}

// Done counts tiles of the running pass (watch.Watcher).
func (r *runProgress) Done(n int) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.closed || r.cur == nil {
		return
	}
	now := r.now()
	r.cur.done += n
	finished := r.cur.done >= r.cur.p.Tiles
	if r.tty {
		if finished || now.Sub(r.lastDraw) >= drawEvery {
			r.draw(now)
		}
		return
	}
	pct, _, _ := r.estimate(now)
	lastOfRun := finished && r.cur.p.Kind == watch.Final
	if pct/10 > r.lastDecile/10 || now.Sub(r.lastLine) >= plainEvery || lastOfRun {
		r.lastDecile, r.lastLine = pct, now
		fmt.Fprintln(r.w, r.plainLine(now))
	}
}

// Close ends the display: the terminal line is cleared. Events after it
// are ignored.
func (r *runProgress) Close() {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.closed {
		return
	}
	r.closed = true
	if r.tty && r.drawn {
		fmt.Fprint(r.w, "\r\x1b[K") // ECMA-48 EL (erase in line), CSI K
	}
}

// endPass books the running pass's time and tiles under its kind.
func (r *runProgress) endPass(now time.Time) {
	if r.cur == nil {
		return
	}
	if r.spent == nil {
		r.spent, r.tiles = map[watch.Kind]time.Duration{}, map[watch.Kind]int{}
	}
	r.spent[r.cur.p.Kind] += now.Sub(r.cur.began)
	r.tiles[r.cur.p.Kind] += r.cur.done
	r.cur = nil
}

// perTile is the estimated seconds per tile of kind k (false: nothing
// timed yet).
func (r *runProgress) perTile(k watch.Kind, now time.Time) (float64, bool) {
	measured := func(k watch.Kind) (float64, bool) {
		t, n := r.spent[k].Seconds(), r.tiles[k]
		if r.cur != nil && r.cur.p.Kind == k && r.cur.done > 0 {
			t, n = t+now.Sub(r.cur.began).Seconds(), n+r.cur.done
		}
		if n == 0 {
			return 0, false
		}
		return t / float64(n), true
	}
	if c, ok := measured(k); ok {
		return c, true
	}
	// The most recent kind timed, scaled by the prior ratio.
	for _, o := range []watch.Kind{watch.Final, watch.Choice, watch.Noise} {
		if c, ok := measured(o); ok {
			return c * priorCost[k] / priorCost[o], true
		}
	}
	return 0, false
}

// estimate returns the run's percentage (never lower than shown before),
// the time left and whether that is known yet.
func (r *runProgress) estimate(now time.Time) (int, time.Duration, bool) {
	left, known := 0.0, true
	add := func(k watch.Kind, tiles int) {
		if tiles <= 0 {
			return
		}
		c, ok := r.perTile(k, now)
		known = known && ok
		left += c * float64(tiles)
	}
	if r.cur != nil {
		add(r.cur.p.Kind, r.cur.p.Tiles-r.cur.done)
	}
	if !r.final {
		sample := r.sample
		if sample == 0 {
			sample = r.finalTiles // not seen yet: at most the scene
		}
		add(watch.Choice, (r.choices-r.nChoice)*sample)
		add(watch.Final, r.finalTiles)
	}
	pct := 0
	if known {
		el := now.Sub(r.start).Seconds()
		pct = 100
		if el+left > 0 && left > 0 {
			pct = int(100 * el / (el + left))
		}
		if left > 0 {
			pct = min(pct, 99)
		}
	}
	r.shown = max(r.shown, pct)
	return r.shown, time.Duration(left * float64(time.Second)), known
}

// label names the running pass: "noise model", "choice pass 2/4",
// "restoring".
func (r *runProgress) label() string {
	switch r.cur.p.Kind {
	case watch.Noise:
		return "noise model"
	case watch.Choice:
		return fmt.Sprintf("choice pass %d/%d", r.cur.n, r.choices)
	case watch.Final:
		return "restoring"
	}
	return string(r.cur.p.Kind)
}

// plainLine is a progress line for a log.
func (r *runProgress) plainLine(now time.Time) string {
	pct, left, known := r.estimate(now)
	c := r.cur
	passPct := 100 * c.done / max(c.p.Tiles, 1)
	el := now.Sub(r.start).Round(time.Second)
	var b strings.Builder
	if c.p.Kind == watch.Final {
		fmt.Fprintf(&b, "limpid: restored %d/%d tiles (%d%%) in %s", c.done, c.p.Tiles, passPct, el)
		if c.done >= c.p.Tiles || r.nChoice == 0 && r.sample == 0 {
			return b.String() // the run's only pass, or its end
		}
	} else {
		fmt.Fprintf(&b, "limpid: %s: %d/%d tiles (%d%%) in %s", r.label(), c.done, c.p.Tiles, passPct, el)
	}
	fmt.Fprintf(&b, "; run %d%%", pct)
	if known {
		fmt.Fprintf(&b, ", %s", leftText(left))
	}
	return b.String()
}

// draw redraws the terminal line.
func (r *runProgress) draw(now time.Time) {
	pct, left, known := r.estimate(now)
	c := r.cur
	fill := barWidth * pct / 100
	bar := strings.Repeat("#", fill) + strings.Repeat(".", barWidth-fill)
	s := fmt.Sprintf("limpid: [%s] %3d%%", bar, pct)
	if known && left > 0 {
		s += fmt.Sprintf(" %s,", leftText(left))
	}
	// The least needed last: a narrow terminal cuts them off.
	s += fmt.Sprintf(" %s %d/%d tiles, %s", r.label(), c.done, c.p.Tiles, now.Sub(r.start).Round(time.Second))
	if len(s) > r.width-1 {
		s = s[:r.width-1] // the line must not wrap, or "\r" redraws below it
	}
	fmt.Fprint(r.w, "\r\x1b[K"+s)
	r.drawn, r.lastDraw = true, now
}

// leftText says the time left: "about 1m15s left", "under 1s left".
func leftText(d time.Duration) string {
	if d < time.Second {
		return "under 1s left"
	}
	return fmt.Sprintf("about %s left", roundLeft(d))
}

// roundLeft rounds an estimate of the time left to what it is worth: whole
// seconds under a minute, 5 s under 10 minutes, whole minutes above.
func roundLeft(d time.Duration) time.Duration {
	switch {
	case d < time.Minute:
		return d.Round(time.Second)
	case d < 10*time.Minute:
		return d.Round(5 * time.Second)
	}
	return d.Round(time.Minute)
}
