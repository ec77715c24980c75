package main

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"limpid/arrowio"
)

// Common parameters of the stream tests: the valley fixture (256 x 256, 4
// UInt16 bands, nodata 0), tiles of 64 with the halo restore's auto rule
// gives this PSF (32), few iterations to keep -race runs short.
// The stream routes need fixed settings (the automatic choice needs the
// whole scene).
var streamArgs = []string{"--psf", "gaussian:sigma=1.4", "--smooth", "0.2", "--stop", "change", "--iterations", "5", "--workers", "2"}

func mustRun(t *testing.T, stdin []byte, args ...string) []byte {
	t.Helper()
	code, out, errs := limpid(t, stdin, args...)
	if code != 0 {
		t.Fatalf("limpid %s: exit %d: %s", strings.Join(args, " "), code, errs)
	}
	return []byte(out)
}

func args(a ...[]string) []string {
	var out []string
	for _, x := range a {
		out = append(out, x...)
	}
	return out
}

// The stream routes equal the raster route (a project requirement,
// DEVELOPERS.md "Tile streams"): `tiles pack | restore --input-format arrow
// --output-format arrow | tiles unpack` gives the same GeoTIFF as restore on
// the raster, byte for byte, for the same parameters; so do the mixed routes
// raster -> arrow and arrow -> raster; pack | unpack gives the bands back.
func TestStreamRoundTripBytes(t *testing.T) {
	dir := t.TempDir()
	in := fixture("observed.tif")
	direct := filepath.Join(dir, "direct.tif")
	mustRun(t, nil, args([]string{"restore"}, streamArgs, []string{"--tile", "64", "--bands", "3,1", in, direct})...)
	want, _ := os.ReadFile(direct)

	packed := mustRun(t, nil, "tiles", "pack", "--tile", "64", "--overlap", "32", "--bands", "3,1", in, "-")
	restored := mustRun(t, packed, args([]string{"restore", "--input-format", "arrow", "--output-format", "arrow"}, streamArgs, []string{"-", "-"})...)
	got := mustRun(t, restored, "tiles", "unpack", "-", "-")
	if !bytes.Equal(got, want) {
		t.Fatalf("pack | restore | unpack differs from restore (%d vs %d bytes)", len(got), len(want))
	}

	// raster in, arrow out: the same restored stream as pack | restore.
	r2 := mustRun(t, nil, args([]string{"restore", "--output-format", "arrow"}, streamArgs, []string{"--tile", "64", "--bands", "3,1", "--scene-id", "observed", in, "-"})...)
	if !bytes.Equal(r2, restored) {
		t.Error("restore raster -> arrow differs from pack | restore")
	}
	// arrow in, raster out (to a file).
	viaFile := filepath.Join(dir, "arrow-in.tif")
	mustRun(t, packed, args([]string{"restore", "--input-format", "arrow"}, streamArgs, []string{"-", viaFile})...)
	if b, _ := os.ReadFile(viaFile); !bytes.Equal(b, want) {
		t.Error("restore arrow -> raster differs from restore")
	}
	// zstd-compressed streams restore to the same result.
	pz := mustRun(t, nil, "tiles", "pack", "--tile", "64", "--overlap", "32", "--bands", "3,1", "--compress", "zstd", in, "-")
	if len(pz) >= len(packed) {
		t.Errorf("zstd stream %d bytes, uncompressed %d", len(pz), len(packed))
	}
	rz := mustRun(t, pz, args([]string{"restore", "--input-format", "arrow", "--output-format", "arrow", "--compress", "lz4"}, streamArgs, []string{"-", "-"})...)
	if got := mustRun(t, rz, "tiles", "unpack", "-", "-"); !bytes.Equal(got, want) {
		t.Error("compressed route differs from restore")
	}
	// pack | unpack --output-type same gives back the bands (GDAL's checksum
	// of every band equals the input's).
	back := filepath.Join(dir, "back.tif")
	mustRun(t, packed, "tiles", "unpack", "-", back)
	a, b := gdalinfo(t, in), gdalinfo(t, back)
	ab, bb := a["bands"].([]any), b["bands"].([]any)
	for i, src := range []int{2, 0} {
		if cs, cb := ab[src].(map[string]any)["checksum"], bb[i].(map[string]any)["checksum"]; cs != cb {
			t.Errorf("band %d: checksum %v after pack | unpack, input band %d has %v", i+1, cb, src+1, cs)
		}
	}
}

