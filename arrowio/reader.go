package arrowio

import (
	"errors"
	"fmt"
	"io"
	"math"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// Option configures a Reader or a Writer.
type Option func(*config)

type config struct {
	mem         memory.Allocator
	compression string
}

// WithAllocator sets the allocator of Arrow buffers (default
// memory.DefaultAllocator).
func WithAllocator(mem memory.Allocator) Option { return func(c *config) { c.mem = mem } }

// WithCompression selects the Writer's buffer compression: "" or "none"
// (default), "zstd" or "lz4" (LZ4 frame). Readers decompress either.
func WithCompression(name string) Option { return func(c *config) { c.compression = name } }

func newConfig(opts []Option) *config {
	c := &config{mem: memory.DefaultAllocator}
	for _, o := range opts {
		o(c)
	}
	return c
}

// Reader reads tiles from a tile stream, validating every batch. Not safe
// for concurrent use.
type Reader struct {
	mr  *msgReader
	ir  *ipc.Reader
	hdr *Header
	in  io.Reader

	rec   arrow.Record
	row   int
	batch int
	done  bool
	err   error

	// typed columns of the current record
	sceneID, bandName *array.String
	ints              [12]*array.Int32 // band_number ... halo_bottom
	pix, unc          *array.List
	pixV, uncV        []float32
	pixOff, uncOff    []int32
	iters             *array.Int32
	change            *array.Float64
	idx               map[string]int
}

var intCols = [12]string{ColBandNumber, ColTileColumn, ColTileRow, ColBufferX, ColBufferY, ColBufferWidth,
	ColBufferHeight, ColHaloLeft, ColHaloTop, ColHaloRight, ColHaloBottom, ColIterations}

// NewReader reads and validates the schema (blocking until it arrives).
// The caller must Release the Reader.
func NewReader(r io.Reader, opts ...Option) (*Reader, error) {
	c := newConfig(opts)
	mem := guardAlloc{c.mem}
	mr := &msgReader{r: r, mem: mem, refs: 1}
	ir, err := ipc.NewReaderFromMessageReader(mr, ipc.WithAllocator(mem))
	if err != nil {
		mr.Release()
		if mr.err != nil {
			return nil, mr.err
		}
		return nil, &StreamError{Row: -1, Err: fmt.Errorf("cannot decode the schema: %v", err)}
	}
	rd := &Reader{mr: mr, ir: ir, in: r}
	if err := rd.checkSchema(ir.Schema()); err != nil {
		rd.Release()
		return nil, err
	}
	return rd, nil
}

// Header returns what the schema metadata says.
func (r *Reader) Header() *Header { return r.hdr }

// Release frees the reader's buffers.
func (r *Reader) Release() {
	if r.rec != nil {
		r.rec.Release()
		r.rec = nil
	}
	if r.ir != nil {
		r.ir.Release()
		r.ir = nil
	}
}

func typeName(dt arrow.DataType) string {
	if dt == nil {
		return "null"
	}
	return dt.String()
}

func (r *Reader) checkSchema(s *arrow.Schema) error {
	h, err := decodeMetadata(s.Metadata())
	if err != nil {
		return err
	}
	r.hdr = h
	r.idx = map[string]int{}
	for _, f := range fields(h.Kind) {
		ix := s.FieldIndices(f.Name)
		if len(ix) == 0 {
			return schemaErrorf(f.Name, "is missing (a %s stream needs it)", h.Kind)
		}
		if len(ix) > 1 {
			return schemaErrorf(f.Name, "appears %d times", len(ix))
		}
		got := s.Field(ix[0]).Type
		ok := got != nil && got.ID() == f.Type.ID()
		if ok && f.Type.ID() == arrow.LIST {
			ok = got.(*arrow.ListType).Elem().ID() == arrow.FLOAT32
		}
		if !ok {
			return schemaErrorf(f.Name, "has type %s, want %s", typeName(got), f.Type)
		}
		r.idx[f.Name] = ix[0]
	}
	return nil
}

// Next reads the next tile into t, reusing t's pixel buffers. It returns
// false, nil after the last tile of a complete stream (end-of-stream marker
// seen, nothing after it); every problem is a *StreamError.
func (r *Reader) Next(t *Tile) (bool, error) {
	if r.err != nil {
		return false, r.err
	}
	if r.done {
		return false, nil
	}
	for r.rec == nil || r.row >= int(r.rec.NumRows()) {
		if r.rec != nil {
			r.rec.Release()
			r.rec = nil
		}
		if !r.ir.Next() {
			r.done = true
			r.err = r.endError()
			return false, r.err
		}
		r.rec = r.ir.Record()
		r.rec.Retain()
		r.batch = r.mr.batches
		r.row = 0
		if err := r.bindBatch(); err != nil {
			r.err = err
			return false, err
		}
	}
	if err := r.decodeRow(t); err != nil {
		r.err = err
		return false, err
	}
	r.row++
	return true, nil
}

// endError explains why the IPC reader stopped: nil for a complete stream.
func (r *Reader) endError() error {
	if r.mr.err != nil {
		return r.mr.err
	}
	if err := r.ir.Err(); err != nil {
		var se *StreamError
		if errors.As(err, &se) {
			return se
		}
		return &StreamError{Batch: r.mr.batches, Row: -1, Err: fmt.Errorf("malformed record batch: %w", &decodeError{err})}
	}
	if !r.mr.eos {
		return &StreamError{Batch: -1, Row: -1, Err: errors.New("the stream ends without the end-of-stream marker (truncated)")}
	}
	var b [1]byte
	if n, _ := io.ReadFull(r.in, b[:]); n > 0 {
		return &StreamError{Batch: -1, Row: -1, Err: errors.New("data follows the end-of-stream marker (a second stream? mixed schemas are not allowed)")}
	}
	return nil
}

// bindBatch types the record's columns and checks nulls and list offsets
// once per batch. Corrupt buffers can make Arrow's accessors panic: that is
// turned into an error naming the batch and the column being bound.
func (r *Reader) bindBatch() (err error) {
	b := &binder{r: r, rec: r.rec}
	defer func() {
		if p := recover(); p != nil {
			err = &StreamError{Batch: r.batch, Row: -1, Column: b.col, Err: fmt.Errorf("malformed column data: %v", p)}
		}
	}()
	b.n = int(b.rec.NumRows())
	if err := b.strings(); err != nil {
		return err
	}
	if err := b.ints(); err != nil {
		return err
	}
	if r.hdr.Kind == KindRestored {
		a := b.get(ColFinalRelativeChange)
		if err := b.nonNull(ColFinalRelativeChange, a); err != nil {
			return err
		}
		r.change = a.(*array.Float64)
	}
	if err := b.list(ColPixels, true); err != nil {
		return err
	}
	if r.hdr.Kind == KindRestored {
		return b.list(ColUncertainty, false)
	}
	return nil
}

// binder binds the columns of one record to a Reader's typed fields; col is
// the column being bound, for bindBatch's panic message.
type binder struct {
	r   *Reader
	rec arrow.Record
	n   int
	col string
}

func (b *binder) fail(c, format string, a ...any) error {
	return &StreamError{Batch: b.r.batch, Row: -1, Column: c, Err: fmt.Errorf(format, a...)}
}

// get returns column name, which must hold one value per row.
func (b *binder) get(name string) arrow.Array {
	b.col = name
	a := b.rec.Column(b.r.idx[name])
	if a.Len() != b.n {
		panic(fmt.Sprintf("%d values for %d rows", a.Len(), b.n))
	}
	return a
}

func (b *binder) nonNull(name string, a arrow.Array) error {
	if a.NullN() != 0 {
		return b.fail(name, "has %d null values (not allowed)", a.NullN())
	}
	return nil
}

// strings binds scene_id and band_name, checking their offsets against the
// data buffer.
func (b *binder) strings() error {
	for _, name := range []string{ColSceneID, ColBandName} {
		a := b.get(name)
		if err := b.nonNull(name, a); err != nil {
			return err
		}
		s, ok := a.(*array.String)
		if !ok {
			return b.fail(name, "is not a utf8 array")
		}
		off, nbytes := s.ValueOffsets(), 0
		if bufs := s.Data().Buffers(); len(bufs) > 2 && bufs[2] != nil {
			nbytes = bufs[2].Len()
		}
		for i := 0; i+1 < len(off); i++ {
			if off[i] < 0 || off[i+1] < off[i] || int(off[i+1]) > nbytes {
				return &StreamError{Batch: b.r.batch, Row: i, Column: name, Err: fmt.Errorf("string offsets %d-%d are outside the %d bytes", off[i], off[i+1], nbytes)}
			}
		}
		if name == ColSceneID {
			b.r.sceneID = s
		} else {
			b.r.bandName = s
		}
	}
	return nil
}

// ints binds the int32 columns (iterations only in restored streams).
func (b *binder) ints() error {
	r := b.r
	var ok bool
	for i, name := range intCols {
		if name == ColIterations && r.hdr.Kind != KindRestored {
			r.ints[i] = nil
			continue
		}
		a := b.get(name)
		if err := b.nonNull(name, a); err != nil {
			return err
		}
		if r.ints[i], ok = a.(*array.Int32); !ok {
			return b.fail(name, "is not an int32 array")
		}
	}
	return nil
}

// list binds a list<float32> column (pixels, or uncertainty whose rows may
// be null), checking the list offsets of every row against the values.
func (b *binder) list(name string, required bool) error {
	n := b.n
	a := b.get(name)
	if required {
		if err := b.nonNull(name, a); err != nil {
			return err
		}
	}
	l, ok := a.(*array.List)
	if !ok {
		return b.fail(name, "is not a list array")
	}
	vals, ok := l.ListValues().(*array.Float32)
	if !ok {
		return b.fail(name, "list values are not float32")
	}
	if vals.NullN() != 0 {
		return b.fail(name, "has %d null pixel values (invalid pixels travel as NaN)", vals.NullN())
	}
	v := vals.Float32Values()
	off := l.Offsets() // the whole buffer: slice it at the array's offset
	beg := l.Data().Offset()
	if n == 0 {
		off = []int32{0}
	} else if len(off) < beg+n+1 {
		return b.fail(name, "has %d list offsets for %d rows", len(off)-beg, n)
	} else {
		off = off[beg : beg+n+1]
	}
	for i := 0; i < n; i++ {
		if off[i] < 0 || off[i+1] < off[i] || int(off[i+1]) > len(v) {
			return &StreamError{Batch: b.r.batch, Row: i, Column: name, Err: fmt.Errorf("list offsets %d-%d are outside the %d values", off[i], off[i+1], len(v))}
		}
	}
	if name == ColPixels {
		b.r.pix, b.r.pixV, b.r.pixOff = l, v, off
	} else {
		b.r.unc, b.r.uncV, b.r.uncOff = l, v, off
	}
	return nil
}

func (r *Reader) decodeRow(t *Tile) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = &StreamError{Batch: r.batch, Row: r.row, Err: fmt.Errorf("malformed column data: %v", p)}
		}
	}()
	i := r.row
	t.Batch, t.Row = r.batch, i
	t.SceneID = r.sceneID.Value(i)
	t.BandName = r.bandName.Value(i)
	v := func(k int) int { return int(r.ints[k].Value(i)) }
	t.Band = v(0) - 1
	t.Col, t.TileRow = v(1), v(2)
	t.X, t.Y, t.W, t.H = v(3), v(4), v(5), v(6)
	t.HaloLeft, t.HaloTop, t.HaloRight, t.HaloBottom = v(7), v(8), v(9), v(10)
	if r.hdr.Kind == KindRestored {
		t.Iterations = v(11)
		t.Change = r.change.Value(i)
	} else {
		t.Iterations, t.Change = 0, 0
	}
	if err := r.hdr.CheckTile(t); err != nil {
		return err
	}
	n := t.W * t.H // bounded by MaxTilePixels (CheckTile)
	if got := int(r.pixOff[i+1] - r.pixOff[i]); got != n {
		return TileErrorf(t, ColPixels, "has %d values, want %s x %s = %d x %d = %d", got, ColBufferWidth, ColBufferHeight, t.W, t.H, n)
	}
	t.Pix = grow(t.Pix, n)
	copy(t.Pix, r.pixV[r.pixOff[i]:r.pixOff[i+1]])
	t.Uncertainty = nil
	if r.hdr.Kind == KindRestored && r.unc.IsValid(i) {
		if got := int(r.uncOff[i+1] - r.uncOff[i]); got != n {
			return TileErrorf(t, ColUncertainty, "has %d values, want %d (or null)", got, n)
		}
		t.Uncertainty = make([]float32, n)
		copy(t.Uncertainty, r.uncV[r.uncOff[i]:r.uncOff[i+1]])
	}
	return nil
}

