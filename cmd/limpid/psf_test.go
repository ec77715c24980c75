package main

import (
	"encoding/json"
	"fmt"
	"image/png"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/raster/gdal"
)

// psf build writes a kernel readable by --psf kernel:PATH (text and
// GeoTIFF) and the MTF CSV. Source: derived: the Gaussian's Fourier
// transform exp(-2 pi^2 sigma^2 f^2) at Nyquist (f = 1/2) and sigma 1 is
// exp(-pi^2 / 2) = 0.0072 (the model column); the Poisson summation
// formula for the kernel column: the DTFT of a point-sampled Gaussian at
// f = 1/2 is sum_m T(1/2 + m) = 2 T(1/2) + O(T(3/2)), so 0.0144 (derived);
// 4-decimal values, the 4-sigma truncation moves them by < 1e-4 (derived).
func TestPSFBuild(t *testing.T) {
	dir := t.TempDir()
	for _, name := range []string{"k.txt", "k.tif"} {
		out := filepath.Join(dir, name)
		code, _, errs := limpid(t, nil, "psf", "build", "gaussian:sigma=1", out)
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", name, code, errs)
		}
		k, err := psf.Parse("kernel:"+out, psf.Env{LoadRaster: gdal.LoadKernel})
		if err != nil {
			t.Fatalf("%s: kernel:PATH does not read it back: %v", name, err)
		}
		ref, _ := psf.GaussianIso(1)
		const tolWeights = 1e-7 // float32 GeoTIFF and %.9g text rounding
		for i := range ref.Data {
			if math.Abs(k.Data[i]-ref.Data[i]) > tolWeights {
				t.Fatalf("%s: weight %d %g, want %g", name, i, k.Data[i], ref.Data[i])
			}
		}
		csv, err := os.ReadFile(strings.TrimSuffix(out, filepath.Ext(out)) + "_mtf.csv")
		if err != nil {
			t.Fatal(err)
		}
		lines := strings.Split(strings.TrimSpace(string(csv)), "\n")
		last := strings.Split(lines[len(lines)-1], ",")
		const tolNyq = 2e-4
		if last[0] != "0.500000" || math.Abs(atof(t, last[1])-2*0.0072) > tolNyq || math.Abs(atof(t, last[3])-0.0072) > tolNyq {
			t.Errorf("%s: last CSV line %v", name, last)
		}
	}
	// Bad specs and outputs: exit 2, one line, nothing written.
	for _, args := range [][]string{
		{"psf", "build", "gaussian:sigma=-1", filepath.Join(dir, "bad.txt")},
		{"psf", "build", "motion:length=2*kernel:x.txt", filepath.Join(dir, "bad.txt")},
		{"psf", "build", "diffraction:wavelength=0.6", filepath.Join(dir, "bad.txt")},
		{"psf", "build", "gaussian:sigma=1", filepath.Join(dir, "nodir", "bad.txt")},
		{"psf", "build", "gaussian:sigma=1"},
	} {
		code, _, errs := limpid(t, nil, args...)
		if code != 2 || strings.Count(strings.TrimSpace(errs), "\n") != 0 || !strings.HasPrefix(errs, "limpid: ") {
			t.Errorf("%v: exit %d, stderr %q", args, code, errs)
		}
		if _, err := os.Stat(filepath.Join(dir, "bad.txt")); err == nil {
			t.Errorf("%v: wrote output", args)
		}
	}
}

func atof(t *testing.T, s string) float64 {
	var v float64
	if err := json.Unmarshal([]byte(s), &v); err != nil {
		t.Fatalf("%q: %v", s, err)
	}
	return v
}

