package arrowio

import (
	"errors"
	"fmt"
	"io"

	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
)

// gate passes writes through until it is shut; then it swallows them.
type gate struct {
	w   io.Writer
	off bool
}

func (g *gate) Write(p []byte) (int, error) {
	if g.off {
		return len(p), nil
	}
	return g.w.Write(p)
}

// Writer writes a tile stream: the schema (with the header's metadata), one
// record batch per tile, and on Close the end-of-stream marker. Not safe for
// concurrent use.
type Writer struct {
	g      *gate
	iw     *ipc.Writer
	hdr    *Header
	b      *array.RecordBuilder
	closed bool
}

// NewWriter prepares a stream for h on w. Nothing is written before the first
// Write or Close.
func NewWriter(w io.Writer, h *Header, opts ...Option) (*Writer, error) {
	c := newConfig(opts)
	s, err := Schema(h)
	if err != nil {
		return nil, err
	}
	iopts := []ipc.Option{ipc.WithSchema(s), ipc.WithAllocator(c.mem)}
	switch c.compression {
	case "", "none":
	case "zstd":
		iopts = append(iopts, ipc.WithZstd())
	case "lz4":
		iopts = append(iopts, ipc.WithLZ4())
	default:
		return nil, fmt.Errorf("arrowio: compression %q: use none, zstd or lz4", c.compression)
	}
	g := &gate{w: w}
	return &Writer{g: g, iw: ipc.NewWriter(g, iopts...), hdr: h, b: array.NewRecordBuilder(c.mem, s)}, nil
}

// Write appends t as one record batch. t is checked like a read tile.
func (w *Writer) Write(t *Tile) error {
	if w.closed {
		return errors.New("arrowio: write after Close")
	}
	if err := w.hdr.CheckTile(t); err != nil {
		return fmt.Errorf("arrowio: writing: %w", err)
	}
	n := t.W * t.H
	if len(t.Pix) != n {
		return fmt.Errorf("arrowio: writing tile (%d,%d) band %d: %d pixels for a %dx%d buffer", t.Col, t.TileRow, t.Band+1, len(t.Pix), t.W, t.H)
	}
	if t.Uncertainty != nil && len(t.Uncertainty) != n {
		return fmt.Errorf("arrowio: writing tile (%d,%d) band %d: %d uncertainty values for a %dx%d buffer", t.Col, t.TileRow, t.Band+1, len(t.Uncertainty), t.W, t.H)
	}
	b := w.b
	b.Field(0).(*array.StringBuilder).Append(t.SceneID)
	b.Field(1).(*array.Int32Builder).Append(int32(t.Band + 1))
	b.Field(2).(*array.StringBuilder).Append(t.BandName)
	for i, v := range []int{t.Col, t.TileRow, t.X, t.Y, t.W, t.H, t.HaloLeft, t.HaloTop, t.HaloRight, t.HaloBottom} {
		b.Field(3 + i).(*array.Int32Builder).Append(int32(v))
	}
	appendList(b.Field(13).(*array.ListBuilder), t.Pix, true)
	if w.hdr.Kind == KindRestored {
		appendList(b.Field(14).(*array.ListBuilder), t.Uncertainty, t.Uncertainty != nil)
		b.Field(15).(*array.Int32Builder).Append(int32(t.Iterations))
		b.Field(16).(*array.Float64Builder).Append(t.Change)
	}
	rec := b.NewRecord()
	defer rec.Release()
	if err := w.iw.Write(rec); err != nil {
		return fmt.Errorf("arrowio: writing tile (%d,%d) band %d: %w", t.Col, t.TileRow, t.Band+1, err)
	}
	return nil
}

func appendList(lb *array.ListBuilder, v []float32, valid bool) {
	if !valid {
		lb.AppendNull()
		return
	}
	lb.Append(true)
	vb := lb.ValueBuilder().(*array.Float32Builder)
	vb.AppendValues(v, nil)
}

// Close writes the end-of-stream marker (and the schema, for a stream without
// tiles) and releases the writer. It does not close the underlying writer.
func (w *Writer) Close() error {
	if w.closed {
		return errors.New("arrowio: Close called twice")
	}
	w.closed = true
	w.b.Release()
	if err := w.iw.Close(); err != nil {
		return fmt.Errorf("arrowio: finishing the stream: %w", err)
	}
	return nil
}

// Abandon releases the writer after a failure without writing anything more:
// the stream stops after the last complete batch, without the end-of-stream
// marker, which strict readers (this package's) report as truncated.
func (w *Writer) Abandon() {
	if w.closed {
		return
	}
	w.closed = true
	w.g.off = true
	w.b.Release()
	w.iw.Close()
}

// Kind is the schema's stream kind.
func (w *Writer) Kind() string { return w.hdr.Kind }
