package main

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// Bad particle parameters exit 2 with one line naming the flag and leave
// nothing at OUTPUT or at the --uncertainty path (the project's error
// contract, README "Usage": K <= 0, eps < 0, burn-in >= iterations; the
// grid method writes its noise error map instead, TestGridNoiseMapRaster).
func TestParticleBadParameters(t *testing.T) {
	dir := t.TempDir()
	obs := fixture("observed.tif")
	unc := filepath.Join(dir, "unc.tif")
	p := []string{"--psf", "gaussian:sigma=1", "--method", "particle"}
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"K zero", append(p, "--particles-per-pixel", "0"), "--particles-per-pixel"},
		{"K negative", append(p, "--particles-per-pixel", "-4"), "--particles-per-pixel"},
		{"eps negative", append(p, "--smooth", "-0.5"), "--smooth"},
		{"burn-in equal", append(p, "--iterations", "20", "--burn-in", "20"), "--burn-in 20 must be less than --iterations 20"},
		{"burn-in above", append(p, "--iterations", "20", "--burn-in", "30"), "--burn-in"},
		{"burn-in nonsense", append(p, "--burn-in", "half"), "--burn-in"},
		{"potential", append(p, "--potential", "guess"), "--potential"},
		{"resampling", append(p, "--resampling", "random"), "--resampling"},
		{"ess threshold", append(p, "--ess-threshold", "1.5"), "--ess-threshold"},
		{"start", append(p, "--start", "zero"), "--start"},
		{"batches", append(p, "--iterations", "20", "--burn-in", "15", "--replicates", "1", "--batches", "6"), "--batches"},
		{"replicates", append(p, "--particles-per-pixel", "6", "--replicates", "4"), "--replicates 4 must divide --particles-per-pixel 6"},
		{"stop auto", append(p, "--stop", "auto"), "the particle method runs a fixed number of iterations"},
		{"stop discrepancy", append(p, "--stop", "discrepancy", "--smooth", "0.3"), "the particle method runs a fixed number of iterations"},
		{"uncertainty stdout", append(p, "--uncertainty", "-"), "--uncertainty"},
		{"uncertainty no dir", append(p, "--uncertainty", filepath.Join(dir, "no", "u.tif")), "does not exist"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out := filepath.Join(dir, "out.tif")
			args := append([]string{"restore"}, c.args...)
			args = append(args, obs, out)
			code, stdout, stderr := limpid(t, nil, args...)
			if code != 2 {
				t.Fatalf("exit %d, want 2; stderr: %s", code, stderr)
			}
			if lines := strings.Split(strings.TrimSpace(stderr), "\n"); len(lines) != 1 || !strings.Contains(stderr, c.want) {
				t.Fatalf("stderr should be one line naming %q, got: %s", c.want, stderr)
			}
			if stdout != "" {
				t.Fatalf("stdout not empty")
			}
			for _, f := range []string{out, unc} {
				if _, err := os.Stat(f); err == nil {
					t.Fatalf("%s was written", f)
				}
			}
		})
	}
}

