package arrowio

import (
	"bytes"
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/ipc"
	"github.com/apache/arrow/go/v17/arrow/memory"

	"limpid/raster"
)

// testHeader describes an invented scene of Brannock Vale (a fictional
// valley): 40 x 30 pixels, two bands, tiles of 16 with a halo of 4.
func testHeader(kind string) *Header {
	h := &Header{Kind: kind, SceneID: "brannock-vale-0001", Width: 40, Height: 30, DataType: "UInt16",
		Geo:    raster.Geo{Transform: [6]float64{500000, 10, 0, 5200000, 0, -10}, HasTransform: true, WKT: `PROJCS["invented"]`},
		NoData: 0, HasNoData: true, Tile: 16, Overlap: 4,
		Metadata: map[string]string{"AREA_OR_POINT": "Area"},
		Bands: []Band{
			{SourceBand: 3, BandInfo: raster.BandInfo{Description: "red", ColorInterp: "Red", NoData: 0, HasNoData: true, Metadata: map[string]string{"WAVELENGTH": "665"}}},
			{SourceBand: 4, BandInfo: raster.BandInfo{Description: "nir", ColorInterp: "Undefined", NoData: 0, HasNoData: true, Metadata: map[string]string{}}},
		}}
	if kind == KindRestored {
		h.Bands[0].Background = 12.5
		h.Bands[1].Background = 0
		h.Restored = &Restoration{SoftwareVersion: "0.1.0", Method: "grid", PSF: "gaussian:sigma=0.7", Parameters: `{"smooth":0.2}`}
	}
	return h
}

// testTile is an interior tile: core [16,32) x [16,30) with halo 4 left and
// right, 4 on top, 0 at the bottom (the scene edge).
func testTile(h *Header, band int) *Tile {
	t := &Tile{SceneID: h.SceneID, Band: band, BandName: h.Bands[band].Description, Col: 1, TileRow: 1,
		X: 12, Y: 12, W: 24, H: 18, HaloLeft: 4, HaloTop: 4, HaloRight: 4, HaloBottom: 0}
	t.Pix = make([]float32, t.W*t.H)
	for i := range t.Pix {
		t.Pix[i] = float32(i%97) + 0.25*float32(band)
	}
	t.Pix[5] = float32(math.NaN())
	if h.Kind == KindRestored {
		t.Iterations, t.Change = 17, 3.5e-5
		if band == 1 {
			t.Uncertainty = make([]float32, t.W*t.H)
			for i := range t.Uncertainty {
				t.Uncertainty[i] = 0.01 * float32(i%13)
			}
		}
	}
	return t
}

