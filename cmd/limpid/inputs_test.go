package main

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"limpid/arrowio"
	"limpid/raster"
	"limpid/raster/gdal"
	"limpid/step/stream"
)

// sparseTIFF makes a GeoTIFF that declares w x h pixels without writing
// any (GDAL's gdal_create with SPARSE_OK: unwritten blocks cost nothing).
func sparseTIFF(t *testing.T, path string, w, h int) {
	t.Helper()
	out, err := exec.Command("gdal_create", "-q", "-of", "GTiff", "-outsize", strconv.Itoa(w), strconv.Itoa(h), "-ot", "UInt16",
		"-co", "SPARSE_OK=TRUE", "-co", "TILED=YES", "-co", "BLOCKXSIZE=8192", "-co", "BLOCKYSIZE=8192", "-co", "BIGTIFF=YES", path).CombinedOutput()
	if err != nil {
		t.Fatalf("gdal_create: %v %s", err, out)
	}
}

// writeScene writes one-band planes as a GeoTIFF of the given type through
// the adapter (no nodata: every value is data).
func writeScene(t *testing.T, path, dtype string, w, h int, plane []float32) {
	t.Helper()
	m := raster.Meta{Width: w, Height: h, DataType: dtype, Bands: []raster.BandInfo{{Description: "b1"}}}
	dst, err := gdal.Create(path, m, gdal.WriteOptions{Format: gdal.GTiff, DataType: dtype})
	if err != nil {
		t.Fatal(err)
	}
	if err := dst.WriteRows(0, h, [][]float32{plane}); err != nil {
		t.Fatal(err)
	}
	if err := dst.Commit(); err != nil {
		t.Fatal(err)
	}
}

// band1 is the fixture's first band.
func band1(t *testing.T) (raster.Meta, []float32) {
	t.Helper()
	m, planes, err := readAll(fixture("observed.tif"))
	if err != nil {
		t.Fatal(err)
	}
	return m, planes[0]
}

// refusal is a command that must exit 2 with one stderr line starting
// "limpid:" and naming want; env is set for the run.
type refusal struct {
	name string
	env  map[string]string
	args []string
	want string
}