// Source: GDAL's gdalinfo -json (gdal-bin): the uncertainty raster has the
// output's size, geotransform, CRS and bands, in Float32 with NaN nodata;
// --workers 1 and 2 give byte-identical image and uncertainty files
// (DEVELOPERS.md, "Determinism"); the report records the particle
// parameters and per band the means of both parts and of the total, which
// must agree with the raster's own mean (the raster holds the total). The default run restores the centre 128 x 128 of the
// fixture in 2 x 2 tiles with a given bandwidth (--smooth 0.2): the
// automatic one runs grid EMS to 200 iterations on every sample tile first
// (step.TestParticleAutoBandwidth checks that choice). LIMPID_LONG runs the
// whole fixture in 3 x 3 tiles with the automatic bandwidth.
func TestParticleUncertaintyRaster(t *testing.T) {
	dir := t.TempDir()
	in, tile, smooth := cropFixture(t, dir, 128), "64", []string{"--smooth", "0.2"}
	if long() {
		in, tile, smooth = fixture("observed.tif"), "96", nil
	}
	var img, unc [][]byte
	for _, w := range []string{"1", "2"} {
		out, u, rep := filepath.Join(dir, "o"+w+".tif"), filepath.Join(dir, "u"+w+".tif"), filepath.Join(dir, "r"+w+".json")
		argv := append([]string{"restore", "--psf", "gaussian:sigma=1.4", "--method", "particle", "--particles-per-pixel", "2",
			"--iterations", "12", "--batches", "3", "--tile", tile, "--bands", "3,1", "--workers", w, "--uncertainty", u, "--report", rep}, smooth...)
		code, _, stderr := limpid(t, nil, append(argv, in, out)...)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, stderr)
		}
		a, _ := os.ReadFile(out)
		b, _ := os.ReadFile(u)
		img, unc = append(img, a), append(unc, b)
		if w != "1" {
			continue
		}
		checkUncertaintyRaster(t, out, u, rep)
	}
	if !bytes.Equal(img[0], img[1]) || !bytes.Equal(unc[0], unc[1]) {
		t.Fatal("--workers 2 output differs from --workers 1")
	}
}

// checkUncertaintyRaster compares the uncertainty raster u with the image
// out (gdalinfo -json: grid, CRS, bands in Float32 with NaN nodata) and the
// report rep's particle parameters and mean total error with the raster's
// own mean. Source for the parts: independent errors' variances add
// (Bienaymé), so the mean total is at least either part's mean (the total
// is at least each part per pixel).
func checkUncertaintyRaster(t *testing.T, out, u, rep string) {
	t.Helper()
	in, got := gdalinfo(t, out), gdalinfo(t, u)
	for _, key := range []string{"geoTransform", "size", "coordinateSystem"} {
		if mustJSON(in[key]) != mustJSON(got[key]) {
			t.Errorf("%s: image %s, uncertainty %s", key, mustJSON(in[key]), mustJSON(got[key]))
		}
	}
	ib, ub := in["bands"].([]any), got["bands"].([]any)
	if len(ub) != 2 {
		t.Fatalf("uncertainty has %d bands", len(ub))
	}
	if md := mustJSON(got["metadata"]); !strings.Contains(md, "total standard error") {
		t.Errorf("uncertainty metadata does not say it holds the total: %s", md)
	}
	for i := range ub {
		bi, bu := ib[i].(map[string]any), ub[i].(map[string]any)
		if bu["type"] != "Float32" || bu["description"] != bi["description"] || mustJSON(bu["noDataValue"]) != `"NaN"` {
			t.Errorf("band %d: %s", i+1, mustJSON(bu))
		}
		if md := mustJSON(bu["metadata"]); !strings.Contains(md, "LIMPID_MEAN_NOISE_STANDARD_ERROR") || !strings.Contains(md, "LIMPID_MEAN_MONTE_CARLO_STANDARD_ERROR") {
			t.Errorf("band %d: metadata lacks the parts' means: %s", i+1, md)
		}
	}
	var r struct {
		Uncertainty string `json:"uncertainty"`
		Restoration struct {
			Method   string `json:"method"`
			Particle struct {
				PerPixel int `json:"particles_per_pixel"`
				Bands    []struct {
					MeanSE    float64 `json:"mean_standard_error"`
					MeanNoise float64 `json:"mean_noise_se"`
					MeanTotal float64 `json:"mean_total_se"`
				} `json:"bands"`
			} `json:"particle"`
		} `json:"restoration"`
	}
	rb, _ := os.ReadFile(rep)
	if err := json.Unmarshal(rb, &r); err != nil {
		t.Fatal(err)
	}
	if r.Uncertainty != u || r.Restoration.Method != "particle" || r.Restoration.Particle.PerPixel != 2 || len(r.Restoration.Particle.Bands) != 2 {
		t.Fatalf("report: %s", rb)
	}
	_, planes, err := readAll(u)
	if err != nil {
		t.Fatal(err)
	}
	for bi, pl := range planes {
		m := nanMean(pl)
		// The report's mean is over the same valid pixels in float64;
		// the raster holds float32 values (relative rounding 6e-8
		// each): relative 1e-6.
		const meanTol = 1e-6
		pb := r.Restoration.Particle.Bands[bi]
		if math.Abs(m-pb.MeanTotal) > meanTol*m || !(m > 0) {
			t.Errorf("band %d: raster mean %g, report's mean total %g", bi+1, m, pb.MeanTotal)
		}
		if !(pb.MeanNoise > 0 && pb.MeanSE > 0) || pb.MeanTotal < pb.MeanNoise || pb.MeanTotal < pb.MeanSE {
			t.Errorf("band %d: means noise %g, Monte Carlo %g, total %g", bi+1, pb.MeanNoise, pb.MeanSE, pb.MeanTotal)
		}
	}
}

