package main

import (
	"bytes"
	"image"
	"image/png"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"limpid/raster/gdal"
)

// checkScaleBar finds the white scale bar of panel k (4 white rows inside a
// black frame near the bottom-left) and returns its length in pixels.
func checkScaleBar(img image.Image, x0, y int) int {
	n := 0
	for x := x0; x < img.Bounds().Dx(); x++ {
		r, g, b, _ := img.At(x, y).RGBA()
		if r>>8 != 255 || g>>8 != 255 || b>>8 != 255 {
			break
		}
		n++
	}
	return n
}

// TestRestoreQuicklook: the quicklook has observed | restored (| Monte Carlo
// error) panels of the scene crop, and its scale bar's length in pixels is
// its label's length divided by the pixel size of the geotransform.
// Source: GDAL's geotransform (gdalinfo -json: 10 m pixels for the fixture);
// the bar is the largest 1-2-5 length below a quarter of the panel (256 px
// -> 640 m -> 500 m = 50 pixels).
func TestRestoreQuicklook(t *testing.T) {
	dir := t.TempDir()
	gt := gdalinfo(t, fixture("observed.tif"))["geoTransform"].([]any)
	if gt[1].(float64) != 10 {
		t.Fatalf("fixture pixel size %v", gt[1])
	}
	for _, c := range []struct {
		name   string
		args   []string
		panels int
	}{
		{"grid", []string{"--smooth", "0.3", "--stop", "change", "--iterations", "10"}, 2},
		{"particle", []string{"--method", "particle", "--smooth", "0.2", "--bands", "3", "--particles-per-pixel", "2", "--iterations", "4", "--batches", "2", "--uncertainty", filepath.Join(dir, "u.tif")}, 3},
	} {
		ql, out := filepath.Join(dir, c.name+".png"), filepath.Join(dir, c.name+".tif")
		args := append([]string{"restore", "--psf", "gaussian:sigma=1.4", "--quicklook", ql}, c.args...)
		code, _, errs := limpid(t, nil, append(args, fixture("observed.tif"), out)...)
		if code != 0 {
			t.Fatalf("%s: exit %d: %s", c.name, code, errs)
		}
		img, err := png.Decode(bytes.NewReader(mustRead(t, ql)))
		if err != nil {
			t.Fatal(err)
		}
		const crop, gap, head = 256, 8, 18
		if b := img.Bounds(); b.Dx() != c.panels*crop+(c.panels-1)*gap || b.Dy() != crop+head {
			t.Fatalf("%s: quicklook %v", c.name, b)
		}
		for k := 0; k < c.panels; k++ {
			// The bar's white rows start one row below its frame's top.
			if n := checkScaleBar(img, k*(crop+gap)+6, head+crop-8); n != 50 {
				t.Errorf("%s panel %d: scale bar %d pixels, want 50 (500 m at 10 m)", c.name, k+1, n)
			}
		}
	}
	// Refusals: stdout OUTPUT, Arrow output, the OUTPUT itself.
	for _, a := range [][]string{
		{"restore", "--psf", "gaussian:sigma=1", "--quicklook", filepath.Join(dir, "q.png"), fixture("observed.tif"), "-"},
		{"restore", "--psf", "gaussian:sigma=1", "--smooth", "0.2", "--stop", "change", "--output-format", "arrow", "--report-html", filepath.Join(dir, "r.html"), fixture("observed.tif"), filepath.Join(dir, "o.arrow")},
		{"restore", "--psf", "gaussian:sigma=1", "--quicklook", filepath.Join(dir, "same.tif"), fixture("observed.tif"), filepath.Join(dir, "same.tif")},
	} {
		code, _, errs := limpid(t, nil, a...)
		if code != 2 || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%v: exit %d, %q", a, code, errs)
		}
	}
}

// chromium returns Debian's headless browser; under CI (CI=true) its absence
// fails the test (make deps installs it), elsewhere it skips.
func chromium(t *testing.T) string {
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("CI") == "true" {
		t.Fatal("chromium is not installed (make deps installs the Debian package chromium)")
	}
	t.Skip("chromium is not installed; run make deps")
	return ""
}

