package step

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"limpid/psf"
	"limpid/raster"
)

// restorePlane restores a one-band n x n UInt16 scene in memory.
func restorePlane(t testing.TB, obs []float32, n int, cfg Config) ([]float32, *Report) {
	t.Helper()
	src := raster.NewMem(raster.Meta{Width: n, Height: n, DataType: "UInt16", Bands: []raster.BandInfo{{}}})
	copy(src.Bands[0], obs)
	dst := raster.NewMem(src.M)
	rep, err := Restore(context.Background(), src, []int{0}, dst, cfg)
	if err != nil {
		t.Fatal(err)
	}
	return dst.Bands[0], rep
}

// Source: brute force. On a small scene the oracle (the candidate bandwidth
// and iteration with the best PSNR against the reference) is computed by
// running every candidate to the cap; the automatic choice must land within
// 0.3 dB of it (the worst-case bar) and report its choice.
func TestAutoChoiceMatchesBruteForce(t *testing.T) {
	const n, capK, margin = 96, 120, 12
	const maxLoss = 0.3
	rng := rand.New(rand.NewPCG(21, 22))
	k, _ := psf.GaussianIso(1.5)
	H := NewConv(k)
	// Invented Brannock Vale fields (demo scenario) at 12 bits.
	bands, _ := ValleyReference(n, n)
	ref := bands[2]
	valid := make([]bool, n*n)
	for i := range valid {
		valid[i] = true
	}
	obs := Degrade(ref, valid, n, n, H, Noise{Gain: 0.3, Read: 3}, rng)
	interior := make([]bool, n*n)
	for y := margin; y < n-margin; y++ {
		for x := margin; x < n-margin; x++ {
			interior[y*n+x] = true
		}
	}
	best := math.Inf(-1)
	for _, eps := range AutoSmooths {
		g := newGrid(k, H, eps, capK, 0)
		g.Observe = func(_ int, f []float32, _ float64) { best = math.Max(best, PSNR(ref, f, interior, 4095)) }
		g.Solve(context.Background(), &Workspace{}, &Problem{D: append([]float32(nil), obs...), Mask: ones(n * n), W: n, H: n}, make([]float32, n*n))
	}
	out, rep := restorePlane(t, obs, n, Config{PSF: k, Workers: 2, Overlap: -1, SmoothAuto: true, Stop: StopAuto, Iterations: capK})
	got := PSNR(ref, out, interior, 4095)
	ch := rep.Bands[0].Choice
	t.Logf("oracle %.2f dB, auto %.2f dB at eps %.1f, %d iterations (%s)", best, got, ch.Smooth, ch.Iterations, ch.Rule)
	if best-got > maxLoss {
		t.Errorf("auto choice %.2f dB is %.2f dB below the brute-force best %.2f dB", got, best-got, best)
	}
	if rep.Bands[0].Noise == nil || rep.Bands[0].Noise.Source != "estimated" || len(ch.Candidates) != len(AutoSmooths) {
		t.Errorf("report lacks the noise model or the candidates: %+v", rep.Bands[0])
	}
}

