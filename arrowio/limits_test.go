package arrowio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow/memory"
)

// The Writer keeps every limit the Reader enforces (project requirement:
// `limpid tiles pack` must never write a stream its own reader refuses).
// A dataset metadata item of 17 MiB makes the schema message exceed
// MaxMetadataBytes: the writer refuses it before writing a byte, with the
// reader's message style; one of 15 MiB is written and read back.
func TestWriterMetadataLimit(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	big := testHeader(KindObserved)
	big.Metadata = map[string]string{"HISTORY": strings.Repeat("x", 17<<20)}
	var buf bytes.Buffer
	_, err := NewWriter(&buf, big, WithAllocator(mem))
	if err == nil || !errors.Is(err, ErrStream) || !strings.Contains(err.Error(), "message metadata size") ||
		!strings.Contains(err.Error(), KeyDatasetMetadata) || strings.Contains(err.Error(), "\n") {
		t.Fatalf("17 MiB metadata item: error %v, want one line naming the size limit and %s", err, KeyDatasetMetadata)
	}
	if buf.Len() != 0 {
		t.Fatalf("%d bytes written before the refusal", buf.Len())
	}
	// The reader refuses the same schema written by Arrow directly.
	raw := schemaOnly(t, mem, KeyDatasetMetadata, `{"HISTORY":"`+strings.Repeat("x", 17<<20)+`"}`)
	if _, _, err := readAll(mem, raw); err == nil || !strings.Contains(err.Error(), "message metadata size") {
		t.Fatalf("reader on a 17 MiB schema: %v", err)
	}
	ok := testHeader(KindObserved)
	ok.Metadata = map[string]string{"HISTORY": strings.Repeat("x", 15<<20)}
	b := writeStream(t, mem, ok, []*Tile{testTile(ok, 0)})
	h, tiles, err := readAll(mem, b)
	if err != nil || len(tiles) != 1 || len(h.Metadata["HISTORY"]) != 15<<20 {
		t.Fatalf("15 MiB metadata item: %v (%d tiles)", err, len(tiles))
	}
}

// schemaMessageSize is the int32 the stream itself carries after the
// continuation marker (Arrow columnar format, "Encapsulated message format").
func TestSchemaMessageSize(t *testing.T) {
	mem := memory.NewGoAllocator()
	h := testHeader(KindRestored)
	s, err := Schema(h)
	if err != nil {
		t.Fatal(err)
	}
	got, err := schemaMessageSize(s, mem)
	if err != nil {
		t.Fatal(err)
	}
	b := writeStream(t, mem, h, nil)
	if want := int64(int32(binary.LittleEndian.Uint32(b[4:8]))); got != want {
		t.Fatalf("schema message metadata %d bytes, the stream says %d", got, want)
	}
}

// A band description that is not valid UTF-8 would be changed by the JSON
// of limpid.bands (encoding/json replaces invalid bytes with U+FFFD: Go
// docs) while band_name keeps the bytes, and the reader refuses such tiles:
// the writer refuses the header.
func TestWriterInvalidUTF8Band(t *testing.T) {
	h := testHeader(KindObserved)
	h.Bands[0].Description = "caf\xe9"
	var buf bytes.Buffer
	if _, err := NewWriter(&buf, h); err == nil || !errors.Is(err, ErrStream) || !strings.Contains(err.Error(), "UTF-8") {
		t.Fatalf("invalid UTF-8 description: %v", err)
	}
	if buf.Len() != 0 {
		t.Fatal("bytes written before the refusal")
	}
}

// batchBodyBound is an upper bound of the body Arrow writes for a tile,
// with and without compression; the body length is read from the batch
// message in the stream (its bodyLength, peekMessage).
func TestBatchBodyBound(t *testing.T) {
	mem := memory.NewGoAllocator()
	for _, kind := range []string{KindObserved, KindRestored} {
		for _, comp := range []string{"none", "zstd", "lz4"} {
			h := testHeader(kind)
			tl := testTile(h, 1)
			b := writeStream(t, mem, h, []*Tile{tl}, WithCompression(comp))
			// Skip the schema message: marker, size, metadata, no body.
			p := 8 + int(int32(binary.LittleEndian.Uint32(b[4:8])))
			size := int(int32(binary.LittleEndian.Uint32(b[p+4 : p+8])))
			_, body, err := peekMessage(b[p+8 : p+8+size])
			if err != nil {
				t.Fatal(err)
			}
			if bound := batchBodyBound(tl, kind == KindRestored, comp != "none"); bound < body {
				t.Errorf("%s %s: bound %d below the body %d", kind, comp, bound, body)
			}
		}
	}
	// A tile at MaxTilePixels with both buffers stays inside one batch; a
	// scene id and band name of 16 MiB each push it over.
	tl := &Tile{W: 1 << 15, H: MaxTilePixels >> 15, Uncertainty: []float32{}}
	if b := batchBodyBound(tl, true, true); b > MaxBatchBytes {
		t.Errorf("largest tile: bound %d over the batch limit", b)
	}
	tl.SceneID, tl.BandName = strings.Repeat("s", 16<<20), strings.Repeat("b", 16<<20)
	if b := batchBodyBound(tl, true, false); b <= MaxBatchBytes {
		t.Errorf("32 MiB of strings on the largest tile: bound %d within the batch limit", b)
	}
}