// inputRefusals builds the bad inputs of issue 14 items 6, 8, 11 and 12 in
// dir. OUT stands for the case's output path.
func inputRefusals(t *testing.T, dir string) []refusal {
	huge := filepath.Join(dir, "huge.tif") // 10^10 pixels, about 10 KB
	sparseTIFF(t, huge, 100000, 100000)
	giant := filepath.Join(dir, "giant.tif") // 10^12 pixels
	sparseTIFF(t, giant, 1000000, 1000000)
	mid := filepath.Join(dir, "mid.tif") // 9e8: under the scene limit, over the whole-band one
	sparseTIFF(t, mid, 30000, 30000)
	obs := fixture("observed.tif")
	m, _ := band1(t)
	px := m.Width * m.Height * len(m.Bands)

	write := func(name, text string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	infKernel := write("inf.txt", "0 1 0\n1 inf 1\n0 1 0\n")
	negOnly := write("negonly.txt", "-1 -2 -1\n")
	twoJSON := write("two.json", "{\"sigma\": 1.2}\n{\"sigma\": 3}\n")
	junkJSON := write("junk.json", "{\"sigma\": 1.2} trailing\n")
	palette := write("palette.vrt", `<VRTDataset rasterXSize="16" rasterYSize="16">
  <VRTRasterBand dataType="Byte" band="1">
    <ColorInterp>Palette</ColorInterp>
    <ColorTable><Entry c1="0" c2="0" c3="0" c4="255"/><Entry c1="255" c2="0" c3="0" c4="255"/></ColorTable>
  </VRTRasterBand>
</VRTDataset>
`)
	// Truncated pixel data: a DEFLATE GeoTIFF cut in the middle of its
	// compressed blocks (the header and the block index are intact).
	deflate := filepath.Join(dir, "deflate.tif")
	if out, err := exec.Command("gdal_translate", "-q", "-co", "COMPRESS=DEFLATE", "-co", "TILED=YES", "-co", "BLOCKXSIZE=64", "-co", "BLOCKYSIZE=64", obs, deflate).CombinedOutput(); err != nil {
		t.Fatalf("gdal_translate: %v %s", err, out)
	}
	b, _ := os.ReadFile(deflate)
	cut := write("cut.tif", string(b[:len(b)/2]))
	// Corrupt pixel data: the second half of the blocks overwritten.
	bad := append([]byte(nil), b...)
	for i := len(bad) / 2; i < len(bad)-16; i++ {
		bad[i] = byte(i * 7)
	}
	corrupt := write("corrupt.tif", string(bad))

	// A stream whose CRS is not WKT GDAL can read.
	crsStream := filepath.Join(dir, "crs.arrows")
	{
		src, err := gdal.Open(obs)
		if err != nil {
			t.Fatal(err)
		}
		hdr, err := stream.ObservedHeader(src.Meta(), []int{0}, "crs", 64, 32)
		if err != nil {
			t.Fatal(err)
		}
		hdr.Geo.WKT = `PROJCS["broken",GEOGCS[`
		tiler, err := stream.NewSceneTiler(src, []int{0}, hdr)
		if err != nil {
			t.Fatal(err)
		}
		var buf bytes.Buffer
		w, err := arrowio.NewWriter(&buf, hdr)
		if err != nil {
			t.Fatal(err)
		}
		var tl arrowio.Tile
		for {
			ok, err := tiler.Next(&tl)
			if err != nil {
				t.Fatal(err)
			}
			if !ok {
				break
			}
			if err := w.Write(&tl); err != nil {
				t.Fatal(err)
			}
		}
		if err := w.Close(); err != nil {
			t.Fatal(err)
		}
		src.Close()
		write("crs.arrows", buf.String())
	}
	// A scene with a 17 MiB metadata item: its schema message would exceed
	// what the stream reader accepts (arrowio.MaxMetadataBytes).
	bigMeta := filepath.Join(dir, "bigmeta.tif")
	{
		_, p := band1(t)
		mm := raster.Meta{Width: m.Width, Height: m.Height, DataType: "UInt16", Bands: []raster.BandInfo{{Description: "b1"}},
			Metadata: map[string]string{"HISTORY": strings.Repeat("x", 17<<20)}}
		dst, err := gdal.Create(bigMeta, mm, gdal.WriteOptions{Format: gdal.GTiff, DataType: "UInt16"})
		if err != nil {
			t.Fatal(err)
		}
		if err := dst.WriteRows(0, m.Height, [][]float32{p}); err != nil {
			t.Fatal(err)
		}
		if err := dst.Commit(); err != nil {
			t.Fatal(err)
		}
	}
	fixed := []string{"--smooth", "0.2", "--stop", "change", "--iterations", "5"}
	restore := func(a ...string) []string { return append(append([]string{"restore"}, fixed...), a...) }
	g := "gaussian:sigma=1"
	return []refusal{
		// Item 6: declared sizes.
		{"restore huge", nil, restore("--psf", g, huge, "OUT"), "10000000000 pixels, over the limit of 4294967296"},
		{"restore giant", nil, restore("--psf", g, giant, "OUT"), "LIMPID_MAX_PIXELS"},
		{"restore psf auto huge", nil, restore("--psf", "auto", huge, "OUT"), "over the limit"},
		{"psf measure auto huge", nil, []string{"psf", "measure", "--auto", huge}, "over the limit"},
		{"assess huge", nil, []string{"assess", huge, huge}, "over the limit"},
		{"noise huge", nil, []string{"noise", huge}, "over the limit"},
		{"tiles pack huge", nil, []string{"tiles", "pack", huge, "OUT"}, "over the limit"},
		{"psf measure auto mid", nil, []string{"psf", "measure", "--auto", mid}, "LIMPID_MAX_WHOLE_PIXELS"},
		{"restore psf auto mid", nil, restore("--psf", "auto", mid, "OUT"), "band 1 (the --auto edge search) is read whole"},
		{"assess mid", nil, []string{"assess", mid, mid}, "LIMPID_MAX_WHOLE_PIXELS"},
		{"limit lowered", map[string]string{"LIMPID_MAX_PIXELS": strconv.Itoa(px - 1)}, restore("--psf", g, obs, "OUT"), fmt.Sprintf("= %d pixels, over the limit of %d", px, px-1)},
		{"whole limit lowered", map[string]string{"LIMPID_MAX_WHOLE_PIXELS": "1000"}, []string{"psf", "measure", "--auto", obs}, "over the limit of 1000"},
		{"limit not a number", map[string]string{"LIMPID_MAX_PIXELS": "lots"}, restore("--psf", g, obs, "OUT"), "LIMPID_MAX_PIXELS"},
		{"limit zero", map[string]string{"LIMPID_MAX_WHOLE_PIXELS": "0"}, []string{"assess", obs, obs}, "LIMPID_MAX_WHOLE_PIXELS"},
		// Item 8: kernels.
		{"inf kernel", nil, restore("--psf", "kernel:"+infKernel, obs, "OUT"), "inf.txt"},
		{"negative-only kernel", nil, restore("--psf", "kernel:"+negOnly, obs, "OUT"), "negonly.txt"},
		// Item 11: a pack the reader would refuse.
		{"pack 17 MiB metadata", nil, []string{"tiles", "pack", bigMeta, "OUT"}, "message metadata size"},
		// Item 12: unreadable pixel data, palette bands, CRS, trailing JSON.
		{"truncated pixels", nil, restore("--psf", g, cut, "OUT"), "cut.tif"},
		{"corrupt pixels", nil, restore("--psf", g, corrupt, "OUT"), "corrupt.tif"},
		{"corrupt pixels noise", nil, []string{"noise", corrupt}, "corrupt.tif"},
		{"palette", nil, restore("--psf", g, palette, "OUT"), "palette"},
		{"palette pack", nil, []string{"tiles", "pack", palette, "OUT"}, "palette"},
		{"stream CRS unpack", nil, []string{"tiles", "unpack", crsStream, "OUT"}, "CRS"},
		{"stream CRS restore", nil, append(restore("--psf", g, "--input-format", "arrow"), crsStream, "OUT"), "CRS"},
		{"measured two objects", nil, restore("--psf", "measured:"+twoJSON, obs, "OUT"), "two.json has data after its JSON object"},
		{"measured trailing junk", nil, []string{"psf", "build", "measured:" + junkJSON, "OUT"}, "junk.json has data after"},
	}
}

// dirNames lists a directory's entries.
func dirNames(t *testing.T, dir string) map[string]bool {
	t.Helper()
	es, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	out := map[string]bool{}
	for _, e := range es {
		out[e.Name()] = true
	}
	return out
}

// Every bad input of issue 14 items 6, 8, 11 and 12 exits 2 with one
// stderr line starting "limpid:" and naming the problem, writes nothing to
// stdout or OUTPUT, leaves no new file in the output directory or TMPDIR and
// leaves the input unchanged: the project's error contract (README, "Exit
// codes"; POSIX leaves exit statuses to the utility, 2 is limpid's for bad
// input), no outside source.
func TestInputRefusals(t *testing.T) {
	dir := t.TempDir()
	cases := inputRefusals(t, dir)
	outDir := filepath.Join(dir, "out")
	tmp := filepath.Join(dir, "tmp")
	os.Mkdir(outDir, 0o755)
	os.Mkdir(tmp, 0o755)
	t.Setenv("TMPDIR", tmp)
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			for k, v := range c.env {
				t.Setenv(k, v)
			}
			out := filepath.Join(outDir, strings.ReplaceAll(c.name, " ", "_")+".out")
			args := make([]string, len(c.args))
			var inputs []string
			for i, a := range c.args {
				if a == "OUT" {
					a = out
				} else if st, err := os.Stat(a); err == nil && st.Mode().IsRegular() {
					inputs = append(inputs, a)
				}
				args[i] = a
			}
			before := map[string][]byte{}
			for _, in := range inputs {
				if st, _ := os.Stat(in); st.Size() < 64<<20 {
					before[in], _ = os.ReadFile(in)
				}
			}
			outBefore, tmpBefore := dirNames(t, outDir), dirNames(t, tmp)
			code, stdout, stderr := limpid(t, nil, args...)
			if code != 2 {
				t.Fatalf("exit %d, want 2; stderr: %s", code, stderr)
			}
			lines := strings.Split(strings.TrimSpace(stderr), "\n")
			if len(lines) != 1 || !strings.HasPrefix(lines[0], "limpid: ") || !strings.Contains(stderr, c.want) {
				t.Fatalf("stderr should be one limpid: line naming %q, got: %s", c.want, stderr)
			}
			if stdout != "" {
				t.Fatalf("stdout: %q", stdout)
			}
			if _, err := os.Stat(out); err == nil {
				t.Fatalf("%s was written", out)
			}
			if a, b := dirNames(t, outDir), dirNames(t, tmp); len(a) != len(outBefore) || len(b) != len(tmpBefore) {
				t.Fatalf("files left: output directory %v, TMPDIR %v", a, b)
			}
			for in, b := range before {
				if now, _ := os.ReadFile(in); !bytes.Equal(now, b) {
					t.Fatalf("input %s changed", in)
				}
			}
		})
	}
}

