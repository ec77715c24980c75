package step

import (
	"math"
	"math/rand/v2"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/noise"
	"limpid/step/scene"
)

// The particle method's --uncertainty map is the total of its Monte Carlo
// error and the data-noise part: sqrt(mc^2 + noise^2). Source: the two
// errors come from independent sources (the random streams and the data
// noise), and the variance of a sum of independent errors is the sum of
// their variances (Bienaymé's formula). So per pixel the total is at least
// each part and equals the root sum of squares of the parts (to float32
// rounding). The data-noise part is the noise error map of the EMS
// recursion the particle method approximates (Crucinio, Doucet & Johansen,
// JASA 2021: the particle recursion converges to EMS with the same H, S
// and iteration count), so it must equal the grid method's map at the same
// settings: both run GridEMS.solveNoiseMap on the same tile problems with
// the same probe streams, and blend linearly.
func TestParticleTotalError(t *testing.T) {
	const n = 64
	// rssTol: the total is sqrt(acc + d^2) with acc = mc^2 in float32; the
	// part handed to the check is sqrt(acc) rounded to float32, so the two
	// differ by a few float32 ulps (2^-24 relative each).
	const rssTol = 4e-7
	// gridTol: the data part and the grid map run the same float32
	// operations in the same order, so they agree exactly; the tolerance
	// only allows for float32 rounding should that order ever change.
	const gridTol = 1e-5
	ref, valid := scene.ValleyReference(n, n)
	k, _ := psf.GaussianIso(1.2)
	sensor := scene.Sensor{Gain: 0.4, Read: 3}
	nm := &noise.Model{A: sensor.Gain, B: sensor.Read * sensor.Read, Source: "given"}
	obs := scene.Degrade(ref[1], valid, n, n, conv.New(k), sensor, rand.New(rand.NewPCG(7, 8)))
	base := Config{PSF: k, Smooth: 0.5, Stop: StopChange, Tolerance: 0, Iterations: 20, Tile: 32, Overlap: 16, Workers: 2, Noise: nm}

	gridUnc := raster.NewMem(raster.Meta{Width: n, Height: n, DataType: "Float32", Bands: []raster.BandInfo{{NoData: -1, HasNoData: true}}})
	g := base
	g.Uncertainty = gridUnc
	restorePlaneMasked(t, obs, valid, n, g)

	pc := base
	pc.Method = MethodParticle
	pc.Particle = ParticleConfig{PerPixel: 4, ESSThreshold: 0.5, BurnIn: 10, Batches: 5}
	pc.Uncertainty = raster.NewMem(gridUnc.M)
	mc, data, total := make([]float32, n*n), make([]float32, n*n), make([]float32, n*n)
	pc.seParts = func(band, y0 int, m, d, tot []float32) {
		copy(mc[y0*n:], m)
		copy(data[y0*n:], d)
		copy(total[y0*n:], tot)
	}
	_, rep := restorePlaneMasked(t, obs, valid, n, pc)
	file := pc.Uncertainty.(*raster.Mem).Bands[0]

	var maxGrid, sumD, sumMC float64
	nv := 0
	for i := range total {
		if !valid[i] {
			if !math.IsNaN(float64(file[i])) {
				t.Fatalf("nodata pixel %d has total error %g, want NaN", i, file[i])
			}
			continue
		}
		nv++
		if math.Float32bits(file[i]) != math.Float32bits(total[i]) {
			t.Fatalf("pixel %d: file holds %g, the total is %g", i, file[i], total[i])
		}
		m, d, tot := float64(mc[i]), float64(data[i]), float64(total[i])
		if !(d > 0) || !(m >= 0) {
			t.Fatalf("pixel %d: parts mc %g, noise %g; want mc >= 0, noise > 0", i, m, d)
		}
		if tot < m || tot < d {
			t.Fatalf("pixel %d: total %g below a part (mc %g, noise %g)", i, tot, m, d)
		}
		if rss := math.Sqrt(m*m + d*d); math.Abs(tot-rss) > rssTol*rss {
			t.Fatalf("pixel %d: total %g, sqrt(mc^2 + noise^2) = %g", i, tot, rss)
		}
		gv := float64(gridUnc.Bands[0][i])
		maxGrid = max(maxGrid, math.Abs(d-gv)/gv)
		sumD += d
		sumMC += m
	}
	t.Logf("max |noise part - grid map| / grid map = %.3g; mean parts: noise %.4g, mc %.4g DN", maxGrid, sumD/float64(nv), sumMC/float64(nv))
	if maxGrid > gridTol {
		t.Errorf("noise part differs from the grid method's noise map by %.3g (relative), want <= %g", maxGrid, gridTol)
	}
	pb := rep.Particle.Bands[0]
	if math.Abs(pb.MeanNoiseSE-sumD/float64(nv)) > 1e-6*pb.MeanNoiseSE || math.Abs(pb.MeanSE-sumMC/float64(nv)) > 1e-3*pb.MeanSE {
		t.Errorf("report means noise %g, mc %g; the maps' means %g, %g", pb.MeanNoiseSE, pb.MeanSE, sumD/float64(nv), sumMC/float64(nv))
	}
	if !(pb.MeanTotalSE >= pb.MeanNoiseSE && pb.MeanTotalSE >= pb.MeanSE) {
		t.Errorf("report's mean total %g below a part's mean (noise %g, mc %g)", pb.MeanTotalSE, pb.MeanNoiseSE, pb.MeanSE)
	}

	// Without a given noise model the band's model is estimated (and
	// recorded), and the noise part is still there.
	pc.Noise, pc.seParts = nil, nil
	pc.Uncertainty = raster.NewMem(gridUnc.M)
	_, rep = restorePlaneMasked(t, obs, valid, n, pc)
	if b := rep.Bands[0]; b.Noise == nil || b.Noise.Source == "given" || !(rep.Particle.Bands[0].MeanNoiseSE > 0) {
		t.Errorf("estimated noise model %+v, mean noise part %g; want an estimated model and a positive part", b.Noise, rep.Particle.Bands[0].MeanNoiseSE)
	}
}