// The grid method's --uncertainty is the noise error map (step's
// TestNoiseMapMatchesMonteCarlo checks its values against a Monte Carlo):
// here the product side. Source: GDAL's gdalinfo -json (gdal-bin 3.6) as
// the outside reader: the map has the image's grid and CRS, Float32 bands
// with NaN nodata, the noise-map label, and a mean equal to the report's
// mean_noise_se per band (relative 1e-6: float32 values summed in
// float64, as in checkUncertaintyRaster).
func TestGridNoiseMapRaster(t *testing.T) {
	const meanTol = 1e-6
	dir := t.TempDir()
	in := cropFixture(t, dir, 128)
	out, u, rep := filepath.Join(dir, "o.tif"), filepath.Join(dir, "u.tif"), filepath.Join(dir, "r.json")
	code, _, stderr := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", "--smooth", "0.3", "--stop", "change", "--iterations", "15",
		"--tile", "64", "--bands", "3,1", "--uncertainty", u, "--report", rep, in, out)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	info, got := gdalinfo(t, out), gdalinfo(t, u)
	for _, key := range []string{"geoTransform", "size", "coordinateSystem"} {
		if mustJSON(info[key]) != mustJSON(got[key]) {
			t.Errorf("%s: image %s, noise map %s", key, mustJSON(info[key]), mustJSON(got[key]))
		}
	}
	if md := mustJSON(got["metadata"]); !strings.Contains(md, "noise standard error") {
		t.Errorf("noise map metadata lacks its label: %s", md)
	}
	var r struct {
		Restoration struct {
			Method string `json:"method"`
			Bands  []struct {
				NoiseSE float64 `json:"mean_noise_se"`
			} `json:"bands"`
		} `json:"restoration"`
	}
	rb, _ := os.ReadFile(rep)
	if err := json.Unmarshal(rb, &r); err != nil {
		t.Fatal(err)
	}
	_, planes, err := readAll(u)
	if err != nil {
		t.Fatal(err)
	}
	if r.Restoration.Method != "grid" || len(r.Restoration.Bands) != 2 || len(planes) != 2 {
		t.Fatalf("report: %s", rb)
	}
	for bi, pl := range planes {
		m := nanMean(pl)
		if math.Abs(m-r.Restoration.Bands[bi].NoiseSE) > meanTol*m || !(m > 0) {
			t.Errorf("band %d: map mean %g DN, report %g", bi+1, m, r.Restoration.Bands[bi].NoiseSE)
		}
	}
}

// nanMean is the mean of the plane's non-NaN values (float64 sums).
func nanMean(pl []float32) float64 {
	var s float64
	var nv int
	for _, v := range pl {
		if !math.IsNaN(float64(v)) {
			s += float64(v)
			nv++
		}
	}
	return s / float64(nv)
}