// psf measure on the committed demo scene (testdata/valley256: the
// invented Brannock Vale, PSF gaussian:sigma=1.4, calibration tarp edge
// turned 4 degrees). Reference: the generator's known PSF (no outside
// source); the tolerance is the project's 5 % acceptance bar for the scene.
func TestPSFMeasureDemoTarp(t *testing.T) {
	const tolScene = 0.05
	dir := t.TempDir()
	js, kern := filepath.Join(dir, "m.json"), filepath.Join(dir, "m.txt")
	pngPath := filepath.Join(dir, "p.png")
	code, out, errs := limpid(t, nil, "psf", "measure", "--edge", "168,30,200,82", "--json", js, "--csv", filepath.Join(dir, "c"), "--kernel", kern, "--png", pngPath, fixture("observed.tif"))
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var s map[string]any
	b, _ := os.ReadFile(js)
	if err := json.Unmarshal(b, &s); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"sigma", "sigma_x", "sigma_y", "mtf_nyquist", "mtf50", "fwhm", "edge_angle_deg", "edges"} {
		if _, ok := s[k]; !ok {
			t.Errorf("JSON lacks %q", k)
		}
	}
	sigma := s["sigma"].(float64)
	if math.Abs(sigma-1.4) > tolScene*1.4 {
		t.Errorf("sigma %.3f, want 1.4 within 5 %%\n%s", sigma, out)
	}
	// The tarp is turned 4 degrees (step/synth.go); angle to 0.2 degree
	// (common practice, no source).
	const tolAngle = 0.2
	if a := s["edge_angle_deg"].(float64); math.Abs(math.Abs(a)-4) > tolAngle {
		t.Errorf("edge angle %.2f, want 4", a)
	}
	// The kernels are gaussian:sx=sigma point-sampled with 4-sigma support:
	// their standard deviation equals sigma to < 1e-3 relative
	// (TestGaussianVariance's reasoning), well inside tolKernel.
	const tolKernel = 0.01
	for _, spec := range []string{"measured:" + js, "kernel:" + kern} {
		k, err := psf.Parse(spec, psf.Env{})
		if err != nil {
			t.Fatalf("%s: %v", spec, err)
		}
		vx, _ := k.Variance()
		if math.Abs(math.Sqrt(vx)-sigma) > tolKernel {
			t.Errorf("%s: kernel sigma %.3f, measured %.3f", spec, math.Sqrt(vx), sigma)
		}
	}
	for _, f := range []string{"c_edge1_esf.csv", "c_edge1_mtf.csv"} {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Error(err)
		}
	}
	// The plot is a PNG the standard decoder reads (900 x 380 points at
	// gonum/plot's default 96 dpi: 1200 x 507 pixels).
	f, err := os.Open(pngPath)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if cfg, err := png.DecodeConfig(f); err != nil || cfg.Width < 900 || cfg.Height < 380 {
		t.Errorf("plot: %v %+v", err, cfg)
	}
}

// Bad inputs exit 2 with one clear line naming the input: the project's
// error contract (README "Usage": exit 2, one line, no half-written output).
// No outside source.
func TestPSFMeasureBadInputs(t *testing.T) {
	dir := t.TempDir()
	js := filepath.Join(dir, "m.json")
	obs := fixture("observed.tif")
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--edge", "168,30,300,82", obs}, "outside the raster"},
		{[]string{"--edge", "1,2,3", obs}, "give 4"},
		{[]string{"--edge", "200,30,168,82", obs}, "must be larger"},
		{[]string{"--edge", "60,100,92,140", obs}, "--edge 60,100,92,140"}, // fields, no clean edge
		{[]string{"--edge", "172,40,182,70", obs}, "edge in the window"},   // dark tarp half: flat
		{[]string{"--point", "3,3", obs}, "outside the raster"},
		{[]string{"--band", "9", "--edge", "168,30,200,82", obs}, "--band 9"},
		{[]string{obs}, "needs --edge"},
		{[]string{"--edge", "168,30,200,82", filepath.Join(dir, "none.tif")}, "none.tif"},
	} {
		code, _, errs := limpid(t, nil, append([]string{"psf", "measure", "--json", js}, c.args...)...)
		if code != 2 || !strings.Contains(errs, c.want) || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%v: exit %d, stderr %q (want %q)", c.args, code, errs, c.want)
		}
		if _, err := os.Stat(js); err == nil {
			t.Fatalf("%v: wrote %s", c.args, js)
		}
	}
	for _, spec := range []string{"measured:", "measured:" + filepath.Join(dir, "none.json"), "measured:" + obs} {
		if _, err := psf.Parse(spec, psf.Env{}); err == nil {
			t.Errorf("%s accepted", spec)
		}
	}
}

