package main

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the committed fixtures under testdata/")

const fixtureDir = "../../testdata/valley256"

// TestFixtures keeps the committed 256x256 demo scene in step with the
// generator; `go test ./cmd/limpid -run TestFixtures -update` rewrites it.
func TestFixtures(t *testing.T) {
	if *update {
		if err := os.MkdirAll(fixtureDir, 0o755); err != nil {
			t.Fatal(err)
		}
		if _, _, err := DemoScene(fixtureDir, 256); err != nil {
			t.Fatal(err)
		}
	}
	dir := t.TempDir()
	_, obs, err := DemoScene(dir, 256)
	if err != nil {
		t.Fatal(err)
	}
	_, a, err := readAll(obs)
	if err != nil {
		t.Fatal(err)
	}
	_, b, err := readAll(filepath.Join(fixtureDir, "observed.tif"))
	if err != nil {
		t.Fatal(err)
	}
	for i := range a {
		for j := range a[i] {
			if a[i][j] != b[i][j] {
				t.Fatalf("committed fixture differs from the generator at band %d pixel %d: run with -update", i+1, j)
			}
		}
	}
}

func limpid(t *testing.T, stdin []byte, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var o, e bytes.Buffer
	code = run(context.Background(), append([]string{"limpid"}, args...), bytes.NewReader(stdin), &o, &e)
	return code, o.String(), e.String()
}

func fixture(name string) string { return filepath.Join(fixtureDir, name) }

// gdalinfo runs GDAL's own gdalinfo -json (the outside reference for
// georeferencing; Debian gdal-bin).
func gdalinfo(t *testing.T, path string) map[string]any {
	t.Helper()
	out, err := exec.Command("gdalinfo", "-json", "-mdd", "all", path).Output()
	if err != nil {
		t.Fatalf("gdalinfo %s: %v", path, err)
	}
	var m map[string]any
	if err := json.Unmarshal(out, &m); err != nil {
		t.Fatal(err)
	}
	return m
}

// Source: GDAL's gdalinfo -json (gdal-bin 3.6) on input and output: same
// geotransform, CRS, nodata, band descriptions and colour interpretation for
// the selected bands, in order.
func TestGeoreferencingRoundTrip(t *testing.T) {
	out := filepath.Join(t.TempDir(), "restored.tif")
	code, _, stderr := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", "--bands", "3,1", "--iterations", "5", fixture("observed.tif"), out)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	in, got := gdalinfo(t, fixture("observed.tif")), gdalinfo(t, out)
	for _, key := range []string{"geoTransform", "size"} {
		a, _ := json.Marshal(in[key])
		b, _ := json.Marshal(got[key])
		if string(a) != string(b) {
			t.Errorf("%s: input %s, output %s", key, a, b)
		}
	}
	wkt := func(m map[string]any) string { return m["coordinateSystem"].(map[string]any)["wkt"].(string) }
	if wkt(in) != wkt(got) || !strings.Contains(wkt(got), "UTM zone 32N") {
		t.Errorf("CRS changed:\n%s\n%s", wkt(in), wkt(got))
	}
	ib, ob := in["bands"].([]any), got["bands"].([]any)
	if len(ob) != 2 {
		t.Fatalf("output has %d bands, want 2", len(ob))
	}
	for i, src := range []int{2, 0} {
		a, b := ib[src].(map[string]any), ob[i].(map[string]any)
		for _, key := range []string{"description", "colorInterpretation", "noDataValue", "type"} {
			if a[key] != b[key] {
				t.Errorf("band %d %s: input %v, output %v", i+1, key, a[key], b[key])
			}
		}
	}
	md, _ := json.Marshal(got["metadata"])
	for _, want := range []string{"LIMPID_PRODUCT", "restored", "LIMPID_PSF", "gaussian:sigma=1.4", "Brannock Vale", "LIMPID_ITERATIONS_MAX"} {
		if !strings.Contains(string(md), want) && !strings.Contains(mustJSON(ob), want) {
			t.Errorf("metadata lacks %q: %s", want, md)
		}
	}
}

func mustJSON(v any) string { b, _ := json.Marshal(v); return string(b) }

