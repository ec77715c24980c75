package simulate

import (
	"context"
	"errors"
	"math"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step"
	"limpid/step/conv"
	"limpid/step/scene"
)

// simLevels is an invented test scene: horizontal stripes of constant level,
// each simRows rows tall, so that away from the stripe borders the blur is
// the identity and every pixel of a stripe has the same expected value.
func simLevels(w int, levels []float64, simRows int) *raster.Mem {
	h := simRows * len(levels)
	m := raster.NewMem(raster.Meta{Width: w, Height: h, DataType: "Float32", Bands: []raster.BandInfo{{}}})
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			m.Bands[0][y*w+x] = float32(levels[y/simRows])
		}
	}
	return m
}

func simRun(t *testing.T, src *raster.Mem, spec, noise, dtype string, seed uint64, strip int) *raster.Mem {
	t.Helper()
	k, err := psf.Parse(spec, psf.Env{})
	if err != nil {
		t.Fatal(err)
	}
	nz, err := ParseNoise(noise)
	if err != nil {
		t.Fatal(err)
	}
	m := src.Meta()
	dst := raster.NewMem(m)
	cfg := Config{H: conv.New(k), Noise: nz, Seed: seed, DataType: dtype, Strip: strip,
		NoData: m.Bands[0].NoData, HasNoData: m.Bands[0].HasNoData,
		OutNoData: m.Bands[0].NoData, HasOutNoData: m.Bands[0].HasNoData}
	if err := Simulate(context.Background(), src, dst, cfg); err != nil {
		t.Fatal(err)
	}
	return dst
}

// stripeStats returns the mean and (n-1) variance of stripe i's pixels more
// than margin rows from its borders.
func stripeStats(p []float32, w, rows, i, margin int) (mean, variance float64, n int) {
	var s, ss float64
	for y := i*rows + margin; y < (i+1)*rows-margin; y++ {
		for x := 0; x < w; x++ {
			v := float64(p[y*w+x])
			s += v
			ss += v * v
			n++
		}
	}
	mean = s / float64(n)
	variance = (ss - s*mean) / float64(n-1)
	return
}

// TestSimulateNoiseStatistics checks that simulate's noise has the mean and
// variance of the requested model at every intensity level.
// Source: the noise model definitions (Poisson-Gaussian sensor, DN = G
// scene.Poisson(s/G) + N(0, R^2): mean s, variance G s + R^2; Gaussian: mean s,
// variance S^2; quantisation to integers adds a uniform rounding error of
// variance 1/12, Sheppard's correction, W. F. Sheppard, Proc. London Math.
// Soc. 29:353, 1898).
func TestSimulateNoiseStatistics(t *testing.T) {
	const w, rows = 256, 48
	levels := []float64{12.3, 150.6, 1000.2, 3000.7}
	src := simLevels(w, levels, rows)
	// Tolerance: 5 standard errors of the estimate, a chance of about 6e-7
	// per check of failing on a correct model (normal approximation). The
	// standard error of a sample mean is sqrt(var/n); that of a sample
	// variance is var sqrt(2/(n-1) + kurt/n) with kurt the excess kurtosis
	// (Poisson part: G^2 s / var^2 after scaling, common formula of the
	// variance of the sample variance, e.g. Cramer, Mathematical Methods of
	// Statistics, 1946, 27.4 - recalled from memory).
	const nSE = 5
	cases := []struct {
		noise, dtype string
		gain, read   float64
		sigma        float64
		quant        float64 // rounding variance added
	}{
		{"poisson:gain=0.5,read=3", "Float32", 0.5, 3, 0, 0},
		{"poisson:gain=2,read=0", "Float32", 2, 0, 0, 0},
		{"gaussian:sigma=7.5", "Float32", 0, 0, 7.5, 0},
		{"poisson:gain=0.4,read=2", "UInt16", 0.4, 2, 0, 1.0 / 12},
	}
	for _, c := range cases {
		out := simRun(t, src, "gaussian:sigma=1.2", c.noise, c.dtype, 7, 0)
		margin := 8 // > PSF radius, so the blur is the identity there
		for i, s := range levels {
			mean, v, n := stripeStats(out.Bands[0], w, rows, i, margin)
			var want, kurt4 float64 // kurt4: fourth cumulant
			if c.gain > 0 {
				want = c.gain*s + c.read*c.read
				kurt4 = c.gain * c.gain * c.gain * s // G^4 * (s/G), fourth cumulant of G*scene.Poisson(s/G)
			} else {
				want = c.sigma * c.sigma
			}
			want += c.quant
			seMean := math.Sqrt(want / float64(n))
			seVar := want * math.Sqrt(2/float64(n-1)+kurt4/(want*want)/float64(n))
			wantMean := s // rounding to nearest is unbiased for a smooth density
			if math.Abs(mean-wantMean) > nSE*seMean {
				t.Errorf("%s %s level %g: mean %.4f, want %.4f +- %.4f", c.noise, c.dtype, s, mean, wantMean, nSE*seMean)
			}
			if math.Abs(v-want) > nSE*seVar {
				t.Errorf("%s %s level %g: variance %.4f, want %.4f +- %.4f", c.noise, c.dtype, s, v, want, nSE*seVar)
			}
		}
	}
}

