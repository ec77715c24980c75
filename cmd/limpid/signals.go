package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"sync"
	"syscall"
	"time"

	"golang.org/x/term"

	"limpid/raster/scratch"
)

// Interruptions: SIGINT, SIGTERM and SIGHUP cancel the run's context; every
// phase stops at its next check (the stdin copy at once, the tile pipeline
// between tiles, the commit between phases and 1 MiB pieces), its deferred
// cleanups remove its temporaries, and the command exits 128 + the signal's
// number with one line; GDAL's COG copy stops at its next progress step
// (raster/gdal's translate). Phases that cannot be interrupted (GDAL
// reading a block or flushing a GeoTIFF on close, a write blocked on a
// full pipe) are cut short:
// interruptGrace after the signal (or at a second signal) main removes every
// temporary the process holds (scratch.RemoveAll) and exits.
//
// Source: POSIX.1-2017, Shell & Utilities, 2.8.2 "Exit Status for
// Commands": a command terminated by a signal reports an exit status greater
// than 128, which shells give as 128 + the signal's number (SIGHUP 1,
// SIGINT 2, SIGPIPE 13, SIGTERM 15 are the numbers POSIX kill -l fixes).

// interruptGrace is how long main waits for the run to stop by itself after
// a signal; with the cleanup it keeps the exit within 1 s of the signal.
const interruptGrace = 400 * time.Millisecond

// exitBrokenPipe is the exit status when a stream OUTPUT's reader goes away
// (EPIPE): 128 + SIGPIPE (13), what a shell reports for a command killed by
// SIGPIPE, so `set -o pipefail` scripts see the same status as for any
// command behind `| head`. Source: POSIX.1-2017 write(): "[EPIPE] An attempt
// is made to write to a pipe or FIFO that is not open for reading by any
// process ... A SIGPIPE signal shall also be sent to the thread"; the exit
// status as above.
const exitBrokenPipe = 128 + 13

// interrupt is the cause of a run's context canceled by a signal.
type interrupt struct{ sig syscall.Signal }

func (i interrupt) Error() string { return "interrupted (" + sigName(i.sig) + ")" }

func sigName(s syscall.Signal) string {
	switch s {
	case syscall.SIGINT:
		return "SIGINT"
	case syscall.SIGTERM:
		return "SIGTERM"
	case syscall.SIGHUP:
		return "SIGHUP"
	}
	return s.String()
}

// interrupted returns the signal that canceled ctx, if one did.
func interrupted(ctx context.Context) (syscall.Signal, bool) {
	var i interrupt
	if errors.As(context.Cause(ctx), &i) {
		return i.sig, true
	}
	return 0, false
}

// withSignal returns a context canceled by the interrupt of sig (tests
// cancel an in-process run this way).
func withSignal(parent context.Context) (context.Context, func(syscall.Signal)) {
	ctx, cancel := context.WithCancelCause(parent)
	return ctx, func(s syscall.Signal) { cancel(interrupt{s}) }
}

// mainOnce is set by main: the line is printed once per process, by run
// or by main's stopNow, whichever comes first. In-process runs (tests)
// print their own.
var mainOnce *sync.Once

// watchRun prepares a run for interruptions: stdin becomes interruptible
// and stopped, called once the run has returned, reports whether a signal
// ended it, printing the run's line, and its exit status.
func watchRun(ctx context.Context, stdin io.Reader) (io.Reader, func(stderr io.Writer) (int, bool)) {
	mark := scratch.Mark()
	return interruptible(ctx, stdin), func(stderr io.Writer) (int, bool) {
		sig, ok := interrupted(ctx)
		if !ok {
			return 0, false
		}
		return reportInterrupt(stderr, sig, mark), true
	}
}

