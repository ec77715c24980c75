package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"limpid/psf"
	"limpid/raster"
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
	for _, k := range []string{"psnr", "ssim", "rmse", "mae", "bias", "data_range"} {
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