// --auto finds the demo scene's tarp edge and recovers the demo PSF.
// Reference: the generator's known PSF (gaussian:sigma=1.4, cmd/limpid/demo.go)
// and tarp geometry (step/synth.go: centre (0.72 w, 0.22 h), turned 4
// degrees); the tolerance is the project's 5 % acceptance bar.
func TestPSFMeasureAutoFindsTarp(t *testing.T) {
	const tolScene = 0.05
	js := filepath.Join(t.TempDir(), "a.json")
	code, out, errs := limpid(t, nil, "psf", "measure", "--auto", "--json", js, fixture("observed.tif"))
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var s struct {
		Sigma float64 `json:"sigma"`
		Edges []struct {
			Window [4]int  `json:"window"`
			Used   bool    `json:"used"`
			Angle  float64 `json:"edge_angle_deg"`
		} `json:"edges"`
	}
	b, _ := os.ReadFile(js)
	if err := json.Unmarshal(b, &s); err != nil {
		t.Fatal(err)
	}
	if math.Abs(s.Sigma-1.4) > tolScene*1.4 {
		t.Errorf("sigma %.3f, want 1.4 within 5 %%\n%s", s.Sigma, out)
	}
	tarp := false
	const tolAngle = 0.3 // degrees; the tarp is turned 4 (common practice, no source)
	for _, e := range s.Edges {
		// The tarp's dark/bright edge crosses column 0.72*256 = 184 at row
		// 0.22*256 = 56.
		if e.Window[0] < 184 && e.Window[2] > 184 && e.Window[1] < 56 && e.Window[3] > 56 && math.Abs(math.Abs(e.Angle)-4) < tolAngle {
			tarp = true
		}
	}
	if !tarp {
		t.Errorf("the tarp edge is not among the edges found:\n%s", out)
	}
	// A scene without edges: --auto fails with a clear message (the
	// error contract).
	code, _, errs = limpid(t, nil, "psf", "measure", "--auto", flatScene(t, t.TempDir()))
	if code != 2 || !strings.Contains(errs, "no usable edge") {
		t.Errorf("flat scene: exit %d, %q", code, errs)
	}
}

// renderEdge: a unit step across x = x0 + y tan(theta), blurred by a
// Gaussian of sigma s and integrated over each pixel, in closed form (the
// derivation is in psf/measure_test.go).
func renderEdge(w, h int, x0, thetaDeg, s float64) []float64 {
	cdf := func(x float64) float64 { return 0.5 * math.Erfc(-x/math.Sqrt2) }
	pdf := func(x float64) float64 { return math.Exp(-0.5*x*x) / math.Sqrt(2*math.Pi) }
	g2 := func(x float64) float64 { return ((x*x+1)*cdf(x) + x*pdf(x)) / 2 }
	th := thetaDeg * math.Pi / 180
	al, be := math.Cos(th)/s, math.Sin(th)/s
	k := -x0 * math.Cos(th) / s
	out := make([]float64, w*h)
	for y := 0; y < h; y++ {
		v0, v1 := float64(y)-0.5, float64(y)+0.5
		for x := 0; x < w; x++ {
			u0, u1 := float64(x)-0.5, float64(x)+0.5
			out[y*w+x] = (g2(al*u1-be*v0+k) - g2(al*u1-be*v1+k) - g2(al*u0-be*v0+k) + g2(al*u0-be*v1+k)) / (al * be)
		}
	}
	return out
}

// Two edges, near-vertical and near-horizontal, of an anisotropic system
// give sigma_x and sigma_y, by --edge windows and by --auto (invented
// scene: two calibration panels of the fictional Orrin Flats range).
// Reference: the rendered sigmas (no outside source); tolerance the
// project's 3 % acceptance bar for synthetic edges (at SNR 100 here).
func TestPSFMeasureTwoAxes(t *testing.T) {
	const tolSigma = 0.03
	const sx, sy = 0.9, 1.3
	const W, H = 200, 120
	plane := make([]float32, W*H)
	for i := range plane {
		plane[i] = 400
	}
	v := renderEdge(64, 120, 31.5-60*math.Tan(5*math.Pi/180), 5, sx) // 64 x 120, near-vertical
	for y := 0; y < 120; y++ {
		for x := 0; x < 64; x++ {
			plane[y*W+10+x] = float32(400 + 1600*v[y*64+x])
		}
	}
	hz := renderEdge(64, 110, 31.5-55*math.Tan(6*math.Pi/180), 6, sy) // transposed: 110 wide, 64 tall
	for y := 0; y < 64; y++ {
		for x := 0; x < 110; x++ {
			plane[(20+y)*W+85+x] = float32(400 + 1600*hz[x*64+y])
		}
	}
	rng := rand.New(rand.NewPCG(5, 6))
	for i := range plane {
		plane[i] += float32(16 * rng.NormFloat64()) // SNR 100 (step 1600)
	}
	dir := t.TempDir()
	in := filepath.Join(dir, "panels.tif")
	meta := raster.Meta{Width: W, Height: H, DataType: "Float32", Bands: []raster.BandInfo{{Description: "panels"}}}
	if err := gdal.WriteFloat32(in, meta, [][]float32{plane}, gdal.WriteOptions{Format: gdal.GTiff, DataType: "Float32"}); err != nil {
		t.Fatal(err)
	}
	for _, args := range [][]string{{"--edge", "10,0,74,120", "--edge", "85,20,195,84"}, {"--auto"}} {
		js := filepath.Join(dir, "s.json")
		code, out, errs := limpid(t, nil, append(append([]string{"psf", "measure", "--json", js}, args...), in)...)
		if code != 0 {
			t.Fatalf("%v: exit %d %s", args, code, errs)
		}
		var s struct {
			SigmaX, SigmaY *float64
		}
		b, _ := os.ReadFile(js)
		var m map[string]any
		json.Unmarshal(b, &m)
		if x, ok := m["sigma_x"].(float64); ok {
			s.SigmaX = &x
		}
		if y, ok := m["sigma_y"].(float64); ok {
			s.SigmaY = &y
		}
		if s.SigmaX == nil || s.SigmaY == nil || math.Abs(*s.SigmaX-sx) > tolSigma*sx || math.Abs(*s.SigmaY-sy) > tolSigma*sy {
			t.Errorf("%v: sigma_x %v sigma_y %v, want %g %g\n%s", args, m["sigma_x"], m["sigma_y"], sx, sy, out)
		}
	}
}