// A kernel whose weights sum beyond the float64 range (each 1e308) is the
// same PSF as those weights scaled down: restore gives the same bytes as
// with the uniform kernel of ones (each weight 1/9 either way). Source:
// a PSF is normalised to unit sum (NewKernel's contract; the EM model of
// Shepp & Vardi, IEEE TMI 1:113, 1982, uses a normalised system matrix).
func TestHugeKernelWeights(t *testing.T) {
	dir := t.TempDir()
	big := filepath.Join(dir, "big.txt")
	one := filepath.Join(dir, "one.txt")
	os.WriteFile(big, []byte(strings.Repeat("1e308 1e308 1e308\n", 3)), 0o644)
	os.WriteFile(one, []byte(strings.Repeat("1 1 1\n", 3)), 0o644)
	var outs [2][]byte
	for i, k := range []string{big, one} {
		out := filepath.Join(dir, fmt.Sprintf("o%d.tif", i))
		code, _, stderr := limpid(t, nil, "restore", "--psf", "kernel:"+k, "--smooth", "0.2", "--stop", "change", "--iterations", "5", "--bands", "1", fixture("observed.tif"), out)
		if code != 0 {
			t.Fatalf("kernel %s: exit %d: %s", k, code, stderr)
		}
		_, planes, err := readAll(out)
		if err != nil {
			t.Fatal(err)
		}
		var b bytes.Buffer
		for _, v := range planes[0] {
			b.WriteString(strconv.FormatFloat(float64(v), 'g', -1, 32))
		}
		outs[i] = b.Bytes()
	}
	if !bytes.Equal(outs[0], outs[1]) {
		t.Fatal("the 1e308 kernel restores differently from the same kernel of ones")
	}
}