// TestSimulateBlurAndDeterminism checks the blur against a whole-scene
// Conv.Apply (the operator restore uses), that the strip size does not
// change a single bit, that a seed reproduces, and that nodata stays nodata
// and no valid pixel is quantised onto the nodata value.
// Source: the half-sample symmetric convolution (Martucci, IEEE TSP
// 42(5):1038, 1994; DEVELOPERS.md "Boundaries") and the project's
// determinism requirement.
func TestSimulateBlurAndDeterminism(t *testing.T) {
	const w, h = 97, 83
	ref, _ := scene.ValleyReference(w, h)
	src := raster.NewMem(raster.Meta{Width: w, Height: h, DataType: "Float32", Bands: []raster.BandInfo{{}}})
	copy(src.Bands[0], ref[2])
	for _, spec := range []string{"gaussian:sigma=1.5", "gaussian:sx=1.6,sy=0.7,angle=30"} {
		k, _ := psf.Parse(spec, psf.Env{})
		H := conv.New(k)
		want := make([]float32, w*h)
		var ws conv.Work
		H.Apply(&ws, want, src.Bands[0], w, h)
		got := simRun(t, src, spec, "none", "Float32", 1, 10)
		// Tolerance: float32 rounding of a sum of ~100 products of values
		// below 4096 (relative 1e-6 of the data scale; the FFT path pads
		// the strip to other sizes than the scene).
		const tol = 4096 * 1e-6
		for i := range want {
			if math.Abs(float64(got.Bands[0][i]-want[i])) > tol {
				t.Fatalf("%s: pixel %d: strip blur %g, whole-scene Conv %g", spec, i, got.Bands[0][i], want[i])
			}
		}
	}
	// Nodata: a hole of nodata 0 in a UInt16 scene.
	src.M.DataType = "UInt16"
	src.M.Bands[0].NoData, src.M.Bands[0].HasNoData = 0, true
	for y := 20; y < 30; y++ {
		for x := 40; x < 60; x++ {
			src.Bands[0][y*w+x] = 0
		}
	}
	for i := 0; i < w; i++ {
		src.Bands[0][70*w+i] = 0.2 // dark row: noise will round onto 0 often
	}
	a := simRun(t, src, "gaussian:sigma=1", "gaussian:sigma=3", "UInt16", 42, 0)
	b := simRun(t, src, "gaussian:sigma=1", "gaussian:sigma=3", "UInt16", 42, 5)
	c := simRun(t, src, "gaussian:sigma=1", "gaussian:sigma=3", "UInt16", 43, 0)
	same := 0
	for i := range a.Bands[0] {
		if math.Float32bits(a.Bands[0][i]) != math.Float32bits(b.Bands[0][i]) {
			t.Fatalf("pixel %d: strip size changed the output (%g vs %g)", i, a.Bands[0][i], b.Bands[0][i])
		}
		if a.Bands[0][i] == c.Bands[0][i] {
			same++
		}
		bad := src.Bands[0][i] == 0
		if bad != math.IsNaN(float64(a.Bands[0][i])) {
			t.Fatalf("pixel %d: input nodata %v, output %g", i, bad, a.Bands[0][i])
		}
		if v := a.Bands[0][i]; !bad && (v == 0 || v != float32(math.Round(float64(v)))) {
			t.Fatalf("pixel %d: valid output %g is the nodata value or not an integer", i, v)
		}
	}
	if same > len(a.Bands[0])/2 {
		t.Errorf("seeds 42 and 43 agree on %d of %d pixels", same, len(a.Bands[0]))
	}
}

// Noise specs parse to their model and bad ones are refused with the
// parameter named (the spec's input rules, README; no outside source).
func TestParseSimNoise(t *testing.T) {
	good := map[string]Noise{
		"poisson:gain=0.4,read=3": {Kind: NoisePoisson, Gain: 0.4, Read: 3},
		"poisson:gain=2":          {Kind: NoisePoisson, Gain: 2},
		"gaussian:sigma=5":        {Kind: NoiseGaussian, Sigma: 5},
		"none":                    {Kind: NoiseNone},
	}
	for s, want := range good {
		got, err := ParseNoise(s)
		if err != nil || got != want {
			t.Errorf("%q: %+v, %v", s, got, err)
		}
	}
	for _, s := range []string{"", "poisson", "poisson:gain=0", "poisson:gain=1,gain=2", "poisson:gain=1,sigma=2",
		"gaussian", "gaussian:sigma=-1", "gaussian:sigma=NaN", "uniform:a=1", "none:x=1", "gaussian:sigma"} {
		if _, err := ParseNoise(s); !errors.Is(err, step.ErrConfig) {
			t.Errorf("%q: want a configuration error, got %v", s, err)
		}
	}
}
