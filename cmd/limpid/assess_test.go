package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step/simulate"
)

// TestSimulateCLI: simulate keeps the georeferencing and band descriptions,
// maps the reference's NaN nodata to the UInt16 maximum, records what it did
// in metadata that describes its pixels, and the same --seed reproduces the
// file byte for byte.
// Source: GDAL's gdalinfo -json (gdal-bin 3.6) on input and output; the
// noise model definitions (DN = G Poisson(s/G) + N(0, R^2), variance
// G s + R^2, plus 1/12 for rounding to integers: Sheppard, Proc. London
// Math. Soc. 29:353, 1898), checked on the residual against a naive
// float64 convolution of the reference by the recorded PSF.
func TestSimulateCLI(t *testing.T) {
	dir := t.TempDir()
	a, b := filepath.Join(dir, "a.tif"), filepath.Join(dir, "b.tif")
	for _, out := range []string{a, b} {
		code, _, errs := limpid(t, nil, "simulate", "--psf", "gaussian:sigma=1.4", "--noise", "poisson:gain=0.4,read=3",
			"--quantize", "UInt16", "--seed", "9", fixture("reference.tif"), out)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
	}
	if string(mustRead(t, a)) != string(mustRead(t, b)) {
		t.Error("the same seed gave different files")
	}
	in, got := gdalinfo(t, fixture("reference.tif")), gdalinfo(t, a)
	for _, key := range []string{"geoTransform", "size", "coordinateSystem"} {
		if mustJSON(in[key]) != mustJSON(got[key]) {
			t.Errorf("%s: input %s, output %s", key, mustJSON(in[key]), mustJSON(got[key]))
		}
	}
	ib, ob := in["bands"].([]any), got["bands"].([]any)
	for i := range ib {
		x, y := ib[i].(map[string]any), ob[i].(map[string]any)
		if x["description"] != y["description"] || y["type"] != "UInt16" || y["noDataValue"] != 65535.0 {
			t.Errorf("band %d: input %v/%v, output %v/%v/%v", i+1, x["description"], x["noDataValue"], y["description"], y["type"], y["noDataValue"])
		}
	}
	// Nodata pixels of the reference stay nodata.
	_, ref, _ := readAll(fixture("reference.tif"))
	_, obs, _ := readAll(a)
	for i, v := range ref[0] {
		if math.IsNaN(float64(v)) != (obs[0][i] == 65535) {
			t.Fatalf("pixel %d: reference %g, simulated %g", i, v, obs[0][i])
		}
	}
	// The metadata's PSF and noise model are those of the pixels.
	md, _ := got["metadata"].(map[string]any)[""].(map[string]any)
	spec, _ := md["LIMPID_SIMULATED_PSF"].(string)
	k, err := psf.Parse(spec, psf.Env{})
	if err != nil {
		t.Fatalf("LIMPID_SIMULATED_PSF %q: %v", spec, err)
	}
	nspec, _ := md["LIMPID_SIMULATED_NOISE"].(string)
	nz, err := simulate.ParseNoise(nspec)
	if err != nil || nz.Kind != simulate.NoisePoisson {
		t.Fatalf("LIMPID_SIMULATED_NOISE %q: %+v, %v", nspec, nz, err)
	}
	w, h := int(got["size"].([]any)[0].(float64)), int(got["size"].([]any)[1].(float64))
	checkSimulatedNoise(t, ref[2], obs[2], w, h, k, nz.Gain, nz.Read)
}

// checkSimulatedNoise checks that sim is ref blurred by k plus
// Poisson-Gaussian noise of the given gain and read noise, rounded to
// integers: the residual r = sim - H ref (H evaluated naively in float64
// with half-sample symmetric extension, on pixels whose PSF support is all
// valid) has mean 0 and variance v = gain H ref + read^2 + 1/12 per pixel.
// Tolerance: nSE empirical standard errors of the means of r / sqrt(v) and
// r^2 / v over the pixels (independent noise); a normal deviate beyond 5
// has probability 6e-7. Power, measured on the fixture's red band: a gain
// 5 % off moves the variance ratio by 4-5 % (7-9 standard errors), a PSF
// sigma 5 % off moves the mean by 5 or the ratio by 16 standard errors.
func checkSimulatedNoise(t *testing.T, ref, sim []float32, w, h int, k *psf.Kernel, gain, read float64) {
	t.Helper()
	const nSE = 5
	var z1, z2, z1s, z2s float64
	n := 0
	for y := 0; y < h; y++ {
	pixels:
		for x := 0; x < w; x++ {
			var s float64
			for dy := -k.Ry(); dy <= k.Ry(); dy++ {
				for dx := -k.Rx(); dx <= k.Rx(); dx++ {
					v := float64(ref[raster.Mirror(y-dy, h)*w+raster.Mirror(x-dx, w)])
					if math.IsNaN(v) {
						continue pixels
					}
					s += k.At(dx, dy) * v
				}
			}
			r := float64(sim[y*w+x]) - s
			v := gain*s + read*read + 1.0/12
			a, b := r/math.Sqrt(v), r*r/v
			z1, z2, z1s, z2s = z1+a, z2+b, z1s+a*a, z2s+b*b
			n++
		}
	}
	if n < 10000 {
		t.Fatalf("only %d pixels with a valid PSF support", n)
	}
	fn := float64(n)
	m1, m2 := z1/fn, z2/fn
	se1, se2 := math.Sqrt((z1s/fn-m1*m1)/fn), math.Sqrt((z2s/fn-m2*m2)/fn)
	if math.Abs(m1) > nSE*se1 || math.Abs(m2-1) > nSE*se2 {
		t.Errorf("residual of the simulated band: mean %.4f (+- %.4f, want 0), variance ratio %.4f (+- %.4f, want 1) over %d pixels",
			m1, se1, m2, se2, n)
	}
}

