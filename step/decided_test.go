package step

import (
	"context"
	"math"
	"testing"

	"limpid/raster"
	"limpid/step/internal/steptest"
)

// sameBits reports the first pixel where a and b differ bit for bit (NaN
// payloads included), or -1.
func sameBits(a, b []float32) int {
	for i := range a {
		if math.Float32bits(a[i]) != math.Float32bits(b[i]) {
			return i
		}
	}
	return -1
}

// A replay of Report.Decided (Config.Decided) builds the same solvers as
// the run that decided: the outputs are equal bit for bit, and the report's
// choices and noise models are the same. Covered: the global choice over
// several tiles, a one-tile scene (the kept iterate, recomputed), the
// per-tile map, the discrepancy stop, a fixed run with an automatic
// background.
// Source: determinism requirement of issue 15 (a plan applied later gives
// the single run's bytes); the reference is the plain Restore itself.
func TestDecidedReplayIdentical(t *testing.T) {
	src, _, _, k := steptest.ValleyScene(t, 64, 56, 1.2)
	cases := []struct {
		name string
		cfg  Config
		w, h int
	}{
		{"global", Config{SmoothAuto: true, Smooth: DefaultSmooth, Stop: StopAuto, Tile: 24}, 64, 56},
		{"one tile", Config{SmoothAuto: true, Smooth: DefaultSmooth, Stop: StopAuto, Tile: 64}, 64, 56},
		{"per-tile", Config{SmoothAuto: true, Smooth: DefaultSmooth, Stop: StopAuto, Tile: 24, Choose: ChoosePerTile}, 64, 56},
		{"discrepancy", Config{Smooth: 0.2, Stop: StopDiscrepancy, Tile: 32}, 64, 56},
		{"fixed", Config{Smooth: 0.2, Stop: StopChange, Tile: 32, BackgroundAuto: true}, 64, 56},
	}
	bands := []int{0, 1}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			cfg := tc.cfg
			cfg.PSF, cfg.Workers, cfg.Iterations = k, 2, 60
			want := raster.NewMem(raster.Meta{Width: tc.w, Height: tc.h, DataType: "Float32", Bands: src.M.Bands[:2]})
			rep, err := Restore(context.Background(), src, bands, want, cfg)
			if err != nil {
				t.Fatal(err)
			}
			dec, err := Decide(context.Background(), src, bands, cfg)
			if err != nil {
				t.Fatal(err)
			}
			if len(dec.Decided) != len(bands) {
				t.Fatalf("Decide: %d decisions for %d bands", len(dec.Decided), len(bands))
			}
			rc := cfg
			rc.Decided = dec.Decided
			got := raster.NewMem(want.M)
			rep2, err := Restore(context.Background(), src, bands, got, rc)
			if err != nil {
				t.Fatal(err)
			}
			for b := range bands {
				if i := sameBits(want.Bands[b], got.Bands[b]); i >= 0 {
					t.Fatalf("band %d pixel %d: replay %v, single run %v (decision %+v)", b+1, i, got.Bands[b][i], want.Bands[b][i], dec.Decided[b])
				}
				c1, c2 := rep.Bands[b].Choice, rep2.Bands[b].Choice
				if (c1 == nil) != (c2 == nil) || (c1 != nil && (c1.Smooth != c2.Smooth || c1.Iterations != c2.Iterations || c1.Rule != c2.Rule)) {
					t.Errorf("band %d: replayed choice %+v, single run %+v", b+1, c2, c1)
				}
				if rep.Bands[b].MaxIterations != rep2.Bands[b].MaxIterations || rep.Bands[b].Background != rep2.Bands[b].Background {
					t.Errorf("band %d: report differs: max iterations %d/%d, background %g/%g", b+1,
						rep2.Bands[b].MaxIterations, rep.Bands[b].MaxIterations, rep2.Bands[b].Background, rep.Bands[b].Background)
				}
			}
			if tc.name == "one tile" && !dec.Decided[0].Kept {
				t.Errorf("one-tile scene: the choice did not keep its iterate (%+v); the kept-iterate replay is not covered", dec.Decided[0])
			}
		})
	}
}