// movedTile returns the stream with tile 3's buffer moved right by one
// pixel: a geometry the tiling does not have.
func movedTile(t *testing.T, packed []byte) []byte {
	t.Helper()
	r, err := arrowio.NewReader(bytes.NewReader(packed))
	if err != nil {
		t.Fatal(err)
	}
	defer r.Release()
	var moved bytes.Buffer
	w, err := arrowio.NewWriter(&moved, r.Header())
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; ; i++ {
		var tl arrowio.Tile
		ok, err := r.Next(&tl)
		if err != nil {
			t.Fatal(err)
		}
		if !ok {
			break
		}
		if i == 2 {
			tl.X++
			tl.HaloLeft--
		}
		if err := w.Write(&tl); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return moved.Bytes()
}

// checkStreamError runs one route on a bad stream: exit 2, one error line
// (after any warning) holding every want, nothing at OUTPUT.
func checkStreamError(t *testing.T, route []string, input []byte, out string, want []string) {
	t.Helper()
	code, _, errs := limpid(t, input, append(route, "-", out)...)
	if code != 2 {
		t.Errorf("%v: exit %d, want 2 (%s)", route, code, errs)
	}
	line := strings.TrimSpace(errs)
	if i := strings.LastIndex(line, "\n"); i >= 0 && strings.Contains(line[:i], "warning") {
		line = line[i+1:]
	}
	if strings.Count(line, "\n") > 0 || !strings.HasPrefix(line, "limpid: ") {
		t.Errorf("%v: want one error line, got %q", route, errs)
	}
	for _, w := range want {
		if !strings.Contains(line, w) {
			t.Errorf("%v: error %q does not mention %q", route, line, w)
		}
	}
	if _, err := os.Stat(out); err == nil {
		t.Errorf("%v: %s written despite the error", route, out)
	}
}

// checkStdoutBatches restores a bad stream to stdout: exit 2, and stdout
// holds complete batches only, so a strict reader stops at the missing
// end-of-stream marker.
func checkStdoutBatches(t *testing.T, input []byte) {
	t.Helper()
	code, stdout, _ := limpid(t, input, args([]string{"restore", "--input-format", "arrow", "--output-format", "arrow", "--workers", "1"}, streamArgs, []string{"-", "-"})...)
	if code != 2 {
		t.Fatalf("stdout route: exit %d", code)
	}
	if len(stdout) == 0 {
		return
	}
	rd, err := arrowio.NewReader(strings.NewReader(stdout))
	if err != nil {
		t.Fatalf("stdout after the error is not a stream prefix: %v", err)
	}
	defer rd.Release()
	var tl arrowio.Tile
	for {
		ok, err := rd.Next(&tl)
		if err != nil {
			if !strings.Contains(err.Error(), "without the end-of-stream marker") {
				t.Errorf("stdout after the error: %v, want only complete batches", err)
			}
			return
		}
		if !ok {
			t.Error("stdout after the error ends with an end-of-stream marker")
			return
		}
	}
}

// Bad streams on every stream route: exit 2, one line naming the input, the
// batch and the column; nothing at OUTPUT (no temporary files left either);
// on stdout only complete batches, no end-of-stream marker. The project's
// error contract for streams (README, "Bad streams"); the end-of-stream
// marker is the Arrow IPC streaming format's (Apache Arrow columnar format
// specification, "IPC Streaming Format").
func TestBadStreamsCLI(t *testing.T) {
	dir := t.TempDir()
	packed := mustRun(t, nil, "tiles", "pack", "--tile", "64", "--overlap", "32", "--bands", "1", fixture("observed.tif"), "-")
	cases := []struct {
		name  string
		input []byte
		want  []string
	}{
		{"empty", nil, []string{"INPUT - (stdin)", "schema", "empty"}},
		{"geotiff", mustRead(t, fixture("observed.tif")), []string{"not an Arrow IPC stream"}},
		{"truncated", packed[:len(packed)*2/3], []string{"batch 11", "truncated"}},
		{"moved-tile", movedTile(t, packed), []string{"batch 3 row 0 column buffer_x", "want 96"}},
		{"two-streams", append(append([]byte(nil), packed...), packed...), []string{"follows the end-of-stream marker"}},
	}
	routes := [][]string{
		args([]string{"restore", "--input-format", "arrow", "--output-format", "arrow"}, streamArgs),
		args([]string{"restore", "--input-format", "arrow"}, streamArgs),
		{"tiles", "unpack"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			for _, route := range routes {
				checkStreamError(t, route, c.input, filepath.Join(dir, "out-"+c.name), c.want)
			}
			if left, _ := filepath.Glob(filepath.Join(dir, ".limpid-*")); len(left) > 0 {
				t.Errorf("temporary files left: %v", left)
			}
			checkStdoutBatches(t, c.input)
		})
	}
}