// Determinism (DEVELOPERS.md, "Determinism"): --workers 1, 2 and 7 give
// byte-identical files (16 tiles, 4 bands). A project requirement, no
// outside source. The default run restores the fixture's centre 128 x 128
// in tiles of 32 with fixed settings (the tile pool, blending and
// writing); the automatic choice's own determinism is
// step.TestAutoWorkersIdentical's. LIMPID_LONG runs the whole fixture in
// tiles of 64 with the defaults (--smooth auto --stop auto).
func TestWorkersByteIdentical(t *testing.T) {
	dir := t.TempDir()
	in, tile, settings := cropFixture(t, dir, 128), "32", []string{"--smooth", "0.2", "--stop", "change"}
	if long() {
		in, tile, settings = fixture("observed.tif"), "64", nil
	}
	var first []byte
	for _, w := range []string{"1", "2", "7"} {
		out := filepath.Join(dir, "r"+w+".tif")
		argv := append([]string{"restore", "--psf", "gaussian:sigma=1.4", "--tile", tile, "--iterations", "4", "--workers", w}, settings...)
		code, _, stderr := limpid(t, nil, append(argv, in, out)...)
		if code != 0 {
			t.Fatalf("workers %s: exit %d: %s", w, code, stderr)
		}
		b, err := os.ReadFile(out)
		if err != nil {
			t.Fatal(err)
		}
		if first == nil {
			first = b
		} else if !bytes.Equal(first, b) {
			t.Fatalf("--workers %s output differs from --workers 1", w)
		}
	}
}

// stdin/stdout path, COG output validated by GDAL's own validator (Debian
// python3-gdal's validate_cloud_optimized_geotiff.py), and the report.
func TestStdinStdoutCOGReport(t *testing.T) {
	in, err := os.ReadFile(fixture("observed.tif"))
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	rep := filepath.Join(dir, "r.json")
	code, stdout, stderr := limpid(t, in, "restore", "--psf", "gaussian:sigma=1.4", "--format", "cog", "--iterations", "4", "--report", rep, "-", "-")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	out := filepath.Join(dir, "out.tif")
	if err := os.WriteFile(out, []byte(stdout), 0o644); err != nil {
		t.Fatal(err)
	}
	validator := "/usr/share/doc/python3-gdal/examples/validate_cloud_optimized_geotiff.py"
	for _, c := range []string{
		"/usr/lib/python3/dist-packages/osgeo_utils/samples/validate_cloud_optimized_geotiff.py", validator} {
		if _, err := os.Stat(c); err == nil {
			validator = c
			break
		}
	}
	if msg, err := exec.Command("/usr/bin/python3", validator, out).CombinedOutput(); err != nil {
		t.Fatalf("COG validation: %v: %s", err, msg)
	}
	var r struct {
		Product     string `json:"product"`
		Restoration struct {
			Version string `json:"limpid_version"`
			Bands   []struct {
				FluxBefore, FluxAfter float64
				Tiles                 []struct{ Iterations int } `json:"tiles"`
			} `json:"bands"`
		} `json:"restoration"`
	}
	b, err := os.ReadFile(rep)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &r); err != nil {
		t.Fatal(err)
	}
	if len(r.Restoration.Bands) != 4 || len(r.Restoration.Bands[0].Tiles) != 1 || r.Restoration.Bands[0].Tiles[0].Iterations != 4 {
		t.Fatalf("report: %s", b)
	}
	// Flux: EMS keeps the data's flux (Shepp & Vardi, IEEE TMI 1:113,
	// 1982); with a mask and nodata margin, within 1 % (the PSF spills
	// flux across the nodata edge).
	const fluxTol = 0.01
	for i, bd := range r.Restoration.Bands {
		if math.Abs(bd.FluxAfter-bd.FluxBefore) > fluxTol*bd.FluxBefore {
			t.Errorf("band %d flux %g -> %g", i+1, bd.FluxBefore, bd.FluxAfter)
		}
	}
}

// badCase is a restore command that must fail with exit 2 and one line
// naming want; OUT in args stands for the case's output path.
type badCase struct {
	name string
	args []string
	want string
}