func runChromium(t *testing.T, bin string, args ...string) (stdout, stderr string) {
	t.Helper()
	base := []string{"--headless", "--no-sandbox", "--disable-gpu", "--enable-logging=stderr", "--v=0",
		"--user-data-dir=" + t.TempDir(), "--virtual-time-budget=5000"}
	var o, e bytes.Buffer
	cmd := exec.Command(bin, append(base, args...)...)
	cmd.Stdout, cmd.Stderr = &o, &e
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium %v: %v\n%s", args, err, e.String())
	}
	return o.String(), e.String()
}

var consoleLine = regexp.MustCompile(`(?m)^.*:CONSOLE[:(].*$`)

// TestRestoreHTMLReport: the report is one self-contained page that a real
// browser loads without console messages and in which every image decodes.
// Source: Debian's Chromium (headless), the HTML standard's
// HTMLImageElement.naturalWidth (0 for an image that failed to decode) and
// Chromium's console logging on stderr (--enable-logging=stderr), checked
// against a page that writes to the console on purpose.
func TestRestoreHTMLReport(t *testing.T) {
	bin := chromium(t)
	dir := t.TempDir()
	page, out := filepath.Join(dir, "r.html"), filepath.Join(dir, "o.tif")
	// A 128 x 128 crop of the fixture's red band keeps the automatic
	// choice (whose risk curves the page plots) cheap under -race.
	small := cropFixture(t, dir, 128)
	code, _, errs := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", "--tile", "64", "--bands", "3", "--report-html", page, small, out)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	html := string(mustRead(t, page))
	for _, bad := range []string{"<script", "http://", "https://", "<link", "@import"} {
		if strings.Contains(html, bad) {
			t.Errorf("the page is not self-contained: it contains %q", bad)
		}
	}
	for _, want := range []string{"CAUTION: restoration can invent detail", "gaussian:sigma=1.4", "Per-band metrics", "risk estimate per iteration, summed"} {
		if !strings.Contains(html, want) {
			t.Errorf("the page lacks %q", want)
		}
	}
	if n := strings.Count(html, `src="data:image/png;base64,`); n != 3 {
		t.Errorf("%d inline PNG images, want 3", n)
	}
	// The harness sees console output: a page that logs an error.
	probe := filepath.Join(dir, "probe.html")
	os.WriteFile(probe, []byte(`<!DOCTYPE html><html><body><script>console.error("probe-console-error")</script></body></html>`), 0o644)
	if _, e := runChromium(t, bin, "--dump-dom", "file://"+probe); !strings.Contains(e, "probe-console-error") || !consoleLine.MatchString(e) {
		t.Fatalf("chromium's console logging was not seen on stderr:\n%s", e)
	}
	// The page as shipped: no console message at all (it has no script).
	_, e := runChromium(t, bin, "--dump-dom", "file://"+page)
	if m := consoleLine.FindAllString(e, -1); len(m) > 0 {
		t.Errorf("console messages loading the report:\n%s", strings.Join(m, "\n"))
	}
	// Image decoding: a test copy with a probe that lists naturalWidth.
	probeJS := `<script>window.addEventListener("load",function(){var r=[];for(var i=0;i<document.images.length;i++){var m=document.images[i];r.push(m.id+":"+(m.complete&&m.naturalWidth>0?"ok":"broken")+":"+m.naturalWidth);}var p=document.createElement("pre");p.id="imgcheck";p.textContent=r.join(" ");document.body.appendChild(p);});</script>`
	checked := filepath.Join(dir, "checked.html")
	os.WriteFile(checked, []byte(strings.Replace(html, "</body>", probeJS+"</body>", 1)), 0o644)
	dom, e := runChromium(t, bin, "--dump-dom", "file://"+checked)
	if m := consoleLine.FindAllString(e, -1); len(m) > 0 {
		t.Errorf("console messages:\n%s", strings.Join(m, "\n"))
	}
	res := regexp.MustCompile(`<pre id="imgcheck">([^<]*)</pre>`).FindStringSubmatch(dom)
	if res == nil {
		t.Fatalf("the image probe did not run; DOM:\n%.500s", dom)
	}
	imgs := strings.Fields(res[1])
	if len(imgs) != 3 {
		t.Errorf("images: %q", res[1])
	}
	for _, s := range imgs {
		if !strings.Contains(s, ":ok:") {
			t.Errorf("image did not decode: %s", s)
		}
	}
	// A screenshot of the page decodes and is not blank.
	shot := filepath.Join(dir, "shot.png")
	runChromium(t, bin, "--window-size=1200,2400", "--screenshot="+shot, "file://"+page)
	img, err := png.Decode(bytes.NewReader(mustRead(t, shot)))
	if err != nil {
		t.Fatalf("screenshot: %v", err)
	}
	colours := map[uint32]bool{}
	for y := 0; y < img.Bounds().Dy(); y += 7 {
		for x := 0; x < img.Bounds().Dx(); x += 7 {
			r, g, b, _ := img.At(x, y).RGBA()
			colours[r>>8<<16|g>>8<<8|b>>8] = true
		}
	}
	if len(colours) < 50 {
		t.Errorf("screenshot has %d colours: blank page?", len(colours))
	}
}