func mustRead(t *testing.T, p string) []byte {
	t.Helper()
	b, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func writeF32(t *testing.T, path string, planes [][]float32) {
	t.Helper()
	var buf bytes.Buffer
	for _, p := range planes {
		binary.Write(&buf, binary.LittleEndian, p)
	}
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
}

// Source: the Apache Arrow JavaScript implementation (npm apache-arrow
// 21.2.0, pinned in testdata/node/package.json; installed by `make deps`
// with npm ci). testdata/node/crosscheck.mjs reads limpid's observed and
// restored streams and checks schema, metadata and pixels against the
// GeoTIFFs as GDAL reads them (the raster written directly); then it writes a
// stream of its own, which limpid must restore to exactly the GeoTIFF
// restore makes from the raster.
func TestNodeCrossCheck(t *testing.T) {
	node, err := exec.LookPath("node")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("node is not installed: run make deps")
		}
		t.Skip("node is not installed (make deps installs it)")
	}
	jsDir, _ := filepath.Abs("../../testdata/node")
	if _, err := os.Stat(filepath.Join(jsDir, "node_modules", "apache-arrow")); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("apache-arrow is not installed: run make deps (npm ci in testdata/node)")
		}
		t.Skip("apache-arrow is not installed: run make deps")
	}
	dir := t.TempDir()
	in := fixture("observed.tif")
	common := args(streamArgs, []string{"--tile", "64", "--bands", "3,4"})
	obs := filepath.Join(dir, "observed.arrows")
	rest := filepath.Join(dir, "restored.arrows")
	direct := filepath.Join(dir, "direct.tif")
	mustRun(t, nil, "tiles", "pack", "--tile", "64", "--overlap", "32", "--bands", "3,4", in, obs)
	mustRun(t, nil, args([]string{"restore", "--output-format", "arrow"}, common, []string{in, rest})...)
	mustRun(t, nil, args([]string{"restore", "--output-type", "float32"}, common, []string{in, direct})...)

	meta, src, err := readAll(in)
	if err != nil {
		t.Fatal(err)
	}
	_, res, err := readAll(direct)
	if err != nil {
		t.Fatal(err)
	}
	writeF32(t, filepath.Join(dir, "observed.f32"), [][]float32{src[2], src[3]})
	writeF32(t, filepath.Join(dir, "restored.f32"), res)
	nd, _ := meta.Bands[2].NoData, meta.Bands[2].HasNoData
	exp := map[string]any{
		"width": meta.Width, "height": meta.Height, "geotransform": meta.Geo.Transform, "crs_wkt": meta.Geo.WKT,
		"nodata": nd, "data_type": meta.DataType, "scene_id": "observed", "tile": 64, "overlap": 32,
		"psf": "gaussian:sigma=1.4", "iterations": 5,
		"bands": []map[string]any{
			{"description": meta.Bands[2].Description, "source_band": 3},
			{"description": meta.Bands[3].Description, "source_band": 4},
		},
		"observed_f32": filepath.Join(dir, "observed.f32"), "restored_f32": filepath.Join(dir, "restored.f32"),
	}
	b, _ := json.Marshal(exp)
	expPath := filepath.Join(dir, "expected.json")
	os.WriteFile(expPath, b, 0o644)
	jsOut := filepath.Join(dir, "from-js.arrows")
	cmd := exec.Command(node, filepath.Join(jsDir, "crosscheck.mjs"), expPath, obs, rest, jsOut)
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("node crosscheck.mjs: %v\n%s", err, out)
	}
	t.Logf("node: %s", strings.TrimSpace(string(out)))

	// limpid restores the stream apache-arrow built: the same GeoTIFF as
	// restore on the raster.
	fromJS := filepath.Join(dir, "from-js.tif")
	mustRun(t, nil, args([]string{"restore", "--input-format", "arrow", "--output-type", "float32"}, streamArgs, []string{jsOut, fromJS})...)
	if !bytes.Equal(mustRead(t, fromJS), mustRead(t, direct)) {
		t.Error("the stream built by apache-arrow does not restore to restore's GeoTIFF")
	}
}