func writeStream(t *testing.T, mem memory.Allocator, h *Header, tiles []*Tile, opts ...Option) []byte {
	t.Helper()
	var buf bytes.Buffer
	w, err := NewWriter(&buf, h, append([]Option{WithAllocator(mem)}, opts...)...)
	if err != nil {
		t.Fatal(err)
	}
	for _, tl := range tiles {
		if err := w.Write(tl); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func readAll(mem memory.Allocator, b []byte) (*Header, []*Tile, error) {
	r, err := NewReader(bytes.NewReader(b), WithAllocator(mem))
	if err != nil {
		return nil, nil, err
	}
	defer r.Release()
	var out []*Tile
	for {
		t := &Tile{}
		ok, err := r.Next(t)
		if err != nil {
			return r.Header(), out, err
		}
		if !ok {
			return r.Header(), out, nil
		}
		out = append(out, t)
	}
}

func sameBits(a, b []float32) bool {
	if len(a) != len(b) || (a == nil) != (b == nil) {
		return false
	}
	for i := range a {
		if math.Float32bits(a[i]) != math.Float32bits(b[i]) {
			return false
		}
	}
	return true
}

// Source: the Arrow IPC stream format as implemented by Apache Arrow Go's own
// ipc.Reader (the reference library): the stream limpid writes decodes to the
// contract's columns, types and values, and our Reader gives back every
// field bit for bit, for each compression.
func TestRoundTrip(t *testing.T) {
	for _, kind := range []string{KindObserved, KindRestored} {
		for _, comp := range []string{"none", "zstd", "lz4"} {
			t.Run(kind+"/"+comp, func(t *testing.T) {
				mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
				defer mem.AssertSize(t, 0)
				h := testHeader(kind)
				tiles := []*Tile{testTile(h, 0), testTile(h, 1)}
				b := writeStream(t, mem, h, tiles, WithCompression(comp))

				// The reference reader.
				ir, err := ipc.NewReader(bytes.NewReader(b), ipc.WithAllocator(mem))
				if err != nil {
					t.Fatal(err)
				}
				s := ir.Schema()
				want := fields(kind)
				if len(s.Fields()) != len(want) {
					t.Fatalf("%d columns, want %d", len(s.Fields()), len(want))
				}
				for i, f := range want {
					if s.Field(i).Name != f.Name || !arrow.TypeEqual(s.Field(i).Type, f.Type) {
						t.Errorf("column %d is %s %s, want %s %s", i, s.Field(i).Name, s.Field(i).Type, f.Name, f.Type)
					}
				}
				if v, _ := s.Metadata().GetValue(KeyContract); v != ContractVersion {
					t.Errorf("%s = %q", KeyContract, v)
				}
				nrec := 0
				for ir.Next() {
					rec := ir.Record()
					if rec.NumRows() != 1 {
						t.Errorf("batch with %d rows, want one tile per batch", rec.NumRows())
					}
					pl := rec.Column(13).(*array.List)
					vals := pl.ListValues().(*array.Float32).Float32Values()
					if !sameBits(vals, tiles[nrec].Pix) {
						t.Errorf("batch %d: pixels differ from the tile written", nrec+1)
					}
					nrec++
				}
				if ir.Err() != nil || nrec != 2 {
					t.Fatalf("reference reader: %v, %d batches", ir.Err(), nrec)
				}
				ir.Release()

				gh, got, err := readAll(mem, b)
				if err != nil {
					t.Fatal(err)
				}
				if gh.SceneID != h.SceneID || gh.Width != 40 || gh.Height != 30 || gh.Geo != h.Geo || gh.NoData != 0 || !gh.HasNoData ||
					gh.Tile != 16 || gh.Overlap != 4 || gh.DataType != "UInt16" || gh.Metadata["AREA_OR_POINT"] != "Area" ||
					len(gh.Bands) != 2 || gh.Bands[0].SourceBand != 3 || gh.Bands[0].Metadata["WAVELENGTH"] != "665" || gh.Bands[1].ColorInterp != "Undefined" {
					t.Errorf("header %+v", gh)
				}
				if kind == KindRestored && (gh.Restored == nil || *gh.Restored != *h.Restored || gh.Bands[0].Background != 12.5) {
					t.Errorf("restoration record %+v", gh.Restored)
				}
				for i, w := range tiles {
					g := got[i]
					if g.Band != w.Band || g.BandName != w.BandName || g.Col != w.Col || g.TileRow != w.TileRow || g.X != w.X || g.Y != w.Y ||
						g.W != w.W || g.H != w.H || g.HaloLeft != w.HaloLeft || g.HaloTop != w.HaloTop || g.HaloRight != w.HaloRight ||
						g.HaloBottom != w.HaloBottom || g.Iterations != w.Iterations || g.Change != w.Change || g.Batch != i+1 {
						t.Errorf("tile %d: got %+v", i, g)
					}
					if !sameBits(g.Pix, w.Pix) || !sameBits(g.Uncertainty, w.Uncertainty) {
						t.Errorf("tile %d: pixel or uncertainty values differ", i)
					}
				}
			})
		}
	}
}

// rawStream writes an IPC stream with the arrow library directly: the
// contract's metadata for h, the given fields, and one batch built by fill.
// It makes streams our Writer refuses to make.
func rawStream(t *testing.T, mem memory.Allocator, h *Header, fs []arrow.Field, fill func(b *array.RecordBuilder)) []byte {
	t.Helper()
	md, err := encodeMetadata(h)
	if err != nil {
		t.Fatal(err)
	}
	s := arrow.NewSchema(fs, &md)
	var buf bytes.Buffer
	w := ipc.NewWriter(&buf, ipc.WithSchema(s), ipc.WithAllocator(mem))
	b := array.NewRecordBuilder(mem, s)
	defer b.Release()
	fill(b)
	rec := b.NewRecord()
	if err := w.Write(rec); err != nil {
		t.Fatal(err)
	}
	rec.Release()
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// schemaOnly writes a stream without batches whose valid observed metadata
// has key set to value.
func schemaOnly(t *testing.T, mem memory.Allocator, key, value string) []byte {
	t.Helper()
	md, err := encodeMetadata(testHeader(KindObserved))
	if err != nil {
		t.Fatal(err)
	}
	keys, vals := md.Keys(), md.Values()
	for i := range keys {
		if keys[i] == key {
			vals[i] = value
		}
	}
	m := arrow.NewMetadata(keys, vals)
	s := arrow.NewSchema(fields(KindObserved), &m)
	var buf bytes.Buffer
	w := ipc.NewWriter(&buf, ipc.WithSchema(s), ipc.WithAllocator(mem))
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// fillTile appends t to b column by column (contract order), with pixel
// values from pix (which may have the wrong length).
func fillTile(b *array.RecordBuilder, t *Tile, pix []float32) {
	b.Field(0).(*array.StringBuilder).Append(t.SceneID)
	b.Field(1).(*array.Int32Builder).Append(int32(t.Band + 1))
	b.Field(2).(*array.StringBuilder).Append(t.BandName)
	for i, v := range []int{t.Col, t.TileRow, t.X, t.Y, t.W, t.H, t.HaloLeft, t.HaloTop, t.HaloRight, t.HaloBottom} {
		b.Field(3 + i).(*array.Int32Builder).Append(int32(v))
	}
	lb := b.Field(13).(*array.ListBuilder)
	lb.Append(true)
	switch vb := lb.ValueBuilder().(type) {
	case *array.Float32Builder:
		vb.AppendValues(pix, nil)
	case *array.Float64Builder:
		vb.Append(1)
	}
}

// Source: the tile-stream contract (README.md "Arrow tile streams") and the
// Apache Arrow IPC format (stream versus file format, encapsulated messages,
// end-of-stream marker); each bad stream must give one error that matches
// ErrStream and names the batch (or the schema) and the column.
// Checked allocators: no buffer may leak on any error path.
// Over 80 lines: one table row per bad stream, kept together on purpose.
func TestBadStreams(t *testing.T) {
	good := func(mem memory.Allocator) []byte {
		h := testHeader(KindObserved)
		return writeStream(t, mem, h, []*Tile{testTile(h, 0), testTile(h, 1)})
	}
	cases := []struct {
		name string
		make func(mem memory.Allocator) []byte
		want []string
	}{
		{"empty", func(memory.Allocator) []byte { return nil }, []string{"schema", "empty"}},
		{"geotiff", func(memory.Allocator) []byte { return []byte("II*\x00\x08\x00\x00\x00 not arrow at all") }, []string{"not an Arrow IPC stream"}},
		{"arrow-file", func(memory.Allocator) []byte { return []byte("ARROW1\x00\x00rest") }, []string{"Arrow IPC file"}},
		{"truncated-in-batch", func(mem memory.Allocator) []byte { b := good(mem); return b[:len(b)-200] }, []string{"batch 2", "truncated"}},
		{"truncated-in-schema", func(mem memory.Allocator) []byte { b := good(mem); return b[:100] }, []string{"schema", "truncated"}},
		{"no-end-marker", func(mem memory.Allocator) []byte { b := good(mem); return b[:len(b)-8] }, []string{"end-of-stream marker", "truncated"}},
		{"two-streams", func(mem memory.Allocator) []byte { b := good(mem); return append(b, good(mem)...) }, []string{"follows the end-of-stream marker", "mixed schemas"}},
		{"second-schema", func(mem memory.Allocator) []byte {
			b := good(mem)
			return append(b[:len(b)-8:len(b)-8], good(mem)...)
		}, []string{"batch 3", "second schema"}},
		{"wrong-type", func(mem memory.Allocator) []byte {
			fs := fields(KindObserved)
			fs[13].Type = arrow.ListOf(arrow.PrimitiveTypes.Float64)
			return rawStream(t, mem, testHeader(KindObserved), fs, func(b *array.RecordBuilder) {
				tl := testTile(testHeader(KindObserved), 0)
				fillTile(b, tl, nil)
			})
		}, []string{"schema column pixels", "list<item: float64", "want list<item: float32"}},
		{"missing-column", func(mem memory.Allocator) []byte {
			fs := fields(KindObserved)[:12]
			return rawStream(t, mem, testHeader(KindObserved), fs, func(b *array.RecordBuilder) {})
		}, []string{"schema column halo_bottom", "missing"}},
		{"pixel-count", func(mem memory.Allocator) []byte {
			h := testHeader(KindObserved)
			return rawStream(t, mem, h, fields(KindObserved), func(b *array.RecordBuilder) {
				tl := testTile(h, 0)
				fillTile(b, tl, tl.Pix[:100])
			})
		}, []string{"batch 1 row 0 column pixels", "has 100 values", "432"}},
		{"negative-width", func(mem memory.Allocator) []byte {
			h := testHeader(KindObserved)
			return rawStream(t, mem, h, fields(KindObserved), func(b *array.RecordBuilder) {
				tl := testTile(h, 0)
				tl.W = -5
				fillTile(b, tl, nil)
			})
		}, []string{"batch 1 row 0 column buffer_width", "-5"}},
		{"huge-buffer", func(mem memory.Allocator) []byte {
			h := testHeader(KindObserved)
			h.Width, h.Height, h.Tile = 1<<30, 1<<30, 16384
			return rawStream(t, mem, h, fields(KindObserved), func(b *array.RecordBuilder) {
				tl := testTile(h, 0)
				tl.W, tl.H = 1<<20, 1<<20
				fillTile(b, tl, nil)
			})
		}, []string{"batch 1 row 0 column buffer_height", "exceeds"}},
		{"other-scene", func(mem memory.Allocator) []byte {
			h := testHeader(KindObserved)
			return rawStream(t, mem, h, fields(KindObserved), func(b *array.RecordBuilder) {
				tl := testTile(h, 0)
				tl.SceneID = "glenmorrow-0002"
				fillTile(b, tl, tl.Pix)
			})
		}, []string{"batch 1 row 0 column scene_id", "another scene"}},
		{"contract-version", func(mem memory.Allocator) []byte {
			return schemaOnly(t, mem, KeyContract, "9")
		}, []string{"schema", KeyContract, "version 1"}},
		{"too-many-tiles", func(mem memory.Allocator) []byte {
			return schemaOnly(t, mem, KeySceneWidth, "1073741824")
		}, []string{"schema", "tiles along a side"}},
		{"bad-message-size", func(mem memory.Allocator) []byte {
			return []byte{0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x7f}
		}, []string{"schema", "metadata size"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			_, _, err := readAll(mem, c.make(mem))
			if err == nil {
				t.Fatal("no error")
			}
			if !errors.Is(err, ErrStream) {
				t.Errorf("%v does not match ErrStream", err)
			}
			msg := err.Error()
			if strings.Contains(msg, "\n") {
				t.Errorf("error is not one line: %q", msg)
			}
			for _, w := range c.want {
				if !strings.Contains(msg, w) {
					t.Errorf("error %q does not mention %q", msg, w)
				}
			}
		})
	}
}

// Source: the tile-stream contract (README.md "Arrow tile streams": every
// column is non-null unless said; a null is refused, naming the batch and
// column); built with the reference library's builders.
func TestNullColumn(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	h := testHeader(KindObserved)
	b := rawStream(t, mem, h, fields(KindObserved), func(b *array.RecordBuilder) {
		tl := testTile(h, 0)
		b.Field(0).(*array.StringBuilder).Append(tl.SceneID)
		b.Field(1).(*array.Int32Builder).Append(1)
		b.Field(2).(*array.StringBuilder).Append(tl.BandName)
		b.Field(3).(*array.Int32Builder).AppendNull()
		for i, v := range []int{tl.TileRow, tl.X, tl.Y, tl.W, tl.H, tl.HaloLeft, tl.HaloTop, tl.HaloRight, tl.HaloBottom} {
			b.Field(4 + i).(*array.Int32Builder).Append(int32(v))
		}
		lb := b.Field(13).(*array.ListBuilder)
		lb.Append(true)
		lb.ValueBuilder().(*array.Float32Builder).AppendValues(tl.Pix, nil)
	})
	_, _, err := readAll(mem, b)
	if err == nil || !strings.Contains(err.Error(), "batch 1 column tile_column: has 1 null values") {
		t.Fatalf("got %v", err)
	}
}

// Source: the Arrow IPC specification's end-of-stream rule (a stream of zero
// batches is a schema and the marker): an empty tiling is a valid stream.
func TestEmptyStream(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	h, tiles, err := readAll(mem, writeStream(t, mem, testHeader(KindRestored), nil))
	if err != nil || len(tiles) != 0 || h.Kind != KindRestored {
		t.Fatalf("%v, %d tiles", err, len(tiles))
	}
}

// Source: the Writer contract (arrowio/doc.go: after a failure Abandon adds
// nothing, no partial batch, no end-of-stream marker) and the Arrow IPC
// streaming format (a stream without its end-of-stream marker is truncated,
// so a strict reader reports it).
func TestAbandon(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	h := testHeader(KindObserved)
	var buf bytes.Buffer
	w, err := NewWriter(&buf, h, WithAllocator(mem))
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(testTile(h, 0)); err != nil {
		t.Fatal(err)
	}
	n := buf.Len()
	w.Abandon()
	if buf.Len() != n {
		t.Errorf("Abandon wrote %d more bytes", buf.Len()-n)
	}
	_, tiles, err := readAll(mem, buf.Bytes())
	if len(tiles) != 1 || err == nil || !strings.Contains(err.Error(), "truncated") {
		t.Errorf("%d tiles, %v", len(tiles), err)
	}
}

// Source: the contract (Writer refuses tiles inconsistent with the header:
// common practice, no source).
func TestWriterChecks(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	h := testHeader(KindObserved)
	var buf bytes.Buffer
	w, err := NewWriter(&buf, h, WithAllocator(mem))
	if err != nil {
		t.Fatal(err)
	}
	tl := testTile(h, 0)
	tl.Pix = tl.Pix[:10]
	if err := w.Write(tl); err == nil {
		t.Error("short pixel buffer accepted")
	}
	tl = testTile(h, 0)
	tl.HaloLeft = 9
	if err := w.Write(tl); err == nil || !strings.Contains(err.Error(), "halo_left") {
		t.Errorf("halo beyond the overlap: %v", err)
	}
	w.Abandon()
	if _, err := NewWriter(&buf, h, WithCompression("brotli")); err == nil {
		t.Error("unknown compression accepted")
	}
}
