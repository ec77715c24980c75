package gdal

import (
	"context"
	"errors"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"
	"time"

	"limpid/raster"
)

// GDAL's COG copy stops at its next progress step once the context is
// done, within well under a second, instead of running to its end; an
// uncanceled copy succeeds. Source: GDAL API, GDALProgressFunc ("returns
// TRUE if the operation should continue or FALSE if the user has requested
// a cancel"); the 1 s bound is the project's interruption rule.
func TestTranslateCancel(t *testing.T) {
	dir := t.TempDir()
	n := 2048
	meta := raster.Meta{Width: n, Height: n, DataType: "UInt16", Bands: []raster.BandInfo{{Description: "pan"}}}
	rng := rand.New(rand.NewPCG(1, 2))
	p := make([]float32, n*n)
	for i := range p {
		p[i] = float32(rng.IntN(4000)) // noise: slow to compress, the copy lasts
	}
	src := filepath.Join(dir, "noise.tif")
	if err := WriteFloat32(src, meta, [][]float32{p}, WriteOptions{Format: GTiff, DataType: "UInt16"}); err != nil {
		t.Fatal(err)
	}
	args := []string{"-of", "COG", "-co", "COMPRESS=DEFLATE", "-co", "PREDICTOR=YES", "-co", "BLOCKSIZE=512"}
	ctx, cancel := context.WithCancel(context.Background())
	time.AfterFunc(100*time.Millisecond, cancel)
	t0 := time.Now()
	err := translate(ctx, filepath.Join(dir, "cancel.tif"), src, args)
	el := time.Since(t0)
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("canceled copy: %v, want context.Canceled", err)
	}
	if el > 100*time.Millisecond+time.Second {
		t.Errorf("the copy stopped %v after the start, want within 1 s of the cancel", el)
	}
	t.Logf("stopped %v after the start (canceled at 100 ms)", el.Round(time.Millisecond))
	small := filepath.Join(dir, "small.tif")
	if err := WriteFloat32(small, raster.Meta{Width: 64, Height: 64, DataType: "UInt16", Bands: []raster.BandInfo{{}}},
		[][]float32{p[:64*64]}, WriteOptions{Format: GTiff, DataType: "UInt16"}); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "small.cog.tif")
	if err := translate(context.Background(), out, small, args); err != nil {
		t.Fatalf("copy: %v", err)
	}
	if st, err := os.Stat(out); err != nil || st.Size() == 0 {
		t.Fatalf("no COG written: %v", err)
	}
	if err := translate(context.Background(), filepath.Join(dir, "x.tif"), filepath.Join(dir, "missing.tif"), args); err == nil {
		t.Error("a missing source gave no error")
	}
}