// Stream restore is stateless per tile (README: no whole-scene options; the
// tiling is the stream's): usage errors, exit 2. The project's error
// contract, no outside source.
func TestStreamFlags(t *testing.T) {
	packed := mustRun(t, nil, "tiles", "pack", "--tile", "64", "--overlap", "32", "--bands", "1", fixture("observed.tif"), "-")
	restored := mustRun(t, packed, args([]string{"restore", "--input-format", "arrow", "--output-format", "arrow"}, streamArgs, []string{"-", "-"})...)
	base := args([]string{"restore", "--input-format", "arrow", "--output-format", "arrow"}, streamArgs)
	for _, c := range []struct {
		stdin []byte
		args  []string
		want  string
	}{
		{packed, args(base, []string{"--background", "auto", "-", "-"}), "--background auto needs the whole scene"},
		{packed, args(base, []string{"--bands", "1", "-", "-"}), "--bands"},
		{packed, args(base, []string{"--tile", "128", "-", "-"}), "cut in tiles of 64"},
		{packed, args(base, []string{"--overlap", "16", "-", "-"}), "has an overlap of 32"},
		{packed, args(base, []string{"--report", "r.json", "-", "-"}), "--report"},
		{packed, args(base, []string{"--smooth", "auto", "-", "-"}), "need the whole scene"},
		{packed, args(base, []string{"--stop", "auto", "-", "-"}), "need the whole scene"},
		{packed, args(base, []string{"--stop", "discrepancy", "--smooth", "0.3", "-", "-"}), "needs --noise"},
		{restored, args(base, []string{"-", "-"}), "restore needs an observed stream"},
		{packed, args(base, []string{"--input-format", "jpeg", "-", "-"}), "--input-format"},
		{packed, []string{"tiles", "pack", "--compress", "brotli", fixture("observed.tif"), "-"}, "--compress"},
		{packed, []string{"tiles", "pack", "--tile", "64", "--overlap", "65", fixture("observed.tif"), "-"}, "overlap 65"},
		{packed, []string{"tiles", "unpack", "-"}, "needs INPUT and OUTPUT"},
		{packed, []string{"tiles", "unpack", "missing.arrows", "-"}, "INPUT missing.arrows"},
	} {
		code, stdout, errs := limpid(t, c.stdin, c.args...)
		if code != 2 || !strings.Contains(errs, c.want) || stdout != "" {
			t.Errorf("%v: exit %d, stderr %q, %d bytes on stdout; want 2 and %q", c.args, code, errs, len(stdout), c.want)
		}
	}
}