// cropFixture writes the centre n x n pixels of the observed fixture's
// bands, georeferencing kept.
func cropFixture(t *testing.T, dir string, n int) string {
	t.Helper()
	m, planes, err := readAll(fixture("observed.tif"))
	if err != nil {
		t.Fatal(err)
	}
	W := m.Width
	x0, y0 := (W-n)/2, (m.Height-n)/2
	out := make([][]float32, len(planes))
	for b, p := range planes {
		out[b] = make([]float32, n*n)
		for y := 0; y < n; y++ {
			copy(out[b][y*n:(y+1)*n], p[(y0+y)*W+x0:(y0+y)*W+x0+n])
		}
	}
	g := m.Geo.Transform
	m.Geo.Transform[0] = g[0] + float64(x0)*g[1]
	m.Geo.Transform[3] = g[3] + float64(y0)*g[5]
	m.Width, m.Height = n, n
	path := filepath.Join(dir, "crop.tif")
	if err := gdal.WriteFloat32(path, m, out, gdal.WriteOptions{Format: gdal.GTiff, DataType: m.DataType, NoData: 0, HasNoData: true}); err != nil {
		t.Fatal(err)
	}
	return path
}

// A figure that cannot be drawn must not cost the product: with the
// particle method (whose final change can be 0, which a log axis cannot
// show) --report-html writes the page with a note in the figure's place and
// one warning line, and the run succeeds. Source: the project's error
// contract (README "Exit codes": a product that was written is kept);
// no outside source.
func TestHTMLReportSurvivesAnUndrawableFigure(t *testing.T) {
	dir := t.TempDir()
	in := cropFixture(t, dir, 64)
	page, out := filepath.Join(dir, "p.html"), filepath.Join(dir, "p.tif")
	code, _, errs := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", "--method", "particle", "--smooth", "0.2",
		"--bands", "2", "--particles-per-pixel", "2", "--iterations", "4", "--batches", "2", "--report-html", page, in, out)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	html := string(mustRead(t, page))
	if !strings.Contains(html, `id="psf"`) {
		t.Error("the PSF figure is missing although it can be drawn")
	}
	if strings.Contains(html, `id="convergence"`) == strings.Contains(html, `id="convergence-note"`) {
		t.Error("the convergence section must hold either the figure or the note, not both or neither")
	}
	if strings.Contains(html, `id="convergence-note"`) && !strings.Contains(errs, "limpid: warning: --report-html: the convergence figure is left out") {
		t.Errorf("a left-out figure needs a warning line, stderr: %s", errs)
	}
	if _, err := os.Stat(out); err != nil {
		t.Errorf("the product is missing: %v", err)
	}
}