// restoreFloat restores in (band 1, fixed settings, float32 output) and
// returns the output plane, stderr and the output's metadata.
func restoreFloat(t *testing.T, in, out string) ([]float32, string, map[string]string) {
	t.Helper()
	code, _, stderr := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", "--smooth", "0.2", "--stop", "change", "--iterations", "20",
		"--output-type", "float32", in, out)
	if code != 0 {
		t.Fatalf("%s: exit %d: %s", in, code, stderr)
	}
	m, planes, err := readAll(out)
	if err != nil {
		t.Fatal(err)
	}
	return planes[0], stderr, m.Metadata
}

// warnings are the stderr lines starting "limpid: warning:".
func warnings(stderr string) []string {
	var w []string
	for _, l := range strings.Split(stderr, "\n") {
		if strings.HasPrefix(l, "limpid: warning:") {
			w = append(w, l)
		}
	}
	return w
}

// Issue 14 item 9: radiometry the engine cannot take as it is is restored in
// exact changed units, with one warning line and the change recorded; never
// a silent zero.
//
//   - Float32 near 3e38 (the fixture times 2^116): multiplying by a power of
//     two is exact in binary floating point, and every operation of the
//     fixed-setting EMS (sums, products, quotients, relative changes)
//     commutes with it exactly barring overflow and underflow (IEEE
//     754-2008, sec. 4.3 and 5.4: correctly rounded results scale with
//     their operands), so the output is the fixture's output times 2^116,
//     bit for bit.
//   - All-negative Float32 (the fixture minus 5000): restored as data minus
//     its minimum, the minimum added back: the output equals the restore of
//     the shifted (non-negative) scene plus the offset, within float32
//     rounding of values near 5000 (2^-11 DN per operation: IEEE 754
//     binary32 has a 24-bit significand).
//   - Int32 at its minimum everywhere: the output is that value, not 0.
func TestRadiometryExtremes(t *testing.T) {
	dir := t.TempDir()
	m, p := band1(t)
	w, h := m.Width, m.Height
	var lo float32 = math.MaxFloat32
	for _, v := range p {
		lo = min(lo, v)
	}
	mk := func(name, dtype string, f func(v float32) float64) string {
		q := make([]float32, len(p))
		for i, v := range p {
			q[i] = float32(f(v))
		}
		path := filepath.Join(dir, name)
		writeScene(t, path, dtype, w, h, q)
		return path
	}
	plain := mk("plain.tif", "Float32", func(v float32) float64 { return float64(v) })
	const k = 116 // 4095 * 2^116 = 3.4e38 would overflow: the fixture's max is lower
	big := mk("big.tif", "Float32", func(v float32) float64 { return math.Ldexp(float64(v), k) })
	neg := mk("neg.tif", "Float32", func(v float32) float64 { return float64(v) - 5000 })
	shifted := mk("shifted.tif", "Float32", func(v float32) float64 { return float64(v) - float64(lo) })
	int32Min := mk("int32min.tif", "Int32", func(float32) float64 { return math.MinInt32 })

	ref, _, _ := restoreFloat(t, plain, filepath.Join(dir, "plain-out.tif"))
	got, stderr, md := restoreFloat(t, big, filepath.Join(dir, "big-out.tif"))
	if len(warnings(stderr)) != 1 || md["LIMPID_RADIOMETRY_SCALE"] == "" {
		t.Errorf("near 3e38: warnings %q, metadata scale %q", warnings(stderr), md["LIMPID_RADIOMETRY_SCALE"])
	}
	// Where the plain restore falls below 2^-100 (dark pixels restored to
	// almost 0) it reaches float32's subnormal range (below 2^-126), which
	// has fewer bits, while the scaled one does not: there the outputs agree
	// to 2^-100 of the plain units only (10^-30 DN against data of 10^3).
	tiny := math.Ldexp(1, -100)
	for i := range ref {
		want := math.Ldexp(float64(ref[i]), k)
		if math.Abs(float64(ref[i])) < tiny {
			if math.Abs(float64(got[i])-want) > math.Ldexp(tiny, k) {
				t.Fatalf("near 3e38: pixel %d is %g, want %g within 2^%d", i, got[i], want, k-100)
			}
		} else if float64(got[i]) != want {
			t.Fatalf("near 3e38: pixel %d is %g, want %g (the fixture's output times 2^%d)", i, got[i], want, k)
		}
	}

	// float32 rounding near 5000: a few ulps of 2^-11 each.
	const offsetTol = 4.0 / 2048
	base, _, _ := restoreFloat(t, shifted, filepath.Join(dir, "shifted-out.tif"))
	got, stderr, md = restoreFloat(t, neg, filepath.Join(dir, "neg-out.tif"))
	off := float64(lo) - 5000
	if ws := warnings(stderr); len(ws) != 1 || !strings.Contains(ws[0], "down to") || md["LIMPID_RADIOMETRY_OFFSET"] != strconv.FormatFloat(off, 'g', -1, 64) {
		t.Errorf("all negative: warnings %q, metadata offset %q, want %g", ws, md["LIMPID_RADIOMETRY_OFFSET"], off)
	}
	var sumIn, sumOut float64
	for i := range base {
		if d := math.Abs(float64(got[i]) - (float64(base[i]) + off)); d > offsetTol {
			t.Fatalf("all negative: pixel %d is %g, want %g + %g", i, got[i], base[i], off)
		}
		sumIn += float64(p[i]) - 5000
		sumOut += float64(got[i])
	}
	// EMS keeps the flux (Shepp & Vardi, IEEE TMI 1:113, 1982); the offset
	// adds n * offset to both sides. 1e-3 relative: the scene has no nodata
	// (the 1 % of TestStdinStdoutCOGReport is for the flux the PSF spills
	// across a nodata edge), the rest is float32 accumulation and the
	// tiles' blending (common practice, no source).
	if math.Abs(sumOut-sumIn) > 1e-3*math.Abs(sumIn) {
		t.Errorf("all negative: flux %g, input %g", sumOut, sumIn)
	}

	got, stderr, _ = restoreFloat(t, int32Min, filepath.Join(dir, "int32min-out.tif"))
	if len(warnings(stderr)) != 1 {
		t.Errorf("Int32 minimum: warnings %q", warnings(stderr))
	}
	for i, v := range got {
		if v != math.MinInt32 {
			t.Fatalf("Int32 minimum: pixel %d is %g, want %d", i, v, math.MinInt32)
		}
	}
	// Same type as the input: the value survives the integer output.
	code, _, stderr := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", "--smooth", "0.2", "--stop", "change", "--iterations", "5",
		int32Min, filepath.Join(dir, "int32min-same.tif"))
	if code != 0 {
		t.Fatalf("Int32 minimum, same type: exit %d: %s", code, stderr)
	}
	if _, planes, err := readAll(filepath.Join(dir, "int32min-same.tif")); err != nil || planes[0][0] != math.MinInt32 {
		t.Fatalf("Int32 minimum, same type: %v %v", err, planes[0][:1])
	}

	// A tile stream cannot be scanned first: negative tiles are refused
	// (exit 2, one line), not clamped to 0.
	packed := filepath.Join(dir, "neg.arrows")
	if code, _, stderr := limpid(t, nil, "tiles", "pack", neg, packed); code != 0 {
		t.Fatalf("pack: %d %s", code, stderr)
	}
	code, _, stderr = limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", "--smooth", "0.2", "--stop", "change", "--input-format", "arrow",
		"--output-format", "arrow", packed, filepath.Join(dir, "neg-out.arrows"))
	if code != 2 || len(strings.Split(strings.TrimSpace(stderr), "\n")) != 1 || !strings.Contains(stderr, "EMS restores values from 0") {
		t.Fatalf("negative stream: exit %d, stderr %s", code, stderr)
	}
}
