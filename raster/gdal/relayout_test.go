package gdal

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"testing"

	"limpid/raster"
)

// A GeoTIFF's bytes depend on its pixels and metadata only, not on what
// the process read while writing it: the same rows written with and
// without reads of another file in between (other blocks pushed through a
// 8 MB block cache that cannot hold the 16 MB output) give the same file.
// Source: GDAL's raster block cache (GDAL_CACHEMAX, least recently used
// blocks written out first, GDAL "Configuration options" documentation);
// the reference is the file written without interference.
func TestGeoTIFFIndependentOfCache(t *testing.T) {
	t.Setenv("GDAL_CACHEMAX", "8") // MB; read once, by the first GDAL use of this test binary
	const w, h, nb = 1024, 1024, 4
	dir := t.TempDir()
	meta := raster.Meta{Width: w, Height: h, DataType: "Float32", Bands: make([]raster.BandInfo, nb)}
	rows := func(y0, y1 int) [][]float32 {
		out := make([][]float32, nb)
		for b := range out {
			out[b] = make([]float32, (y1-y0)*w)
			for i := range out[b] {
				x, y := i%w, y0+i/w
				out[b][i] = float32(math.Sin(float64(x*(b+1))/17) * math.Cos(float64(y)/13) * 1000)
			}
		}
		return out
	}
	other := filepath.Join(dir, "other.tif")
	full := rows(0, h)
	if err := WriteFloat32(other, meta, full, WriteOptions{Format: GTiff, DataType: "Float32"}); err != nil {
		t.Fatal(err)
	}
	write := func(name string, interfere bool) []byte {
		r, err := Open(other)
		if err != nil {
			t.Fatal(err)
		}
		defer r.Close()
		path := filepath.Join(dir, name)
		wr, err := Create(path, meta, WriteOptions{Format: GTiff, DataType: "Float32"})
		if err != nil {
			t.Fatal(err)
		}
		buf := make([][]float32, nb)
		for b := range buf {
			buf[b] = make([]float32, 512*w)
		}
		for y := 0; y < h; y += 128 {
			y1 := min(y+128, h)
			if err := wr.WriteRows(y, y1, rows(y, y1)); err != nil {
				t.Fatal(err)
			}
			if interfere {
				ry := (y * 7) % (h - 512)
				if err := r.ReadRows(ry, ry+512, []int{0, 1, 2, 3}, buf); err != nil {
					t.Fatal(err)
				}
			}
		}
		if err := wr.Commit(); err != nil {
			t.Fatal(err)
		}
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	a, b := write("a.tif", false), write("b.tif", true)
	if !bytes.Equal(a, b) {
		t.Fatalf("the same rows made different GeoTIFFs (%d and %d bytes) when other reads went through the block cache", len(a), len(b))
	}
}