// badInputCases writes the bad files into dir and returns the cases of
// TestBadInputs.
func badInputCases(t *testing.T, dir string) []badCase {
	t.Helper()
	notRaster := filepath.Join(dir, "notes.txt")
	os.WriteFile(notRaster, []byte("hello\n"), 0o644)
	complexTif := filepath.Join(dir, "complex.tif")
	if out, err := exec.Command("gdal_translate", "-q", "-ot", "CFloat32", fixture("observed.tif"), complexTif).CombinedOutput(); err != nil {
		t.Fatalf("gdal_translate: %v %s", err, out)
	}
	negKernel := filepath.Join(dir, "neg.txt")
	os.WriteFile(negKernel, []byte("0 1 0\n1 -4 1\n0 1 0\n"), 0o644)
	evenKernel := filepath.Join(dir, "even.txt")
	os.WriteFile(evenKernel, []byte("1 1\n1 1\n"), 0o644)
	zeroKernel := filepath.Join(dir, "zero.txt")
	os.WriteFile(zeroKernel, []byte("0 0 0\n0 0 0\n0 0 0\n"), 0o644)
	nanKernel := filepath.Join(dir, "nan.txt")
	os.WriteFile(nanKernel, []byte("0 1 0\n1 nan 1\n0 1 0\n"), 0o644)
	obs := fixture("observed.tif")
	copyIn := filepath.Join(dir, "in.tif")
	b, _ := os.ReadFile(obs)
	os.WriteFile(copyIn, b, 0o644)
	psfOK := "gaussian:sigma=1"
	return []badCase{
		{"missing file", []string{"--psf", psfOK, filepath.Join(dir, "nope.tif"), "OUT"}, "nope.tif"},
		{"not a raster", []string{"--psf", psfOK, notRaster, "OUT"}, "not a raster"},
		{"complex", []string{"--psf", psfOK, complexTif, "OUT"}, "CFloat32"},
		{"no psf", []string{obs, "OUT"}, "--psf is required"},
		{"bad model", []string{"--psf", "airy:r=1", obs, "OUT"}, "unknown model"},
		{"bad param", []string{"--psf", "gaussian:sigma=abc", obs, "OUT"}, "not a finite number"},
		{"negative sigma", []string{"--psf", "gaussian:sigma=-1", obs, "OUT"}, "sigma"},
		{"mixed params", []string{"--psf", "gaussian:sigma=1,sx=2", obs, "OUT"}, "either sigma"},
		{"negative kernel", []string{"--psf", "kernel:" + negKernel, obs, "OUT"}, "negative"},
		{"even kernel", []string{"--psf", "kernel:" + evenKernel, obs, "OUT"}, "even"},
		{"zero kernel", []string{"--psf", "kernel:" + zeroKernel, obs, "OUT"}, "sum to zero"},
		{"nan kernel", []string{"--psf", "kernel:" + nanKernel, obs, "OUT"}, "not finite"},
		{"missing kernel", []string{"--psf", "kernel:" + filepath.Join(dir, "k.txt"), obs, "OUT"}, "k.txt"},
		{"psf larger than tile", []string{"--psf", "gaussian:sigma=5", "--tile", "32", obs, "OUT"}, "larger than a tile"},
		{"tile too small", []string{"--psf", psfOK, "--tile", "4", obs, "OUT"}, "--tile"},
		{"overlap nonsense", []string{"--psf", psfOK, "--overlap", "-3", obs, "OUT"}, "--overlap"},
		{"overlap above tile", []string{"--psf", psfOK, "--tile", "32", "--overlap", "64", obs, "OUT"}, "overlap"},
		{"bad band", []string{"--psf", psfOK, "--bands", "7", obs, "OUT"}, "band 7"},
		{"bad format", []string{"--psf", psfOK, "--format", "png", obs, "OUT"}, "--format"},
		{"bad iterations", []string{"--psf", psfOK, "--iterations", "0", obs, "OUT"}, "--iterations"},
		{"bad background", []string{"--psf", psfOK, "--background", "dark", obs, "OUT"}, "--background"},
		{"bad method", []string{"--psf", psfOK, "--method", "magic", obs, "OUT"}, "--method"},
		{"negative smooth", []string{"--psf", psfOK, "--smooth", "-1", obs, "OUT"}, "--smooth"},
		{"word smooth", []string{"--psf", psfOK, "--smooth", "some", obs, "OUT"}, "--smooth"},
		{"bad stop", []string{"--psf", psfOK, "--stop", "never", obs, "OUT"}, "--stop"},
		{"bad choose", []string{"--psf", psfOK, "--choose", "each", obs, "OUT"}, "--choose"},
		{"bad noise", []string{"--psf", psfOK, "--noise", "a=x,b=2", obs, "OUT"}, "--noise"},
		{"half noise", []string{"--psf", psfOK, "--noise", "a=0.4", obs, "OUT"}, "--noise"},
		{"zero noise", []string{"--psf", psfOK, "--noise", "a=0,b=0", obs, "OUT"}, "--noise"},
		{"discrepancy with auto smooth", []string{"--psf", psfOK, "--stop", "discrepancy", obs, "OUT"}, "--stop discrepancy"},
		{"same as input", []string{"--psf", psfOK, copyIn, copyIn}, "is the INPUT"},
		{"missing directory", []string{"--psf", psfOK, obs, filepath.Join(dir, "no", "such", "out.tif")}, "does not exist"},
		{"flags after args", []string{obs, "x.tif", "--psf", psfOK}, "flags go before the arguments"},
	}
}