// Fallbacks never crash and say what they did: a band with most pixels
// invalid (prediction-domain risk), a scene smaller than the noise fit
// needs, a constant band, tiles of 16 pixels, per-tile choice. Source:
// common practice, no source (robustness requirement of the issue).
func TestAutoFallbacks(t *testing.T) {
	k, _ := psf.GaussianIso(1.0)
	rng := rand.New(rand.NewPCG(23, 24))
	mk := func(n int, fill func(x, y int) float32) *raster.Mem {
		m := raster.NewMem(raster.Meta{Width: n, Height: n, DataType: "Float32", Bands: []raster.BandInfo{{NoData: -1, HasNoData: true}}})
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				m.Bands[0][y*n+x] = fill(x, y)
			}
		}
		return m
	}
	noisy := func(x, y int) float32 { return float32(800 + 200*math.Sin(float64(x)/5) + 20*rng.NormFloat64()) }
	cases := []struct {
		name string
		src  *raster.Mem
		cfg  Config
	}{
		{"mostly nodata", mk(80, func(x, y int) float32 {
			if x > 25 {
				return -1
			}
			return noisy(x, y)
		}), Config{}},
		{"tiny scene", mk(12, noisy), Config{Tile: 16}},
		{"constant", mk(40, func(int, int) float32 { return 500 }), Config{}},
		{"all nodata", mk(40, func(int, int) float32 { return -1 }), Config{}},
		{"small tiles per tile", mk(64, noisy), Config{Tile: 16, Choose: ChoosePerTile}},
		{"discrepancy", mk(64, noisy), Config{Stop: StopDiscrepancy, Smooth: 0.3}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			cfg := c.cfg
			cfg.PSF, cfg.Overlap, cfg.Workers = k, -1, 2
			if cfg.Stop == "" {
				cfg.Stop, cfg.SmoothAuto = StopAuto, true
			}
			cfg.Iterations = 60
			dst := raster.NewMem(c.src.M)
			rep, err := Restore(context.Background(), c.src, []int{0}, dst, cfg)
			if err != nil {
				t.Fatal(err)
			}
			b := rep.Bands[0]
			if b.Choice == nil && cfg.Stop != StopDiscrepancy {
				t.Fatalf("no choice recorded")
			}
			if b.Choice != nil {
				t.Logf("noise %s; choice eps %.1f k %d: %s (prediction tiles %d)", b.Noise.Source, b.Choice.Smooth, b.Choice.Iterations, b.Choice.Rule, b.Choice.PredictionTiles)
			}
			for i, v := range dst.Bands[0] {
				if c.src.Bands[0][i] != -1 && (math.IsNaN(float64(v)) || math.IsInf(float64(v), 0)) {
					t.Fatalf("pixel %d is %g", i, v)
				}
			}
		})
	}
}

// Determinism (issue 2's rule, extended to the automatic choice): the
// choice and the output are identical for any number of workers, globally
// and per tile. Source: common practice, no source.
func TestAutoWorkersIdentical(t *testing.T) {
	const n = 100
	k, _ := psf.GaussianIso(1.2)
	rng := rand.New(rand.NewPCG(25, 26))
	bands, _ := ValleyReference(n, n)
	valid := make([]bool, n*n)
	for i := range valid {
		valid[i] = true
	}
	obs := Degrade(bands[1], valid, n, n, NewConv(k), Noise{Gain: 0.4, Read: 3}, rng)
	for _, choose := range []string{ChooseGlobal, ChoosePerTile} {
		var first []float32
		for _, w := range []int{1, 3} {
			out, _ := restorePlane(t, obs, n, Config{PSF: k, Workers: w, Tile: 32, Overlap: -1, SmoothAuto: true, Stop: StopAuto, Iterations: 40, Choose: choose})
			if first == nil {
				first = out
				continue
			}
			for i := range out {
				if out[i] != first[i] {
					t.Fatalf("%s: workers %d differ from 1 at pixel %d", choose, w, i)
				}
			}
		}
	}
}

// A global choice over several tiles sums every candidate's risk over the
// tiles and stops at the first candidate whose sum rises, so one tile's
// early exit cannot veto a bandwidth (GUIDE section 4.5: sum the tiles'
// curves): the candidates skipped are exactly those after the first rise of
// the summed risk. Source: the method's definition.
func TestGlobalChoiceSumsCandidates(t *testing.T) {
	const n = 96
	k, _ := psf.GaussianIso(1.2)
	rng := rand.New(rand.NewPCG(27, 28))
	bands, _ := ValleyReference(n, n)
	valid := make([]bool, n*n)
	for i := range valid {
		valid[i] = true
	}
	obs := Degrade(bands[2], valid, n, n, NewConv(k), Noise{Gain: 0.4, Read: 3}, rng)
	_, rep := restorePlane(t, obs, n, Config{PSF: k, Workers: 2, Tile: 48, Overlap: -1, SmoothAuto: true, Stop: StopAuto, Iterations: 30})
	ch := rep.Bands[0].Choice
	if ch.TilesUsed < 2 {
		t.Fatalf("%d tiles used, want several", ch.TilesUsed)
	}
	rose := false
	for i, c := range ch.Candidates {
		if c.Skipped != rose {
			t.Fatalf("candidate %.1f: skipped %v, but the summed risk rose before it: %v", c.Smooth, c.Skipped, rose)
		}
		if !c.Skipped && len(c.Curve) == 0 {
			t.Fatalf("candidate %.1f ran without a summed curve", c.Smooth)
		}
		if i > 0 && !c.Skipped && c.Risk > ch.Candidates[i-1].Risk {
			rose = true
		}
	}
}
