package main

import (
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestSimulateCLI: simulate keeps the georeferencing and band descriptions,
// maps the reference's NaN nodata to the UInt16 maximum, records what it did,
// and a seed reproduces the file byte for byte.
// Source: GDAL's gdalinfo -json (gdal-bin 3.6) on input and output.
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
	if md := mustJSON(got["metadata"]); !strings.Contains(md, "LIMPID_SIMULATED_NOISE") || !strings.Contains(md, "poisson:gain=0.4,read=3") {
		t.Errorf("metadata: %s", md)
	}
	// Nodata pixels of the reference stay nodata.
	_, ref, _ := readAll(fixture("reference.tif"))
	_, obs, _ := readAll(a)
	for i, v := range ref[0] {
		if math.IsNaN(float64(v)) != (obs[0][i] == 65535) {
			t.Fatalf("pixel %d: reference %g, simulated %g", i, v, obs[0][i])
		}
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
// Source: the project's error contract (README, "Usage").
func TestSimulateAssessBadInputs(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "o.tif")
	small := flatScene(t, dir)
	ref := fixture("reference.tif")
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"simulate", "--noise", "none", ref, out}, "--psf is required"},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", ref, out}, "--noise is required"},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "poisson:gain=-1", ref, out}, "--noise"},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "laplace:b=1", ref, out}, "unknown noise model"},
		{[]string{"simulate", "--psf", "bogus", "--noise", "none", ref, out}, "--psf"},
		{[]string{"simulate", "--psf", "auto", "--noise", "none", ref, out}, "auto"},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "none", "--quantize", "Int4", ref, out}, "--quantize"},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "none", filepath.Join(dir, "missing.tif"), out}, "missing.tif"},
		{[]string{"simulate", "--psf", "gaussian:sigma=1", "--noise", "none", ref}, "INPUT and OUTPUT"},
		{[]string{"assess", ref}, "OBSERVED and RESTORED"},
		{[]string{"assess", ref, small}, "must match"},
		{[]string{"assess", "--reference", small, ref, ref}, "must match"},
		{[]string{"assess", "--data-range", "-1", ref, ref}, "--data-range"},
		{[]string{"assess", filepath.Join(dir, "missing.tif"), ref}, "missing.tif"},
	}
	for _, c := range cases {
		code, _, errs := limpid(t, nil, c.args...)
		if code != 2 || !strings.Contains(errs, c.want) || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%v: exit %d, %q", c.args, code, errs)
		}
		if _, err := os.Stat(out); err == nil {
			t.Errorf("%v left %s", c.args, out)
		}
	}
}