// TestAssessCLI: assess on pairs with known answers, and its JSON keys.
// Source: the metric definitions (identical images: RMSE 0, SSIM 1, flux
// change 0, sharpness gain 1; Wang et al. 2004 for SSIM).
func TestAssessCLI(t *testing.T) {
	dir := t.TempDir()
	js := filepath.Join(dir, "a.json")
	obs := fixture("observed.tif")
	code, out, errs := limpid(t, nil, "assess", "--reference", obs, "--json", js, obs, obs)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var rep struct{ Bands []map[string]any }
	if err := json.Unmarshal(mustRead(t, js), &rep); err != nil {
		t.Fatal(err)
	}
	if len(rep.Bands) != 4 || !strings.Contains(out, "inf") {
		t.Fatalf("%d bands; stdout:\n%s", len(rep.Bands), out)
	}
	for _, b := range rep.Bands {
		// UInt16 reference: L is the type's range (the documented rule).
		if b["ssim"] != 1.0 || b["rmse"] != 0.0 || b["psnr"] != nil || b["flux_change"] != 0.0 || b["data_range"] != 65535.0 {
			t.Errorf("identical: %v", b)
		}
		if g, ok := b["sharpness_gain"].(float64); ok && g != 1 {
			t.Errorf("identical: sharpness gain %v", g)
		}
		for _, k := range []string{"band", "noise_observed", "noise_restored", "mae", "bias", "edges", "ringing_observed"} {
			if _, ok := b[k]; !ok {
				t.Errorf("key %s missing", k)
			}
		}
		// Side by side: both images are the reference, so both
		// comparisons are perfect and the gain is 0 (PSNR: not
		// measurable, null).
		for _, k := range []string{"observed_vs_reference", "restored_vs_reference"} {
			m, _ := b[k].(map[string]any)
			if m == nil || m["ssim"] != 1.0 || m["rmse"] != 0.0 || m["mae"] != 0.0 || m["bias"] != 0.0 || m["psnr"] != nil {
				t.Errorf("identical: %s = %v", k, b[k])
			}
		}
		if g, _ := b["gain"].(map[string]any); g == nil || g["ssim"] != 0.0 || g["rmse"] != 0.0 || g["psnr"] != nil {
			t.Errorf("identical: gain = %v", b["gain"])
		}
	}
	// The table: the per-band table, a blank line, then per band the rows
	// observed, restored and gain against the reference.
	if tables := strings.Split(strings.TrimSpace(out), "\n\n"); len(tables) != 2 ||
		strings.Count(tables[1], "\n") != 3*4 || !strings.Contains(tables[1], "\n3    restored") ||
		!strings.Contains(tables[1], "\n4    gain") || strings.Contains(tables[0], "PSNR") {
		t.Errorf("stdout:\n%s", out)
	}
	// No reference: no reference keys.
	code, _, errs = limpid(t, nil, "assess", "--json", js, obs, obs)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	rep.Bands = nil
	if err := json.Unmarshal(mustRead(t, js), &rep); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"psnr", "ssim", "rmse", "mae", "bias", "data_range", "observed_vs_reference", "restored_vs_reference", "gain"} {
		if _, ok := rep.Bands[0][k]; ok {
			t.Errorf("without --reference the key %s is present", k)
		}
	}
}

