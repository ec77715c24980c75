package psf

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

// autoScene is an invented 220 x 200 plane at level 400 holding two
// calibration panels rendered exactly (renderEdge): a near-vertical edge
// turned 5 degrees blurred by sx and a near-horizontal one turned 6 degrees
// blurred by sy, both stepping by 1600 DN, plus white noise of noise DN and
// a row of NaN pixels away from the panels.
func autoScene(sx, sy, noise float64, rng *rand.Rand) ([]float32, int, int) {
	const w, h = 220, 200
	plane := make([]float32, w*h)
	for i := range plane {
		plane[i] = 400
	}
	v := renderEdge(64, 120, 31.5-60*math.Tan(5*math.Pi/180), 5, sx)
	for y := 0; y < 120; y++ {
		for x := 0; x < 64; x++ {
			plane[(10+y)*w+10+x] = float32(400 + 1600*v[y*64+x])
		}
	}
	// Rendered near-vertical (110 wide, 64 tall) and transposed.
	hz := renderEdge(64, 110, 31.5-55*math.Tan(6*math.Pi/180), 6, sy)
	for y := 0; y < 64; y++ {
		for x := 0; x < 110; x++ {
			plane[(30+y)*w+95+x] = float32(400 + 1600*hz[x*64+y])
		}
	}
	for i := range plane {
		plane[i] += float32(noise * rng.NormFloat64())
	}
	for x := 100; x < 200; x++ {
		plane[180*w+x] = float32(math.NaN())
	}
	return plane, w, h
}

// MeasureAuto, the library form of --psf auto, finds both panels' edges and
// recovers the blur of each axis.
// Source: ISO 12233:2017 slanted-edge e-SFR (the method MeasureEdge
// implements) and the Gaussian MTF exp(-2 pi^2 sigma^2 f^2): the rendered
// edges are exact pixel integrals of a step blurred by a Gaussian of the
// given sigma, so each axis' measured sigma must match it. The tolerance,
// 3 % on synthetic edges, is limpid's accuracy requirement for the
// measurement (a project requirement, not a published figure); here SNR
// is 100 (step / noise).
func TestMeasureAutoRecoversGaussian(t *testing.T) {
	const tolSigma = 0.03
	const sx, sy = 0.9, 1.3
	plane, w, h := autoScene(sx, sy, 16, rand.New(rand.NewPCG(12233, 11)))
	res, err := MeasureAuto(plane, w, h, AutoOptions{})
	if err != nil {
		t.Fatal(err)
	}
	est := res.Estimate
	if est.SigmaX == nil || est.SigmaY == nil || est.Sigma == nil {
		t.Fatalf("estimate lacks an axis: %+v", est)
	}
	if math.Abs(*est.SigmaX-sx) > tolSigma*sx || math.Abs(*est.SigmaY-sy) > tolSigma*sy {
		t.Errorf("sigma_x %.4f sigma_y %.4f, want %g %g within 3 %%", *est.SigmaX, *est.SigmaY, sx, sy)
	}
	if *est.Sigma != math.Sqrt(*est.SigmaX**est.SigmaY) || est.SigmaFrom != "edges, both axes" {
		t.Errorf("sigma %g from %q, want the geometric mean of both axes", *est.Sigma, est.SigmaFrom)
	}
	// Every edge lies in a panel, has the panel's orientation and angle,
	// and its own sigma is within the tolerance of its axis' blur.
	const tolAngle = 0.2 // degrees, as in TestSlantedEdgeRecoversGaussian
	var vert, horiz int
	for i, e := range res.Edges {
		wn, r := e.Window, e.Result
		if len(est.Used) != len(res.Edges) || !est.Used[i] {
			t.Errorf("edge %d (%+v) not used: %q", i, wn, est.Rejected)
		}
		want, ang, inPanel := sx, 5.0, wn.X0 >= 10 && wn.X1 <= 74 && wn.Y0 >= 10 && wn.Y1 <= 130
		if !r.Vertical {
			want, ang, inPanel = sy, 6.0, wn.X0 >= 95 && wn.X1 <= 205 && wn.Y0 >= 30 && wn.Y1 <= 94
			horiz++
		} else {
			vert++
		}
		if !inPanel || r.Vertical != wn.Vertical || math.Abs(r.AngleDeg-ang) > tolAngle || math.Abs(r.Sigma-want) > tolSigma*want {
			t.Errorf("edge %d: window %+v vertical %v angle %.3f sigma %.4f", i, wn, r.Vertical, r.AngleDeg, r.Sigma)
		}
	}
	if vert == 0 || horiz == 0 {
		t.Errorf("found %d near-vertical and %d near-horizontal edges, want both", vert, horiz)
	}
	// The estimate is a usable PSF spec: its kernel has the measured
	// variances (point-sampled Gaussians with 4-sigma support keep sigma^2
	// to 2e-3 relative, TestGaussianVariance's reasoning; the spec's 6
	// significant digits add under 1e-5).
	spec, err := est.Spec()
	if err != nil {
		t.Fatal(err)
	}
	k, err := Parse(spec, Env{})
	if err != nil {
		t.Fatalf("%s: %v", spec, err)
	}
	const tolVar = 2e-3
	mx, my := *est.SigmaX**est.SigmaX, *est.SigmaY**est.SigmaY
	if vx, vy := k.Variance(); math.Abs(vx-mx) > tolVar*mx || math.Abs(vy-my) > tolVar*my {
		t.Errorf("%s: kernel variances %g %g, measured %g %g", spec, vx, vy, mx, my)
	}
	if res.Noise <= 0 || res.Noise != SceneNoise(plane, w, h) {
		t.Errorf("noise %g, want SceneNoise %g", res.Noise, SceneNoise(plane, w, h))
	}
}

// MeasureAuto's refusals: no edge (ErrNoEdge, an ErrMeasure), a plane of
// the wrong size and a bad noise option. Source: MeasureAuto's documented
// contract.
func TestMeasureAutoRefuses(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	flat := make([]float32, 96*96)
	for i := range flat {
		flat[i] = float32(1000 + 10*math.Sin(float64(i)*0.37) + rng.NormFloat64())
	}
	res, err := MeasureAuto(flat, 96, 96, AutoOptions{})
	if !errors.Is(err, ErrNoEdge) || !errors.Is(err, ErrMeasure) || len(res.Edges) != 0 || res.Estimate.Sigma != nil {
		t.Errorf("flat plane: %v, %d edges, sigma %v", err, len(res.Edges), res.Estimate.Sigma)
	}
	// A constant plane has no noise: the floor applies.
	constant := make([]float32, 64*64)
	if res, err := MeasureAuto(constant, 64, 64, AutoOptions{}); !errors.Is(err, ErrNoEdge) || res.Noise != MinAutoNoise {
		t.Errorf("constant plane: %v, noise %g", err, res.Noise)
	}
	if _, err := MeasureAuto(flat, 95, 96, AutoOptions{}); err == nil || errors.Is(err, ErrMeasure) {
		t.Errorf("wrong size: %v", err)
	}
	for _, n := range []float64{-1, math.NaN(), math.Inf(1)} {
		if _, err := MeasureAuto(flat, 96, 96, AutoOptions{Noise: n}); err == nil || errors.Is(err, ErrMeasure) {
			t.Errorf("noise %g: %v", n, err)
		}
	}
}
