package stream

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"math/rand/v2"
	"testing"

	"limpid/arrowio"
	"limpid/raster"
	"limpid/step"
	"limpid/step/internal/steptest"
)

// packMem cuts src into an observed stream (the bytes limpid tiles pack
// writes).
func packMem(t *testing.T, src raster.Reader, bands []int, tile, overlap int) []byte {
	t.Helper()
	h, err := ObservedHeader(src.Meta(), bands, "brannock-vale", tile, overlap)
	if err != nil {
		t.Fatal(err)
	}
	tiler, err := NewSceneTiler(src, bands, h)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	w, err := arrowio.NewWriter(&buf, h)
	if err != nil {
		t.Fatal(err)
	}
	var tl arrowio.Tile
	for {
		ok, err := tiler.Next(&tl)
		if err != nil {
			t.Fatal(err)
		}
		if !ok {
			break
		}
		if err := w.Write(&tl); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// restoreStream runs RestoreTiles from stream bytes to stream bytes.
func restoreStream(t *testing.T, in []byte, cfg step.Config) []byte {
	t.Helper()
	r, err := arrowio.NewReader(bytes.NewReader(in))
	if err != nil {
		t.Fatal(err)
	}
	defer r.Release()
	c := cfg
	c.Tile, c.Overlap = r.Header().Tile, r.Header().Overlap
	if err := c.Resolve(); err != nil {
		t.Fatal(err)
	}
	bgs, err := StreamBackgrounds(c, r.Header(), nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	oh, err := RestoredHeader(r.Header(), c, bgs)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	w, err := arrowio.NewWriter(&buf, oh)
	if err != nil {
		t.Fatal(err)
	}
	if err := RestoreTiles(context.Background(), r.Header(), bgs, r, w, c); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// unpackStream assembles a stream into an in-memory scene; shuffle feeds
// the tiles in a random order.
func unpackStream(t *testing.T, in []byte, shuffle bool) (*raster.Mem, *step.Report) {
	t.Helper()
	r, err := arrowio.NewReader(bytes.NewReader(in))
	if err != nil {
		t.Fatal(err)
	}
	defer r.Release()
	h := r.Header()
	meta := raster.Meta{Width: h.Width, Height: h.Height, DataType: h.DataType}
	for _, b := range h.Bands {
		meta.Bands = append(meta.Bands, b.BandInfo)
	}
	dst := raster.NewMem(meta)
	asm, err := NewAssembler(h, dst)
	if err != nil {
		t.Fatal(err)
	}
	if h.Restored != nil {
		if asm.Report, err = ReportFromHeader(h); err != nil {
			t.Fatal(err)
		}
	}
	var tiles []*arrowio.Tile
	for {
		tl := &arrowio.Tile{}
		ok, err := r.Next(tl)
		if err != nil {
			t.Fatal(err)
		}
		if !ok {
			break
		}
		tiles = append(tiles, tl)
	}
	if shuffle {
		rand.New(rand.NewPCG(3, 4)).Shuffle(len(tiles), func(i, j int) { tiles[i], tiles[j] = tiles[j], tiles[i] })
	}
	for _, tl := range tiles {
		if err := asm.Write(tl); err != nil {
			t.Fatal(err)
		}
	}
	if err := asm.Finish(); err != nil {
		t.Fatal(err)
	}
	return dst, asm.Report
}

func sameBits(t *testing.T, what string, a, b [][]float32) {
	t.Helper()
	for i := range a {
		for j := range a[i] {
			if math.Float32bits(a[i][j]) != math.Float32bits(b[i][j]) {
				t.Fatalf("%s: band %d pixel %d: %v != %v", what, i+1, j, a[i][j], b[i][j])
			}
		}
	}
}

// The stream route equals the raster route (pack | restore | unpack gives
// restore's raster, bit for bit: a project requirement, DEVELOPERS.md "Tile
// streams") on the demo scenario, with nodata pixels, a merged
// last tile column (236 = 3 x 64 + 44), a saturation level and a background,
// for 1 and 3 workers (identical streams) and tiles assembled out of order.
func TestStreamMatchesRestore(t *testing.T) {
	const w, h = 236, 136
	src, _, _, k := steptest.ValleyScene(t, w, h, 1.2)
	bands := []int{2, 0}
	cfg := step.Config{PSF: k, PSFSpec: "gaussian", Smooth: step.DefaultSmooth, Iterations: step.DefaultIterations,
		Tolerance: step.DefaultTolerance, Tile: 512, Workers: 2}
	cfg.Tile, cfg.Overlap = 64, 24
	cfg.Iterations = 12
	cfg.Background = 3
	cfg.Saturated, cfg.HasSaturated = 900, true
	direct, rep := restoreMem(t, src, bands, cfg)

	obs := packMem(t, src, bands, 64, 24)
	back, _ := unpackStream(t, obs, false)
	for i, b := range bands {
		for j, v := range src.Bands[b] {
			if want := back.Bands[i][j]; !(v == want || (v == 0 && want != want)) {
				t.Fatalf("pack | unpack: band %d pixel %d: %v, want %v (nodata 0 travels as NaN)", i+1, j, want, v)
			}
		}
	}
	var streams [][]byte
	for _, workers := range []int{1, 3} {
		c := cfg
		c.Workers = workers
		restored := restoreStream(t, obs, c)
		streams = append(streams, restored)
		got, grep := unpackStream(t, restored, workers == 3)
		sameBits(t, "stream vs raster", direct.Bands, got.Bands)
		for i := range rep.Bands {
			if grep.Bands[i].MaxIterations != rep.Bands[i].MaxIterations || len(grep.Bands[i].Tiles) != len(rep.Bands[i].Tiles) {
				t.Errorf("band %d: max iterations %d / %d tiles, step.Restore says %d / %d", i+1, grep.Bands[i].MaxIterations,
					len(grep.Bands[i].Tiles), rep.Bands[i].MaxIterations, len(rep.Bands[i].Tiles))
			}
			a, _ := json.Marshal([]any{grep.Bands[i].Applied, grep.PSFUsed})
			b, _ := json.Marshal([]any{rep.Bands[i].Applied, rep.PSFUsed})
			if !bytes.Equal(a, b) {
				t.Errorf("band %d: the stream records %s, step.Restore %s", i+1, a, b)
			}
		}
	}
	if !bytes.Equal(streams[0], streams[1]) {
		t.Error("restored streams differ between 1 and 3 workers")
	}
}

// seSolver is a stand-in for a stochastic solver: it restores nothing and
// writes a standard error that encodes the tile key and pixel position.
type seSolver struct{}

func (seSolver) Name() string { return "se-probe" }

func (seSolver) Solve(_ context.Context, _ *step.Workspace, p *step.Problem, dst []float32) (step.Result, error) {
	for i := range dst[:p.W*p.H] {
		dst[i] = 1
		p.SE[i] = float32(p.Key.Band*1000+p.Key.Col*100+p.Key.Row) + float32(i)/float32(p.W*p.H)
	}
	return step.Result{Iterations: 1, HasSE: true}, nil
}

// The contract (README; no outside source): a solver's standard error goes
// to the uncertainty column at the buffer's pixels, NaN where the input is
// invalid; the Problem's Key is (band, column, row) from the tile.
func TestRestoreTileUncertainty(t *testing.T) {
	p, _ := step.NewPlan(100, 80, 32, 8)
	tl := &arrowio.Tile{Band: 1, Col: 1, TileRow: 2, X: 24, Y: 56, W: 48, H: 24, HaloLeft: 8, HaloRight: 8, HaloTop: 8}
	if err := CheckPlan(p, tl); err != nil {
		t.Fatal(err)
	}
	tl.Pix = make([]float32, tl.W*tl.H)
	for i := range tl.Pix {
		tl.Pix[i] = 10
	}
	tl.Pix[7] = float32(math.NaN())
	wk := &step.TileWork{}
	valid := step.NewValid(0, false, 0, false)
	if err := restoreTile(context.Background(), seSolver{}, p, wk, tl, valid, 2); err != nil {
		t.Fatal(err)
	}
	if tl.Uncertainty == nil || len(tl.Uncertainty) != len(tl.Pix) {
		t.Fatal("no uncertainty")
	}
	ix, iy := p.InSpan(p.Cols, 1), p.InSpan(p.Rows, 2)
	tw := ix.Len()
	n := tw * iy.Len()
	for by := 0; by < tl.H; by++ {
		for bx := 0; bx < tl.W; bx++ {
			j := by*tl.W + bx
			i := (tl.Y+by-iy.Start)*tw + tl.X + bx - ix.Start
			want := float32(1000+100+2) + float32(i)/float32(n)
			if j == 7 {
				if tl.Uncertainty[j] == tl.Uncertainty[j] || tl.Pix[j] == tl.Pix[j] {
					t.Errorf("invalid pixel: uncertainty %v, pixel %v, want NaN", tl.Uncertainty[j], tl.Pix[j])
				}
				continue
			}
			if tl.Uncertainty[j] != want || tl.Pix[j] != 3 {
				t.Fatalf("pixel (%d,%d): uncertainty %v want %v, value %v want 3", bx, by, tl.Uncertainty[j], want, tl.Pix[j])
			}
		}
	}
}

// The contract (README, halo and buffer rules; no outside source): tiles
// whose geometry is not the tiling's are refused naming the column.
func TestCheckPlan(t *testing.T) {
	p, _ := step.NewPlan(100, 80, 32, 8)
	good := arrowio.Tile{Col: 0, TileRow: 0, X: 0, Y: 0, W: 40, H: 40, HaloRight: 8, HaloBottom: 8}
	if err := CheckPlan(p, &good); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		mod  func(t *arrowio.Tile)
		want string
	}{
		{func(t *arrowio.Tile) { t.Col = 9 }, arrowio.ColTileColumn},
		{func(t *arrowio.Tile) { t.TileRow = 9 }, arrowio.ColTileRow},
		{func(t *arrowio.Tile) { t.X = 1 }, arrowio.ColBufferX},
		{func(t *arrowio.Tile) { t.H = 39 }, arrowio.ColBufferHeight},
		{func(t *arrowio.Tile) { t.HaloRight = 7 }, arrowio.ColHaloRight},
	} {
		tl := good
		c.mod(&tl)
		err := CheckPlan(p, &tl)
		if err == nil || !bytes.Contains([]byte(err.Error()), []byte("column "+c.want)) {
			t.Errorf("want an error naming %s, got %v", c.want, err)
		}
	}
}

// restoreMem restores bands of src with step.Restore into memory.
func restoreMem(t testing.TB, src *raster.Mem, bands []int, cfg step.Config) (*raster.Mem, *step.Report) {
	t.Helper()
	meta := src.Meta()
	om := meta
	om.Bands = nil
	for _, b := range bands {
		om.Bands = append(om.Bands, meta.Bands[b])
	}
	dst := raster.NewMem(om)
	rep, err := step.Restore(context.Background(), src, bands, dst, cfg)
	if err != nil {
		t.Fatal(err)
	}
	return dst, rep
}

// A restored stream of the particle method records its fixed count (issue
// 16: records state what was done; no outside source): stop "fixed", the
// count and the burn-in, in the parameters the assembled raster's metadata
// is made from.
func TestRestoredHeaderRecordsParticle(t *testing.T) {
	src, _, _, k := steptest.ValleyScene(t, 40, 40, 1.2)
	cfg := step.Config{Method: step.MethodParticle, PSF: k, PSFSpec: "gaussian:sigma=1.2", Smooth: 0.3, Iterations: 8, Tile: 32, Overlap: 16}
	if err := cfg.Resolve(); err != nil {
		t.Fatal(err)
	}
	in, err := ObservedHeader(src.Meta(), []int{0}, "s", 32, 16)
	if err != nil {
		t.Fatal(err)
	}
	h, err := RestoredHeader(in, cfg, []float64{0})
	if err != nil {
		t.Fatal(err)
	}
	rep, err := ReportFromHeader(h)
	if err != nil {
		t.Fatal(err)
	}
	a := rep.Bands[0].Applied
	if rep.Stop != step.StopFixed || a == nil || a.Stop != "fixed" || a.Iterations != 8 || a.BurnIn == nil || *a.BurnIn != 4 || a.Smooth != 0.3 {
		t.Errorf("stop %q, applied %+v", rep.Stop, a)
	}
	if rep.PSFUsed.Model != "gaussian" || *rep.PSFUsed.SigmaX != 1.2 || rep.PSFUsed.Width != k.W {
		t.Errorf("PSF record %+v", rep.PSFUsed)
	}
}