// TestSimulateAssessBadInputs: one clear line, exit 2, nothing at OUTPUT.
// The expected text names the input or flag at fault and the rule it
// breaks (not only the argument given). The project's error contract
// (README, "Exit codes"), no outside source.
func TestSimulateAssessBadInputs(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "o.tif")
	small := flatScene(t, dir)
	ref := fixture("reference.tif")
	// One band on the fixtures' 256 x 256 grid (they have 4).
	oneBand := filepath.Join(dir, "one.tif")
	if err := gdal.WriteFloat32(oneBand, raster.Meta{Width: 256, Height: 256, DataType: "Float32", Bands: []raster.BandInfo{{Description: "one"}}},
		[][]float32{make([]float32, 256*256)}, gdal.WriteOptions{Format: gdal.GTiff, DataType: "Float32"}); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		args []string
		want []string
	}{
		{[]string{"simulate", "--noise", "none", ref, out}, []string{"--psf is required"}},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", ref, out}, []string{"--noise is required"}},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "poisson:gain=-1", ref, out}, []string{"--noise", "between 0 and"}},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "laplace:b=1", ref, out}, []string{"unknown noise model", "use poisson:"}},
		{[]string{"simulate", "--psf", "bogus", "--noise", "none", ref, out}, []string{"--psf", "expected NAME:PARAMETERS"}},
		{[]string{"simulate", "--psf", "auto", "--noise", "none", ref, out}, []string{"--psf", "simulate needs a PSF model or kernel"}},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "none", "--quantize", "Int4", ref, out}, []string{"--quantize", "use same, Byte"}},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "none", filepath.Join(dir, "missing.tif"), out}, []string{"missing.tif", "no such file"}},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "none", ref}, []string{"INPUT and OUTPUT"}},
		{[]string{"assess", ref}, []string{"OBSERVED and RESTORED"}},
		{[]string{"assess", ref, small}, []string{"must match"}},
		{[]string{"assess", "--reference", small, ref, ref}, []string{"must match"}},
		{[]string{"assess", "--reference", oneBand, ref, ref}, []string{"--reference", "with 1 band;", "with 4 bands", "must match"}},
		{[]string{"assess", "--reference", ref, ref, oneBand}, []string{"RESTORED", "with 1 band;", "must match"}},
		{[]string{"assess", "--reference", filepath.Join(dir, "missing.tif"), ref, ref}, []string{"--reference", "no such file"}},
		{[]string{"assess", "--data-range", "-1", ref, ref}, []string{"--data-range", "must be a positive number"}},
		{[]string{"assess", filepath.Join(dir, "missing.tif"), ref}, []string{"OBSERVED", "no such file"}},
	}
	for _, c := range cases {
		code, _, errs := limpid(t, nil, c.args...)
		if code != 2 || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%v: exit %d, %q", c.args, code, errs)
		}
		for _, w := range c.want {
			if !strings.Contains(errs, w) {
				t.Errorf("%v: %q does not say %q", c.args, errs, w)
			}
		}
		if _, err := os.Stat(out); err == nil {
			t.Errorf("%v left %s", c.args, out)
		}
	}
}