// restore --psf auto measures the demo PSF from the scene (the tarp edge)
// and records it; a scene without edges fails with one clear line.
// Reference: the generator's PSF gaussian:sigma=1.4 (demo.go; no outside
// source), the project's 5 % acceptance bar.
func TestRestorePSFAuto(t *testing.T) {
	dir := t.TempDir()
	out, rep := filepath.Join(dir, "r.tif"), filepath.Join(dir, "r.json")
	code, _, errs := limpid(t, nil, "restore", "--psf", "auto", "--stop", "change", "--smooth", "0.2", "--iterations", "3", "--report", rep, fixture("observed.tif"), out)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	b, _ := os.ReadFile(rep)
	var r struct {
		Step struct {
			PSF string `json:"psf"`
		} `json:"restoration"`
	}
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	var sx, sy float64
	const tolScene = 0.05 // the project's acceptance bar for the demo scene
	if _, err := fmt.Sscanf(r.Step.PSF, "gaussian:sx=%g,sy=%g", &sx, &sy); err != nil || math.Abs(sx-1.4) > tolScene*1.4 {
		t.Errorf("recorded PSF %q", r.Step.PSF)
	}
	// The library form, psf.MeasureAuto on the same band, gives the same
	// PSF to the digit (the CLI only reads the band and formats).
	src, err := gdal.Open(fixture("observed.tif"))
	if err != nil {
		t.Fatal(err)
	}
	m := src.Meta()
	plane, err := readWindow(src, 0, 0, 0, m.Width, m.Height)
	src.Close()
	if err != nil {
		t.Fatal(err)
	}
	lib, err := psf.MeasureAuto(plane, m.Width, m.Height, psf.AutoOptions{})
	if err != nil {
		t.Fatal(err)
	}
	spec, err := lib.Estimate.Spec()
	want := fmt.Sprintf("%s (auto: %d edges in band 1, %s)", spec, lib.Estimate.NumUsed(), lib.Estimate.SigmaFrom)
	if err != nil || r.Step.PSF != want {
		t.Errorf("recorded PSF %q, psf.MeasureAuto gives %q (%v)", r.Step.PSF, want, err)
	}
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--psf", "auto:band=7", fixture("observed.tif"), filepath.Join(dir, "x.tif")}, "band 7 does not exist"},
		{[]string{"--psf", "auto:foo", fixture("observed.tif"), filepath.Join(dir, "x.tif")}, "auto:band=N"},
		{[]string{"--psf", "auto", "-", filepath.Join(dir, "x.tif")}, "stdin"},
		{[]string{"--psf", "auto", flatScene(t, dir), filepath.Join(dir, "x.tif")}, "no usable edge"},
	} {
		code, _, errs := limpid(t, nil, append([]string{"restore"}, c.args...)...)
		if code != 2 || !strings.Contains(errs, c.want) || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%v: exit %d, %q", c.args, code, errs)
		}
	}
}

// flatScene writes a 96x96 Float32 scene of low-amplitude texture and no
// edge (invented).
func flatScene(t *testing.T, dir string) string {
	flat := filepath.Join(dir, "flat.tif")
	plane := make([]float32, 96*96)
	for i := range plane {
		plane[i] = float32(1000 + 10*math.Sin(float64(i)*0.37))
	}
	meta := raster.Meta{Width: 96, Height: 96, DataType: "Float32", Bands: []raster.BandInfo{{Description: "flat"}}}
	if err := gdal.WriteFloat32(flat, meta, [][]float32{plane}, gdal.WriteOptions{Format: gdal.GTiff, DataType: "Float32"}); err != nil {
		t.Fatal(err)
	}
	return flat
}