// CheckTile validates a tile's fields against the header (everything but
// the pixel buffers' content): scene, band, sizes, halos, position inside the
// scene. Sizes are checked before any buffer is allocated from them.
func (h *Header) CheckTile(t *Tile) error {
	if t.SceneID != h.SceneID {
		return TileErrorf(t, ColSceneID, "is %q but the stream's metadata says %q (tiles of another scene?)", clip(t.SceneID), clip(h.SceneID))
	}
	if t.Band < 0 || t.Band >= len(h.Bands) {
		return TileErrorf(t, ColBandNumber, "is %d, want 1 to %d (the bands in %s)", t.Band+1, len(h.Bands), KeyBands)
	}
	if want := h.Bands[t.Band].Description; t.BandName != want {
		return TileErrorf(t, ColBandName, "is %q, want %q (band %d's description in %s)", clip(t.BandName), clip(want), t.Band+1, KeyBands)
	}
	if t.Col < 0 {
		return TileErrorf(t, ColTileColumn, "is %d, must be >= 0", t.Col)
	}
	if t.TileRow < 0 {
		return TileErrorf(t, ColTileRow, "is %d, must be >= 0", t.TileRow)
	}
	if t.W < 1 || t.W > h.Width {
		return TileErrorf(t, ColBufferWidth, "is %d, want 1 to the scene width %d", t.W, h.Width)
	}
	if t.H < 1 || t.H > h.Height {
		return TileErrorf(t, ColBufferHeight, "is %d, want 1 to the scene height %d", t.H, h.Height)
	}
	if int64(t.W)*int64(t.H) > MaxTilePixels {
		return TileErrorf(t, ColBufferHeight, "%s x %s = %d x %d exceeds %d pixels per tile", ColBufferWidth, ColBufferHeight, t.W, t.H, MaxTilePixels)
	}
	if t.X < 0 || t.X+t.W > h.Width {
		return TileErrorf(t, ColBufferX, "is %d: the buffer [%d, %d) leaves the scene width %d", t.X, t.X, t.X+t.W, h.Width)
	}
	if t.Y < 0 || t.Y+t.H > h.Height {
		return TileErrorf(t, ColBufferY, "is %d: the buffer [%d, %d) leaves the scene height %d", t.Y, t.Y, t.Y+t.H, h.Height)
	}
	for _, c := range []struct {
		name string
		v    int
	}{{ColHaloLeft, t.HaloLeft}, {ColHaloTop, t.HaloTop}, {ColHaloRight, t.HaloRight}, {ColHaloBottom, t.HaloBottom}} {
		if c.v < 0 || c.v > h.Overlap {
			return TileErrorf(t, c.name, "is %d, want 0 to the overlap %d", c.v, h.Overlap)
		}
	}
	if t.HaloLeft+t.HaloRight >= t.W {
		return TileErrorf(t, ColHaloRight, "%s + %s = %d leaves no core in a buffer %d wide", ColHaloLeft, ColHaloRight, t.HaloLeft+t.HaloRight, t.W)
	}
	if t.HaloTop+t.HaloBottom >= t.H {
		return TileErrorf(t, ColHaloBottom, "%s + %s = %d leaves no core in a buffer %d high", ColHaloTop, ColHaloBottom, t.HaloTop+t.HaloBottom, t.H)
	}
	if h.Kind == KindRestored {
		if t.Iterations < 0 {
			return TileErrorf(t, ColIterations, "is %d, must be >= 0", t.Iterations)
		}
		if math.IsNaN(t.Change) || t.Change < 0 {
			return TileErrorf(t, ColFinalRelativeChange, "is %g, must be >= 0", t.Change)
		}
	}
	return nil
}

func grow(b []float32, n int) []float32 {
	if cap(b) < n {
		return make([]float32, n)
	}
	return b[:n]
}

// decodeError marks a failure inside Arrow's own record decoding (a corrupt
// batch that passed the framing checks). Arrow v17's IPC reader recovers its
// panics there but drops the buffers it had loaded for that batch without
// releasing them: with the Go allocator they are garbage-collected; the fuzz
// test's leak check makes this one exception.
type decodeError struct{ err error }

func (e *decodeError) Error() string { return e.err.Error() }
func (e *decodeError) Unwrap() error { return e.err }
