package plan

import (
	"context"
	"encoding/json"
	"math"
	"testing"

	"limpid/raster"
	"limpid/step"
	"limpid/step/internal/steptest"
)

type tileOut struct {
	ox, oy step.Span
	bands  [][]float32
	reps   []step.TileReport
}

// Source: issue 15's contract — shards merged give the single run's bytes;
// the reference is step.Restore itself on the same scene. The plan goes
// through its JSON text (as the command writes it) before it is applied.
func TestShardsMergeIdentical(t *testing.T) {
	src, _, _, k := steptest.ValleyScene(t, 64, 56, 1.2)
	bands := []int{0, 2}
	cfg := step.Config{PSF: k, PSFSpec: "gaussian:sigma=1.2", SmoothAuto: true, Smooth: step.DefaultSmooth, Stop: step.StopAuto, Tile: 20, Workers: 2, BackgroundAuto: true}
	if err := cfg.Resolve(); err != nil {
		t.Fatal(err)
	}
	om := raster.Meta{Width: 64, Height: 56, DataType: "Float32", Bands: []raster.BandInfo{src.M.Bands[0], src.M.Bands[2]}}
	want := raster.NewMem(om)
	wantRep, err := step.Restore(context.Background(), src, bands, want, cfg)
	if err != nil {
		t.Fatal(err)
	}
	rep, err := step.Decide(context.Background(), src, bands, cfg)
	if err != nil {
		t.Fatal(err)
	}
	p := New(rep, cfg, src.M, bands, "same", OutputOf(om, "Float32", math.NaN(), true))
	valid := func(b int, v float32) bool { return raster.Valid(v, 0, true, 0, false) }
	if err := p.Count(src, valid); err != nil {
		t.Fatal(err)
	}
	text, err := json.Marshal(p)
	if err != nil {
		t.Fatal(err)
	}
	var q File
	if err := json.Unmarshal(text, &q); err != nil {
		t.Fatal(err)
	}
	if err := q.Check(src.M); err != nil {
		t.Fatal(err)
	}
	const shards = 3
	assign := Assign(q.Tiles, shards)
	tiles := map[[2]int]*tileOut{}
	for s := 0; s < shards; s++ {
		c := q.Config(2)
		c.Tiles = &step.TileSink{
			Need: func(col, row int) bool { return assign[row*len(q.tilingCols(t))+col] == s },
			Put: func(k step.TileKey, ox, oy step.Span, out []float32, res step.Result) error {
				to := tiles[[2]int{k.Col, k.Row}]
				if to == nil {
					to = &tileOut{ox: ox, oy: oy, bands: make([][]float32, len(bands)), reps: make([]step.TileReport, len(bands))}
					tiles[[2]int{k.Col, k.Row}] = to
				}
				to.bands[k.Band] = append([]float32(nil), out...)
				to.reps[k.Band] = step.TileReport{Col: k.Col, Row: k.Row, Iterations: res.Iterations, Change: res.Change, Flat: res.Flat}
				return nil
			}}
		if _, err := step.Restore(context.Background(), src, bands, nil, c); err != nil {
			t.Fatal(err)
		}
	}
	if len(tiles) != len(q.Tiles) {
		t.Fatalf("the shards wrote %d tiles, the plan has %d", len(tiles), len(q.Tiles))
	}
	got := raster.NewMem(om)
	mrep, err := q.Merge(context.Background(), func(col, row int, out [][]float32) ([]step.TileReport, error) {
		to := tiles[[2]int{col, row}]
		for b := range out {
			copy(out[b], to.bands[b])
		}
		return to.reps, nil
	}, got)
	if err != nil {
		t.Fatal(err)
	}
	for b := range bands {
		for i := range want.Bands[b] {
			if math.Float32bits(want.Bands[b][i]) != math.Float32bits(got.Bands[b][i]) {
				t.Fatalf("band %d pixel %d: merged %v, single run %v", b+1, i, got.Bands[b][i], want.Bands[b][i])
			}
		}
		w, g := wantRep.Bands[b], mrep.Bands[b]
		if w.MaxIterations != g.MaxIterations || w.FluxAfter != g.FluxAfter || w.FluxBefore != g.FluxBefore || w.ValidPixels != g.ValidPixels {
			t.Errorf("band %d report: merged max it %d flux %g/%g valid %d; single %d %g/%g %d", b+1,
				g.MaxIterations, g.FluxBefore, g.FluxAfter, g.ValidPixels, w.MaxIterations, w.FluxBefore, w.FluxAfter, w.ValidPixels)
		}
	}
}

func (p *File) tilingCols(t *testing.T) []step.Span {
	tp, err := p.Tiling()
	if err != nil {
		t.Fatal(err)
	}
	return tp.Cols
}

// Source: Graham (1969) list scheduling — every shard gets work when there
// are at least as many tiles as shards, and the largest load is within
// 4/3 of the best (here checked against the mean, a lower bound of the best,
// plus the heaviest tile, the bound of any greedy list rule).
func TestAssignBalanced(t *testing.T) {
	var tiles []Tile
	var total, heaviest int64
	for i := 0; i < 37; i++ {
		v := int64((i*7919)%1000 + 1)
		tiles = append(tiles, Tile{Col: i % 6, Row: i / 6, Valid: v})
		total += v + 1
		heaviest = max(heaviest, v+1)
	}
	for _, n := range []int{1, 2, 5, 8} {
		a := Assign(tiles, n)
		load := make([]int64, n)
		for i, s := range a {
			if s < 0 || s >= n {
				t.Fatalf("n=%d: tile %d in shard %d", n, i, s)
			}
			load[s] += tiles[i].Valid + 1
		}
		for s, l := range load {
			if l == 0 {
				t.Errorf("n=%d: shard %d has no tile", n, s)
			}
			if l > total/int64(n)+heaviest {
				t.Errorf("n=%d: shard %d load %d above mean %d + heaviest %d", n, s, l, total/int64(n), heaviest)
			}
		}
		b := Assign(tiles, n)
		for i := range a {
			if a[i] != b[i] {
				t.Fatalf("n=%d: assignment not deterministic at tile %d", n, i)
			}
		}
	}
}
