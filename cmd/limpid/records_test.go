package main

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step"
	"limpid/step/settings"
)

// readRecord reads a product's pixels and its LIMPID_* metadata back through
// the GDAL adapter.
func readRecord(t *testing.T, path string) (raster.Meta, [][]float32) {
	t.Helper()
	m, pix, err := readAll(path)
	if err != nil {
		t.Fatalf("reading %s: %v", path, err)
	}
	return m, pix
}

func bandSettings(t *testing.T, b raster.BandInfo) settings.Band {
	t.Helper()
	var a settings.Band
	if err := json.Unmarshal([]byte(b.Metadata["LIMPID_BAND_PARAMETERS"]), &a); err != nil {
		t.Fatalf("LIMPID_BAND_PARAMETERS %q: %v", b.Metadata["LIMPID_BAND_PARAMETERS"], err)
	}
	return a
}

// fmtG formats a recorded number so that it parses back to the same float64.
func fmtG(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// psfSpecFromRecord is the --psf a product's LIMPID_PSF_USED asks for: the
// Gaussian model's sigmas (and angle) when it records one, else its spec.
func psfSpecFromRecord(r psf.Record) string {
	if r.Model != "gaussian" {
		return r.Spec
	}
	s := "gaussian:sx=" + fmtG(*r.SigmaX) + ",sy=" + fmtG(*r.SigmaY)
	if r.AngleDeg != nil {
		s += ",angle=" + fmtG(*r.AngleDeg)
	}
	return s
}

// stopFlags are the restore flags that apply a recorded stop rule.
func stopFlags(a settings.Band) []string {
	switch a.Stop {
	case settings.StopFixed:
		return []string{"--stop", "change", "--tolerance", "0", "--iterations", strconv.Itoa(a.Iterations)}
	case settings.StopChange:
		return []string{"--stop", "change", "--tolerance", fmtG(a.Tolerance), "--iterations", strconv.Itoa(a.Iterations)}
	}
	return []string{"--stop", a.Stop, "--iterations", strconv.Itoa(a.Iterations)}
}

// A product is reproducible from its metadata alone (issue 16): restore with
// the automatic choice (the bands get different bandwidths and counts),
// read the metadata back through the GDAL adapter, re-run every band with
// the recorded fixed bandwidth, stop and count, the recorded PSF, tiling
// and background: the band's pixels are identical, value for value. (The
// files are not byte-identical: their metadata says "given" where the first
// says "auto".) Each band's record states its own bandwidth; the dataset's
// LIMPID_PARAMETERS states none for the scene, lists the same per-band
// values, and its PSF hash is the hash of the kernel the recorded
// specification builds.
func TestRecordsReproduceTheProduct(t *testing.T) {
	dir := t.TempDir()
	in := fixture("observed.tif")
	auto := filepath.Join(dir, "auto.tif")
	// sigma 0.8 on this fixture: both bands get 0.3, band 1 stops at 4 iterations and band 4 at 6 (measured).
	mustRun(t, nil, "restore", "--psf", "gaussian:sigma=0.8", "--tile", "128", "--bands", "1,4", "--workers", "2", in, auto)
	m, pix := readRecord(t, auto)

	var params struct {
		Smooth  *float64        `json:"smooth"`
		Tile    int             `json:"tile"`
		Overlap int             `json:"overlap"`
		Bands   []settings.Band `json:"bands"`
		PSFUsed psf.Record      `json:"psf_used"`
		Stop    step.Stop       `json:"stop"`
	}
	if err := json.Unmarshal([]byte(m.Metadata["LIMPID_PARAMETERS"]), &params); err != nil {
		t.Fatalf("LIMPID_PARAMETERS: %v", err)
	}
	if params.Smooth != nil {
		t.Errorf("LIMPID_PARAMETERS states one smoothing %g for bands that were chosen per band", *params.Smooth)
	}
	var used psf.Record
	if err := json.Unmarshal([]byte(m.Metadata["LIMPID_PSF_USED"]), &used); err != nil {
		t.Fatalf("LIMPID_PSF_USED: %v", err)
	}
	spec := psfSpecFromRecord(used)
	k, err := psf.Parse(spec, psf.Env{})
	if err != nil {
		t.Fatalf("recorded PSF %q: %v", spec, err)
	}
	if h := psf.WeightsSHA256(k); fmt.Sprintf("%x", h) != used.SHA256 || used.SHA256 != m.Metadata["LIMPID_PSF_SHA256"] || params.PSFUsed.SHA256 != used.SHA256 {
		t.Fatalf("recorded spec %s builds weights %x; the product records %s", spec, h, used.SHA256)
	}

	var smooths []float64
	var counts []int
	for i, b := range m.Bands {
		a := bandSettings(t, b)
		if i >= len(params.Bands) || mustJSON(params.Bands[i]) != mustJSON(a) {
			t.Errorf("band %d: LIMPID_BAND_PARAMETERS %+v, LIMPID_PARAMETERS bands %+v", i+1, a, params.Bands)
		}
		if a.SmoothFrom != settings.Auto || a.IterationsFrom != settings.Auto || a.Stop != settings.StopFixed {
			t.Errorf("band %d: %+v, want an automatic bandwidth and count applied as a fixed count", i+1, a)
		}
		if b.Metadata["LIMPID_SMOOTH"] != fmtG(a.Smooth) || b.Metadata["LIMPID_SMOOTH_CHOSEN"] != fmtG(a.Smooth) {
			t.Errorf("band %d: LIMPID_SMOOTH %q, LIMPID_SMOOTH_CHOSEN %q, applied %g", i+1, b.Metadata["LIMPID_SMOOTH"], b.Metadata["LIMPID_SMOOTH_CHOSEN"], a.Smooth)
		}
		smooths = append(smooths, a.Smooth)
		counts = append(counts, a.Iterations)

		fixed := filepath.Join(dir, fmt.Sprintf("fixed%d.tif", i+1))
		run := []string{"restore", "--psf", spec, "--bands", b.Metadata["LIMPID_SOURCE_BAND"], "--smooth", fmtG(a.Smooth),
			"--tile", strconv.Itoa(params.Tile), "--overlap", strconv.Itoa(params.Overlap), "--background", b.Metadata["LIMPID_BACKGROUND"], "--workers", "1"}
		run = append(run, stopFlags(a)...)
		mustRun(t, nil, append(run, in, fixed)...)
		fm, fp := readRecord(t, fixed)
		if got := bandSettings(t, fm.Bands[0]); got.Smooth != a.Smooth || got.Stop != a.Stop || got.Iterations != a.Iterations {
			t.Errorf("band %d: the re-run records %+v, the product %+v", i+1, got, a)
		}
		diff := 0
		for p := range pix[i] {
			if pix[i][p] != fp[0][p] {
				diff++
			}
		}
		if diff > 0 {
			t.Errorf("band %d: re-run with the recorded settings (%s) differs in %d of %d pixels", i+1, strings.Join(run[1:], " "), diff, len(pix[i]))
		}
	}
	if len(smooths) != 2 || (smooths[0] == smooths[1] && counts[0] == counts[1]) {
		t.Errorf("bandwidths %v, iterations %v: the fixture's bands should get different settings (the per-band record is then visible)", smooths, counts)
	}
}

// The particle method runs a fixed number of iterations: its records say
// so (stop "fixed", the count and the burn-in), and every tile ran that
// count.
func TestParticleRecordsFixedStop(t *testing.T) {
	dir := t.TempDir()
	out, rep := filepath.Join(dir, "p.tif"), filepath.Join(dir, "p.json")
	mustRun(t, nil, "restore", "--method", "particle", "--psf", "gaussian:sigma=1.4", "--smooth", "0.3", "--iterations", "6",
		"--particles-per-pixel", "2", "--bands", "2", "--tile", "128", "--workers", "2", "--report", rep, fixture("observed.tif"), out)
	var full struct {
		Step step.Report `json:"restoration"`
	}
	b, _ := os.ReadFile(rep)
	if err := json.Unmarshal(b, &full); err != nil {
		t.Fatal(err)
	}
	r := full.Step
	if r.Stop != step.StopFixed || len(r.Bands) != 1 || r.Bands[0].Applied == nil {
		t.Fatalf("report: stop %q, bands %+v", r.Stop, r.Bands)
	}
	a := r.Bands[0].Applied
	if a.Stop != settings.StopFixed || a.Iterations != 6 || a.BurnIn == nil || *a.BurnIn != 3 || a.Smooth != 0.3 {
		t.Errorf("applied %+v, want fixed 6 iterations, burn-in 3, smooth 0.3", a)
	}
	for _, tl := range r.Bands[0].Tiles {
		if tl.Iterations != 6 {
			t.Errorf("tile (%d,%d) ran %d iterations, the record says 6", tl.Col, tl.Row, tl.Iterations)
		}
	}
	m, _ := readRecord(t, out)
	var params map[string]any
	json.Unmarshal([]byte(m.Metadata["LIMPID_PARAMETERS"]), &params)
	if params["stop"] != "fixed" || m.Bands[0].Metadata["LIMPID_STOP"] != "fixed 6 iterations, burn-in 3 (given)" {
		t.Errorf("metadata: stop %v, LIMPID_STOP %q", params["stop"], m.Bands[0].Metadata["LIMPID_STOP"])
	}
}

// A kernel file's product records the kernel size and the SHA-256 of the
// weights as used (checked against an independent computation in
// psf.TestDescribeKernelFile), here through the metadata.
func TestKernelFileRecord(t *testing.T) {
	dir := t.TempDir()
	kern := filepath.Join(dir, "k.txt")
	if err := os.WriteFile(kern, []byte("1 2 1\n2 4 2\n1 2 1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(dir, "k.tif")
	mustRun(t, nil, "restore", "--psf", "kernel:"+kern, "--smooth", "0.2", "--stop", "change", "--iterations", "2", "--bands", "1", "--tile", "128", fixture("observed.tif"), out)
	m, _ := readRecord(t, out)
	var used psf.Record
	if err := json.Unmarshal([]byte(m.Metadata["LIMPID_PSF_USED"]), &used); err != nil {
		t.Fatal(err)
	}
	k, _ := psf.Parse("kernel:"+kern, psf.Env{})
	if used.Width != 3 || used.Height != 3 || used.Model != "" || used.SHA256 != fmt.Sprintf("%x", psf.WeightsSHA256(k)) {
		t.Errorf("LIMPID_PSF_USED %+v", used)
	}
	// Source: the binomial kernel [1 2 1]/4 has variance 1/2 per axis
	// (binomial distribution n=2, p=1/2: n p (1-p)); exact in float64 up
	// to rounding, hence momentTol.
	const momentTol = 1e-12
	if d := used.MomentSigmaX*used.MomentSigmaX - 0.5; d > momentTol || d < -momentTol {
		t.Errorf("moment sigma_x %g, want sqrt(1/2)", used.MomentSigmaX)
	}
}

// The HTML job table states each band's bandwidth when they were chosen,
// and the fixed stop of the particle method.
func TestRecordRows(t *testing.T) {
	rep := &step.Report{SmoothRule: "auto", Stop: step.StopAuto, Iterations: 200, Bands: []step.BandReport{
		{Band: 1, Applied: &settings.Band{Smooth: 0.5, SmoothFrom: "auto", Stop: "fixed", Iterations: 12, IterationsFrom: "auto"}},
		{Band: 2, Applied: &settings.Band{Smooth: 0.3, SmoothFrom: "auto", Stop: "fixed", Iterations: 7, IterationsFrom: "auto"}},
	}}
	rows := recordRows(rep)
	all := fmt.Sprint(rows)
	for _, want := range []string{"band 1: 0.5", "band 2: 0.3", "band 1: fixed 12 iterations (auto)", "band 2: fixed 7 iterations (auto)"} {
		if !strings.Contains(all, want) {
			t.Errorf("rows %v lack %q", rows, want)
		}
	}
	if strings.Contains(all, "0.2") {
		t.Errorf("rows %v state a bandwidth no band used", rows)
	}
	if got := bandSettingsText(rep.Bands[0]); got != "smooth 0.5 (auto); fixed 12 iterations (auto)" {
		t.Errorf("band cell %q", got)
	}
}
