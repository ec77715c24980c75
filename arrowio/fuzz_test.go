package arrowio

import (
	"bytes"
	"errors"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/apache/arrow/go/v17/arrow/memory"
)

var updateSeeds = flag.Bool("update", false, "rewrite the fuzz seed corpus under testdata/fuzz/FuzzReader")

// seedStreams are small streams for the fuzz corpus: valid observed and
// restored streams (zstd and lz4 included) and cut or damaged copies.
func seedStreams(t testing.TB) [][]byte {
	mem := memory.NewGoAllocator()
	var out [][]byte
	for _, kind := range []string{KindObserved, KindRestored} {
		for _, comp := range []string{"none", "zstd", "lz4"} {
			// A 3 x 3 tile with a short header keeps the seeds small.
			h := testHeader(kind)
			h.Geo.WKT = ""
			h.Bands[0].Metadata = nil
			tl := &Tile{SceneID: h.SceneID, Band: 1, BandName: "nir", W: 3, H: 3, Pix: []float32{1, 2, 3, 4, 5, 6, 7, 8, 9}}
			tl.Pix[4] = float32(math.NaN())
			if kind == KindRestored {
				tl.Iterations, tl.Change = 3, 0.01
				tl.Uncertainty = []float32{0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9}
			}
			var buf bytes.Buffer
			w, err := NewWriter(&buf, h, WithAllocator(mem), WithCompression(comp))
			if err != nil {
				t.Fatal(err)
			}
			if err := w.Write(tl); err != nil {
				t.Fatal(err)
			}
			if err := w.Close(); err != nil {
				t.Fatal(err)
			}
			b := buf.Bytes()
			out = append(out, b)
			if comp == "none" {
				out = append(out, b[:len(b)/2], b[:len(b)-8])
				d := append([]byte(nil), b...)
				d[len(d)/3] ^= 0xff
				out = append(out, d)
			}
		}
	}
	return out
}

// TestFuzzSeeds keeps the committed corpus in step with seedStreams;
// `go test ./arrowio -run TestFuzzSeeds -update` rewrites it.
// Source: common practice, no source (golden corpus kept in step).
func TestFuzzSeeds(t *testing.T) {
	dir := filepath.Join("testdata", "fuzz", "FuzzReader")
	seeds := seedStreams(t)
	if *updateSeeds {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		for i, s := range seeds {
			body := fmt.Sprintf("go test fuzz v1\n[]byte(%q)\n", s)
			if err := os.WriteFile(filepath.Join(dir, fmt.Sprintf("seed%02d", i)), []byte(body), 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	files, _ := filepath.Glob(filepath.Join(dir, "seed*"))
	if len(files) != len(seeds) {
		t.Fatalf("%d committed seeds, %d generated: run with -update", len(files), len(seeds))
	}
}

// FuzzReader feeds arbitrary bytes to the stream reader: it must never panic,
// never allocate past its limits and never leak a buffer (checked allocator).
// Seeds: testdata/fuzz/FuzzReader (Go's corpus format). CI runs it for 10 s.
func FuzzReader(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
		err := readFuzz(mem, data)
		var de *decodeError
		if errors.As(err, &de) {
			return // Arrow's own decoder drops buffers on this path (see decodeError)
		}
		mem.AssertSize(t, 0)
	})
}

func readFuzz(mem memory.Allocator, data []byte) error {
	r, err := NewReader(bytes.NewReader(data), WithAllocator(mem))
	if err != nil {
		return err
	}
	defer r.Release()
	var tl Tile
	for i := 0; i < 1000; i++ {
		ok, err := r.Next(&tl)
		if err != nil || !ok {
			return err
		}
	}
	return nil
}