// TestAssessSideBySideFiles: assess --reference on GeoTIFFs with three
// different nodata encodings (the observed fixture's 0, the reference's NaN,
// and a Float32 RESTORED with nodata -9999 and a hole of its own): OBSERVED
// and RESTORED are compared with the reference over the same pixels, and
// each figure is what scikit-image gives on the pixels GDAL reports valid in
// all three files.
// Source: scikit-image 0.19.3 (Debian python3-skimage) and GDAL 3.6's
// Python bindings (python3-gdal), through testdata/ref/assess_files_skimage.py
// run with /usr/bin/python3 (PSNR = 10 log10(L^2 / MSE); SSIM of Wang,
// Bovik, Sheikh & Simoncelli, IEEE TIP 13(4):600, 2004).
func TestAssessSideBySideFiles(t *testing.T) {
	const python = "/usr/bin/python3"
	script := filepath.Join("..", "..", "testdata", "ref", "assess_files_skimage.py")
	if err := exec.Command(python, "-c", "import skimage, osgeo.gdal, scipy").Run(); err != nil {
		msg := fmt.Sprintf("SKIPPED: the outside reference for assess's side-by-side figures needs %s with Debian's python3-skimage and python3-gdal (apt-get install python3-skimage python3-gdal): %v", python, err)
		fmt.Fprintln(os.Stderr, "limpid tests: "+msg)
		t.Skip(msg)
	}
	dir := t.TempDir()
	obs, ref := fixture("observed.tif"), fixture("reference.tif")
	m, op, err := readAll(obs)
	if err != nil {
		t.Fatal(err)
	}
	_, rp, err := readAll(ref)
	if err != nil {
		t.Fatal(err)
	}
	// RESTORED stand-in: halfway between observed and reference where both
	// are finite, a 40 x 60 hole of nodata, and the observed nodata pixels
	// left valid (5 DN) so that only the other inputs exclude them.
	const nodata = -9999
	res := make([][]float32, len(op))
	for b := range op {
		res[b] = make([]float32, len(op[b]))
		for i, v := range op[b] {
			x, y := i%m.Width, i/m.Width
			switch r := rp[b][i]; {
			case y >= 100 && y < 140 && x >= 30 && x < 90:
				res[b][i] = nodata
			case v == 0 || math.IsNaN(float64(r)):
				res[b][i] = 5
			default:
				res[b][i] = (v + r) / 2
			}
		}
	}
	rm := m
	rm.DataType = "Float32"
	rm.Bands = append([]raster.BandInfo(nil), m.Bands...)
	for b := range rm.Bands {
		rm.Bands[b].NoData, rm.Bands[b].HasNoData = nodata, true
	}
	resPath := filepath.Join(dir, "restored.tif")
	if err := gdal.WriteFloat32(resPath, rm, res, gdal.WriteOptions{Format: gdal.GTiff, DataType: "Float32", NoData: nodata, HasNoData: true}); err != nil {
		t.Fatal(err)
	}
	js := filepath.Join(dir, "a.json")
	if code, _, errs := limpid(t, nil, "assess", "--reference", ref, "--data-range", "4095", "--json", js, obs, resPath); code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var got struct{ Bands []map[string]any }
	if err := json.Unmarshal(mustRead(t, js), &got); err != nil {
		t.Fatal(err)
	}
	py, err := exec.Command(python, script, ref, obs, resPath, "4095").Output()
	if err != nil {
		t.Fatalf("%s: %v", script, err)
	}
	type fid struct{ PSNR, SSIM, RMSE, MAE, Bias float64 }
	var want struct {
		Bands []struct {
			ValidPixels        int `json:"valid_pixels"`
			Observed, Restored fid
		}
	}
	if err := json.Unmarshal(py, &want); err != nil {
		t.Fatalf("%s: %v: %s", script, err, py)
	}
	if len(got.Bands) != len(want.Bands) || len(got.Bands) != 4 {
		t.Fatalf("%d bands, scikit-image %d", len(got.Bands), len(want.Bands))
	}
	// Tolerance: both sides compute in float64 from the same float32
	// pixels and differ only in summation order over ~60,000 pixels
	// (relative rounding ~1e-12 measured); 1e-9 relative leaves room.
	const relTol = 1e-9
	num := func(m map[string]any, k string) float64 {
		v, ok := m[k].(float64)
		if !ok {
			t.Fatalf("assess JSON: %q is %v, not a number", k, m[k])
		}
		return v
	}
	for b, w := range want.Bands {
		g := got.Bands[b]
		if int(num(g, "valid_pixels")) != w.ValidPixels || w.ValidPixels == 0 {
			t.Errorf("band %d: %v valid pixels, GDAL/numpy %d", b+1, g["valid_pixels"], w.ValidPixels)
		}
		o, _ := g["observed_vs_reference"].(map[string]any)
		r, _ := g["restored_vs_reference"].(map[string]any)
		gain, _ := g["gain"].(map[string]any)
		if o == nil || r == nil || gain == nil {
			t.Fatalf("band %d: side-by-side keys missing: %v", b+1, g)
		}
		for _, c := range []struct {
			key    string
			wo, wr float64
		}{
			{"psnr", w.Observed.PSNR, w.Restored.PSNR}, {"ssim", w.Observed.SSIM, w.Restored.SSIM},
			{"rmse", w.Observed.RMSE, w.Restored.RMSE}, {"mae", w.Observed.MAE, w.Restored.MAE},
			{"bias", w.Observed.Bias, w.Restored.Bias},
		} {
			near := func(x, y float64) bool { return math.Abs(x-y) <= relTol*math.Max(1, math.Abs(y)) }
			if !near(num(o, c.key), c.wo) || !near(num(r, c.key), c.wr) || !near(num(gain, c.key), c.wr-c.wo) {
				t.Errorf("band %d %s: observed %v, restored %v, gain %v; scikit-image %v, %v, %v",
					b+1, c.key, o[c.key], r[c.key], gain[c.key], c.wo, c.wr, c.wr-c.wo)
			}
			// The flat keys keep their meaning: RESTORED's figures.
			if g[c.key] != r[c.key] {
				t.Errorf("band %d: %s = %v, restored_vs_reference has %v", b+1, c.key, g[c.key], r[c.key])
			}
		}
		// Halfway to the reference halves every difference, so the PSNR
		// gain is 20 log10(2) = 6.02 dB (derived). Tolerance: the halfway
		// values are rounded to float32 (relative 6e-8 of ~1000 DN, against
		// differences of ~100 DN RMS), far below 0.01 dB.
		const halfwayTol = 0.01
		if math.Abs(num(gain, "psnr")-20*math.Log10(2)) > halfwayTol {
			t.Errorf("band %d: PSNR gain %v, want 6.02 dB for a halfway image", b+1, gain["psnr"])
		}
	}
}