// reportInterrupt prints the one line of an interrupted run (the outputs
// finished since mark) and returns the exit status.
func reportInterrupt(stderr io.Writer, sig syscall.Signal, mark scratch.Marker) int {
	once := mainOnce
	if once == nil {
		once = new(sync.Once)
	}
	once.Do(func() {
		written, incomplete := scratch.OutputsSince(mark)
		var b strings.Builder
		fmt.Fprintf(&b, "limpid: interrupted (%s)", sigName(sig))
		switch {
		case len(written) == 0 && len(incomplete) == 0:
			b.WriteString(", nothing written")
		case len(written) > 0:
			fmt.Fprintf(&b, "; finished before the signal: %s", strings.Join(written, ", "))
		}
		if len(incomplete) > 0 {
			fmt.Fprintf(&b, "; incomplete: %s", strings.Join(incomplete, ", "))
		}
		fmt.Fprintln(stderr, b.String())
	})
	return 128 + int(sig)
}

// main is the process: signals, the run, the exit status.
func main() {
	sigs := make(chan os.Signal, 2)
	signal.Notify(sigs, syscall.SIGINT, syscall.SIGTERM, syscall.SIGHUP)
	// A write to a closed pipe then fails with EPIPE on every descriptor,
	// stdout included, instead of killing the process silently. Source: Go
	// os/signal documentation, "SIGPIPE": "If the program has called Notify
	// to receive SIGPIPE signals, the file descriptor number does not
	// matter. The SIGPIPE signal will be delivered to the Notify channel,
	// and the write will fail with an EPIPE error." (Nobody reads the
	// channel; signal.Notify never blocks on it.)
	signal.Notify(make(chan os.Signal, 1), syscall.SIGPIPE)
	mainOnce = new(sync.Once)
	ctx, cancel := withSignal(context.Background())
	done := make(chan int, 1)
	go func() { done <- run(ctx, os.Args, os.Stdin, os.Stdout, os.Stderr) }()
	var code int
	select {
	case code = <-done:
	case s := <-sigs:
		sig := s.(syscall.Signal)
		cancel(sig)
		select {
		case code = <-done:
		case <-time.After(interruptGrace):
			code = stopNow(sig)
		case <-sigs:
			code = stopNow(sig)
		}
	}
	os.Exit(code)
}

// stopNow ends a run that did not stop by itself: every temporary goes, the
// line is printed.
func stopNow(sig syscall.Signal) int {
	scratch.RemoveAll()
	if term.IsTerminal(int(os.Stderr.Fd())) {
		fmt.Fprint(os.Stderr, "\r\x1b[K") // the progress line the run did not close
	}
	return reportInterrupt(os.Stderr, sig, scratch.Marker{})
}

// interruptible returns stdin read so that a Read returns ctx's error as
// soon as ctx is done, even while the producer sends nothing (the read
// itself waits in a goroutine of its own; its bytes are dropped once ctx is
// done).
func interruptible(ctx context.Context, r io.Reader) io.Reader {
	if r == nil {
		return nil
	}
	return &ctxReader{ctx: ctx, r: r}
}

type readResult struct {
	n   int
	err error
}

type ctxReader struct {
	ctx     context.Context
	r       io.Reader
	buf     []byte
	pending chan readResult
}

func (c *ctxReader) Read(p []byte) (int, error) {
	if err := c.ctx.Err(); err != nil {
		return 0, err
	}
	if len(p) == 0 {
		return 0, nil
	}
	if c.pending == nil {
		n := min(len(p), 1<<20)
		if cap(c.buf) < n {
			c.buf = make([]byte, n)
		}
		buf, ch := c.buf[:n], make(chan readResult, 1)
		go func() {
			n, err := c.r.Read(buf)
			ch <- readResult{n, err}
		}()
		c.pending = ch
	}
	select {
	case <-c.ctx.Done():
		return 0, c.ctx.Err()
	case res := <-c.pending:
		c.pending = nil
		// The read was started by this same p: a call leaves a read
		// pending only when ctx is done, and then every call fails.
		return copy(p, c.buf[:res.n]), res.err
	}
}
