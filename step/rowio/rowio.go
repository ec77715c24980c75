package rowio

import (
	"context"
	"sync"

	"limpid/raster"
)

// Strip is a block of full-width source rows of every band read: rows
// [Y, Y + len(Rows[b])/Width) of band b.
type Strip struct {
	Y    int
	Rows [][]float32
}

// Span is a range of rows [Start, End).
type Span struct{ Start, End int }

// Ahead reads the strips of a list of row ranges, in order, on its own
// goroutine into a fixed set of free strips: the next strip is read while
// the caller works on the current one. src is used only by that goroutine
// between NewAhead and Close.
type Ahead struct {
	free   chan *Strip
	filled chan filled
	cancel context.CancelFunc
	done   chan struct{}
}

type filled struct {
	st  *Strip
	err error
}

// NewAhead allocates n strips of len(bands) planes of size floats each and
// starts reading spans (rows of bands of src) into them. The reading stops
// at the first error, which Next returns in its turn.
func NewAhead(ctx context.Context, src raster.Reader, bands []int, spans []Span, n, size int) *Ahead {
	ctx, cancel := context.WithCancel(ctx)
	a := &Ahead{free: make(chan *Strip, n), filled: make(chan filled, n), cancel: cancel, done: make(chan struct{})}
	for k := 0; k < n; k++ {
		st := &Strip{Rows: make([][]float32, len(bands))}
		for i := range st.Rows {
			st.Rows[i] = make([]float32, size)
		}
		a.free <- st
	}
	go a.read(ctx, src, bands, spans)
	return a
}

func (a *Ahead) read(ctx context.Context, src raster.Reader, bands []int, spans []Span) {
	defer close(a.done)
	for _, s := range spans {
		var st *Strip
		select {
		case st = <-a.free:
		case <-ctx.Done():
			return
		}
		st.Y = s.Start
		err := src.ReadRows(s.Start, s.End, bands, st.Rows)
		a.filled <- filled{st, err} // capacity n: never blocks
		if err != nil {
			return
		}
	}
}

// Next returns the strip of the next span, or the error that reading it
// met, or ctx's error.
func (a *Ahead) Next(ctx context.Context) (*Strip, error) {
	select {
	case f := <-a.filled:
		return f.st, f.err
	case <-ctx.Done():
		return nil, ctx.Err()
	}
}

// Release hands a strip that Next returned back for reading.
func (a *Ahead) Release(st *Strip) { a.free <- st }

// Close stops the reading and waits for it: src is not touched after Close
// returns.
func (a *Ahead) Close() {
	a.cancel()
	<-a.done
}

// Job is a block of finished rows [Y0, Y1) of every band for Writer: Rows
// to dst, and SE (nil when there is none) to the standard-error output.
type Job struct {
	Y0, Y1 int
	Rows   [][]float32
	SE     [][]float32
}

// Writer writes finished rows on its own goroutine, so that compression
// overlaps the computation of the next rows. One set of row buffers (and one
// of standard-error buffers) circulates: the caller fills it while the
// previous rows are written, and Buffer waits for the write to finish.
type Writer struct {
	dst, se      raster.Writer
	jobs         chan Job
	free, freeSE chan [][]float32
	done         chan struct{}
	mu           sync.Mutex
	err          error
}

// NewWriter starts a writer to dst (and se, when withSE) with buffers of nb
// planes of n floats.
func NewWriter(dst, se raster.Writer, nb, n int, withSE bool) *Writer {
	w := &Writer{dst: dst, se: se, jobs: make(chan Job), free: make(chan [][]float32, 1), done: make(chan struct{})}
	bufs := func() [][]float32 {
		b := make([][]float32, nb)
		for i := range b {
			b[i] = make([]float32, n)
		}
		return b
	}
	w.free <- bufs()
	if withSE {
		w.freeSE = make(chan [][]float32, 1)
		w.freeSE <- bufs()
	}
	go w.loop()
	return w
}

func (w *Writer) loop() {
	defer close(w.done)
	for j := range w.jobs {
		if w.failed() == nil {
			err := w.dst.WriteRows(j.Y0, j.Y1, j.Rows)
			if err == nil && j.SE != nil && w.se != nil {
				err = w.se.WriteRows(j.Y0, j.Y1, j.SE)
			}
			w.mu.Lock()
			w.err = err
			w.mu.Unlock()
		}
		w.free <- j.Rows
		if j.SE != nil {
			w.freeSE <- j.SE
		}
	}
}

func (w *Writer) failed() error {
	w.mu.Lock()
	defer w.mu.Unlock()
	return w.err
}

// Buffer returns the free set of row buffers once the previous rows are
// written, or the writer's failure.
func (w *Writer) Buffer() ([][]float32, error) {
	bufs := <-w.free
	if err := w.failed(); err != nil {
		w.free <- bufs
		return nil, err
	}
	return bufs, nil
}

// BufferSE returns the free set of standard-error buffers (a Writer made
// withSE).
func (w *Writer) BufferSE() [][]float32 { return <-w.freeSE }

// Write queues j; its buffers come back free once written.
func (w *Writer) Write(j Job) { w.jobs <- j }

// Close waits for the queued rows and returns the first write failure.
func (w *Writer) Close() error {
	close(w.jobs)
	<-w.done
	return w.failed()
}
