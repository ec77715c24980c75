package arrowio

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
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
	// compressed: buffers are compressed (batchBodyBound's margin).
	compressed bool
}

// NewWriter prepares a stream for h on w. Nothing is written before the first
// Write or Close.
func NewWriter(w io.Writer, h *Header, opts ...Option) (*Writer, error) {
	c := newConfig(opts)
	s, err := Schema(h)
	if err != nil {
		return nil, err
	}
	if err := checkWritable(h, s, c.mem); err != nil {
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
	return &Writer{g: g, iw: ipc.NewWriter(g, iopts...), hdr: h, b: array.NewRecordBuilder(c.mem, s), compressed: c.compression == "zstd" || c.compression == "lz4"}, nil
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
	if body := batchBodyBound(t, w.hdr.Kind == KindRestored, w.compressed); body > MaxBatchBytes {
		return fmt.Errorf("arrowio: writing: %w", TileErrorf(t, "", "the batch would take up to %d body bytes, over the %d-byte limit of one batch (MaxBatchBytes) readers accept", body, MaxBatchBytes))
	}
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

// checkWritable applies to a header about to be written every check the
// Reader applies to a schema (so that this package never writes a stream
// it refuses): the metadata decoded back as the reader decodes it, band
// descriptions that survive it (the band_name column must equal them) and
// the size of the schema message (MaxMetadataBytes). Nothing has been
// written when it fails.
func checkWritable(h *Header, s *arrow.Schema, mem memory.Allocator) error {
	back, err := decodeMetadata(s.Metadata())
	if err != nil {
		return err
	}
	for i, b := range h.Bands {
		if back.Bands[i].Description != b.Description {
			return schemaErrorf("", "metadata %s entry %d: description %q is not valid UTF-8 (JSON would change it and readers would refuse the band's tiles)", KeyBands, i+1, clip(b.Description))
		}
	}
	size, err := schemaMessageSize(s, mem)
	if err != nil {
		return err
	}
	if size > MaxMetadataBytes {
		key, n := largestItem(s.Metadata())
		return schemaErrorf("", "message metadata size %d is outside 1 to %d bytes (MaxMetadataBytes, what readers accept); the largest item is %s (%d bytes)", size, MaxMetadataBytes, key, n)
	}
	return nil
}

// headWriter keeps the first 8 bytes written (the IPC continuation marker
// and the metadata size) and discards the rest.
type headWriter struct {
	head [8]byte
	n    int
}

func (w *headWriter) Write(p []byte) (int, error) {
	if w.n < len(w.head) {
		w.n += copy(w.head[w.n:], p)
	}
	return len(p), nil
}

// schemaMessageSize is the metadata size of the schema message Arrow writes
// for s (the int32 after the continuation marker; Arrow columnar format,
// "Encapsulated message format"), from a dry run into a discarding writer.
func schemaMessageSize(s *arrow.Schema, mem memory.Allocator) (int64, error) {
	var hw headWriter
	iw := ipc.NewWriter(&hw, ipc.WithSchema(s), ipc.WithAllocator(mem))
	if err := iw.Close(); err != nil {
		return 0, fmt.Errorf("arrowio: encoding the schema: %w", err)
	}
	if hw.n < 8 || binary.LittleEndian.Uint32(hw.head[:4]) != continuation {
		return 0, errors.New("arrowio: encoding the schema: no IPC message written")
	}
	return int64(int32(binary.LittleEndian.Uint32(hw.head[4:8]))), nil
}

// largestItem names the largest schema metadata item (key and value bytes).
func largestItem(md arrow.Metadata) (string, int) {
	key, n := "", -1
	for i, k := range md.Keys() {
		if l := len(k) + len(md.Values()[i]); l > n {
			key, n = k, l
		}
	}
	return key, n
}

// batchBodyBound bounds the body of the record batch that holds t: every
// Arrow buffer padded to 8 bytes (Arrow columnar format, "Buffer alignment
// and padding"), 64 bytes for each small buffer of the 17 columns, and for
// compressed buffers their 8-byte length prefix plus 1/64 of growth (LZ4 and
// zstd expand incompressible input by well under 1 %: LZ4 block format's
// bound n + n/255 + 16, ZSTD_COMPRESSBOUND n + n/256 + 64 KiB-dependent
// margin of at most 64 bytes per block) and 1 KiB of frame overhead.
func batchBodyBound(t *Tile, restored, compressed bool) int64 {
	pad := func(n int64) int64 { return (n + 7) &^ 7 }
	big := []int64{int64(len(t.SceneID)), int64(len(t.BandName)), 4 * int64(t.W) * int64(t.H)}
	if restored && t.Uncertainty != nil {
		big = append(big, 4*int64(t.W)*int64(t.H))
	}
	body := int64(64 * 17 * 3)
	for _, n := range big {
		if compressed {
			n += 8 + n/64 + 1024
		}
		body += pad(n)
	}
	return body
}