// Every bad input exits 2 with one line naming what is wrong and leaves no
// file at OUTPUT: the project's error contract (README, "Exit codes"), no
// outside source.
func TestBadInputs(t *testing.T) {
	dir := t.TempDir()
	for _, c := range badInputCases(t, dir) {
		t.Run(c.name, func(t *testing.T) {
			out := filepath.Join(dir, "out-"+strings.ReplaceAll(c.name, " ", "_")+".tif")
			args := []string{"restore"}
			for _, a := range c.args {
				if a == "OUT" {
					a = out
				}
				args = append(args, a)
			}
			code, stdout, stderr := limpid(t, nil, args...)
			if code != 2 {
				t.Fatalf("exit %d, want 2; stderr: %s", code, stderr)
			}
			lines := strings.Split(strings.TrimSpace(stderr), "\n")
			if len(lines) != 1 || !strings.Contains(stderr, c.want) {
				t.Fatalf("stderr should be one line naming %q, got: %s", c.want, stderr)
			}
			if stdout != "" {
				t.Fatalf("stdout not empty: %q", stdout)
			}
			if _, err := os.Stat(out); err == nil {
				t.Fatalf("%s was written", out)
			}
			leftovers, _ := filepath.Glob(filepath.Join(dir, ".limpid-*"))
			if len(leftovers) != 0 {
				t.Fatalf("temporary files left: %v", leftovers)
			}
		})
	}
}

// Reference: the fixture's simulation (cmd/limpid/demo.go: Poisson-Gaussian
// noise of gain 0.4 DN per electron and read noise 3 DN, 12-bit rounding),
// so the variance is 0.4 DN + 9.08. The fitted slope must be within 10 %
// (the noise model's accuracy bar is 0.9-1.1 on the variance); the offset is
// too small against the shot noise of 500-3000 DN scenes to check.
func TestNoiseCommand(t *testing.T) {
	js := filepath.Join(t.TempDir(), "noise.json")
	code, stdout, stderr := limpid(t, nil, "noise", "--json", js, fixture("observed.tif"))
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	if !strings.Contains(stdout, "band") || strings.Count(stdout, "\n") != 5 {
		t.Errorf("table on stdout should have a header and 4 bands:\n%s", stdout)
	}
	var got struct {
		Bands []struct {
			Band int     `json:"band"`
			A    float64 `json:"a"`
			B    float64 `json:"b"`
			Bins []any   `json:"bins"`
		} `json:"bands"`
	}
	b, err := os.ReadFile(js)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &got); err != nil {
		t.Fatal(err)
	}
	if len(got.Bands) != 4 {
		t.Fatalf("%d bands in the JSON", len(got.Bands))
	}
	const slopeTol = 0.10 // the noise model's 0.9-1.1 accuracy bar
	for _, bd := range got.Bands {
		if math.Abs(bd.A/0.4-1) > slopeTol || len(bd.Bins) < 10 {
			t.Errorf("band %d: a = %.3f (want 0.4 within 10 %%), %d bins", bd.Band, bd.A, len(bd.Bins))
		}
	}
	if code, _, stderr := limpid(t, nil, "noise", "a.tif", "b.tif"); code != 2 || !strings.Contains(stderr, "one INPUT") {
		t.Errorf("two inputs: exit %d, %s", code, stderr)
	}
}
