package main

import (
	"bytes"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"testing"

	"limpid/psf"
	"limpid/raster/gdal"
	"limpid/step"
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

// TestRestoreQuicklook: the quicklook has observed | restored (| error map)
// panels of the scene crop, and its scale bar's length in pixels is its
// label's length divided by the pixel size of the geotransform. The error
// panel is titled by what the --uncertainty map holds: the grid method's
// noise error, the particle method's total error (README, "The noise error
// map").
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
		title  string // the error panel's
	}{
		{"grid", []string{"--smooth", "0.3", "--stop", "change", "--iterations", "10"}, 2, ""},
		{"grid-uncertainty", []string{"--smooth", "0.3", "--stop", "change", "--iterations", "10", "--bands", "3", "--uncertainty", filepath.Join(dir, "g.tif")}, 3, "noise error (DN)"},
		{"particle", []string{"--method", "particle", "--smooth", "0.2", "--bands", "3", "--particles-per-pixel", "2", "--iterations", "4", "--batches", "2", "--uncertainty", filepath.Join(dir, "u.tif")}, 3,
			"total error: noise + Monte Carlo (DN)"},
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
		const crop, gap = 256, 8
		head := img.Bounds().Dy() - crop
		// A header for the title, the composite's bands, the stretch and the
		// panel titles: four lines of 13 px text at least.
		if b := img.Bounds(); b.Dx() != c.panels*crop+(c.panels-1)*gap || head < 4*13 {
			t.Fatalf("%s: quicklook %v (header %d px)", c.name, b, head)
		}
		if c.panels == 3 {
			if !hasGreyRamp(img, 2*(crop+gap), crop, head) {
				t.Errorf("%s: no black-to-white bar above the error panel", c.name)
			}
			if !hasTitle(img, 2*(crop+gap), crop, head, c.title) {
				t.Errorf("%s: the error panel is not titled %q", c.name, c.title)
			}
		} else {
			checkMidGrey(t, img, head)
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

// hasTitle reports whether the header above the panel at x0 (w pixels
// wide) shows title in the panel titles' colour at some baseline: every
// pixel quicklook.go's drawText inks for it matches, and the pixels just
// past its end are white (so a longer title does not match).
func hasTitle(img image.Image, x0, w, head int, title string) bool {
	ink := color.RGBA{0, 0, 120, 255}
	for y := 10; y < head; y++ {
		want := image.NewRGBA(image.Rect(0, 0, w, head))
		drawText(want, 2, y, title, ink)
		ok, inked := true, 0
		for py := 0; py < head && ok; py++ {
			for px := 0; px < w && ok; px++ {
				c := want.RGBAAt(px, py)
				r, g, b, _ := img.At(x0+px, py).RGBA()
				switch {
				case c.A != 0:
					inked++
					ok = uint8(r>>8) == c.R && uint8(g>>8) == c.G && uint8(b>>8) == c.B
				case py > y-11 && py <= y && px >= 2+len(title)*qlChar && px < 2+(len(title)+2)*qlChar:
					ok = r>>8 == 255 && g>>8 == 255 && b>>8 == 255
				}
			}
		}
		if ok && inked > 0 {
			return true
		}
	}
	return false
}

// hasGreyRamp reports whether some header row above the panel at x0 (w
// pixels wide) holds a grey ramp from black to white, left to right (the
// error panel's key).
func hasGreyRamp(img image.Image, x0, w, head int) bool {
	for y := 0; y < head; y++ {
		prev, ok := -1, true
		first, last := -1, -1
		for x := x0 + 4; x < x0+w-4 && ok; x++ {
			r, g, b, _ := img.At(x, y).RGBA()
			if r != g || g != b || int(r>>8) < prev {
				ok = false
			}
			prev = int(r >> 8)
			if first < 0 {
				first = prev
			}
			last = prev
		}
		if ok && first <= 5 && last >= 250 {
			return true
		}
	}
	return false
}

// checkMidGrey: in the observed panel of the fixture's quicklook, the
// median valid pixel of each channel is well above black and the luma of
// the median pixel is a mid grey. The fixture's tarp and point targets
// (about 3.5 % of its pixels near 3400 DN, its fields 170-950 DN) put a
// plain 2-98 % stretch's white on the tarp: its luma was 23 of 255 (red
// 15, green 29, blue 10) before the outlier rule.
// Source: common practice, no source (a linear 2-98 % stretch should show
// the scene's bulk mid-range); luma weights 0.299, 0.587, 0.114 from ITU-R
// BT.601.
func checkMidGrey(t *testing.T, img image.Image, head int) {
	t.Helper()
	_, planes, err := readAll(fixture("observed.tif"))
	if err != nil {
		t.Fatal(err)
	}
	const n = 256 // the fixture is the whole crop
	var ch [3][]float64
	for i := 0; i < n*n; i++ {
		if planes[0][i] == 0 { // nodata 0 in every band
			continue
		}
		r, g, b, _ := img.At(i%n, head+i/n).RGBA()
		ch[0], ch[1], ch[2] = append(ch[0], float64(r>>8)), append(ch[1], float64(g>>8)), append(ch[2], float64(b>>8))
	}
	var med [3]float64
	for c := range ch {
		sort.Float64s(ch[c])
		med[c] = ch[c][len(ch[c])/2]
		// Not near black: at least a fifth of full scale.
		// common practice, no source
		if med[c] < 0.2*255 {
			t.Errorf("channel %d: the median valid pixel shows as %.0f of 255 (near black)", c, med[c])
		}
	}
	// Mid grey: the luma within the middle half of the scale.
	// common practice, no source
	if y := 0.299*med[0] + 0.587*med[1] + 0.114*med[2]; y < 0.25*255 || y > 0.75*255 {
		t.Errorf("luma of the median pixel %.0f of 255, want a mid grey (64-191)", y)
	}
}

// TestQuicklookStretchSetsOutliersAside: a scene whose bulk spans 200-800 DN
// with 5 % of its pixels in a bright cluster at 3400 DN (a tarp) gets a
// stretch whose white lies in the bulk; without the cluster, the stretch is
// the plain 2-98 % one. Source: common practice, no source (2-98 %
// percentile stretch); Hampel's outlier identifier (JASA 69(346):383, 1974)
// for setting the cluster aside.
func TestQuicklookStretchSetsOutliersAside(t *testing.T) {
	const n = 100 * 100
	mk := func(bright int) *qlScene {
		p := make([]float32, n)
		for i := range p {
			p[i] = float32(200 + 600*(i%1000)/999) // uniform 200-800
			if i%100 < bright {
				p[i] = 3400
			}
		}
		valid := make([]bool, n)
		for i := range valid {
			valid[i] = true
		}
		return &qlScene{cw: 100, ch: 100, obs: [][]float32{p}, res: [][]float32{p}, valid: valid}
	}
	lo, hi, out := mk(5).stretch()
	if hi[0] > 800 || lo[0] < 200 || out[0] < 0.049 || out[0] > 0.051 {
		t.Errorf("with a 5 %% bright cluster: stretch %.0f-%.0f, %.3f set aside; want within 200-800, 0.05", lo[0], hi[0], out[0])
	}
	// Nearest-rank percentiles of 200 + 600 k/999: 2 % -> 212, 98 % -> 788.
	lo, hi, out = mk(0).stretch()
	if math.Abs(lo[0]-212) > 1 || math.Abs(hi[0]-788) > 1 || out[0] != 0 {
		t.Errorf("without outliers: stretch %.1f-%.1f, %.3f set aside; want 212-788, 0", lo[0], hi[0], out[0])
	}
}

// TestQuicklookHeader: the header names the scene, the PSF, the method,
// the bands of the colour composite by number and name, and the stretch in
// DN.
func TestQuicklookHeader(t *testing.T) {
	s, err := cropScene(fixture("observed.tif"), []int{0, 1, 2, 3}, fixture("observed.tif"), "", qlInfo{Scene: "observed.tif", PSF: "PSF gaussian:sigma=1.4", Method: "EMS grid"})
	if err != nil {
		t.Fatal(err)
	}
	lo, hi, out := s.stretch()
	text := strings.Join(s.header(lo, hi, out), "\n")
	for _, want := range []string{"observed.tif", "PSF gaussian:sigma=1.4", "EMS grid", "R, G, B = band 3 (red), band 2 (green), band 1 (blue)", "linear stretch (DN)", "R\u00a0"} {
		if !strings.Contains(text, want) {
			t.Errorf("header lacks %q:\n%s", want, text)
		}
	}
	for _, l := range wrapText(text, 40) {
		if len(l) > 40 && strings.Contains(l, " ") {
			t.Errorf("wrapped line longer than 40: %q", l)
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
	// Loudly: go test prints skips only with -v.
	fmt.Fprintln(os.Stderr, "SKIP: chromium is not installed, the browser checks of the HTML report did not run (Debian: apt-get install --no-install-recommends chromium)")
	t.Skip("chromium is not installed (Debian: apt-get install --no-install-recommends chromium)")
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

// TestRestoreHTMLReport: on a grid run and a particle run, the report is one
// self-contained page that a real browser loads without any console
// message, in which every image decodes and the text a reader needs is
// present: section titles, units in the metric columns, band names, a
// convergence caption that matches the figure drawn, the caution as one
// paragraph.
// Source: Debian's Chromium (headless), the HTML standard's
// HTMLImageElement.naturalWidth (0 for an image that failed to decode) and
// Chromium's console logging on stderr (--enable-logging=stderr), checked
// against a page that writes to the console on purpose.
func TestRestoreHTMLReport(t *testing.T) {
	bin := chromium(t)
	dir := t.TempDir()
	// A 128 x 128 crop of the fixture in 64-pixel tiles keeps the automatic
	// choice (whose risk curves the page plots) cheap under -race, with
	// several tiles for the left convergence panel.
	small := cropFixture(t, dir, 128)
	// The harness sees console output: a page that logs an error.
	probe := filepath.Join(dir, "probe.html")
	os.WriteFile(probe, []byte(`<!DOCTYPE html><html><body><script>console.error("probe-console-error")</script></body></html>`), 0o644)
	if _, e := runChromium(t, bin, "--dump-dom", "file://"+probe); !strings.Contains(e, "probe-console-error") || !consoleLine.MatchString(e) {
		t.Fatalf("chromium's console logging was not seen on stderr:\n%s", e)
	}
	common := []string{"PSF and its MTF", "Per-band metrics", "Convergence", "gaussian:sigma=1.4",
		// Units in every metric column.
		"noise obs (DN)", "noise res (DN)", "MTF50 obs (cycles/pixel)", "MTF50 res (cycles/pixel)",
		"ringing obs (% of step)", "flux change (%)", "variance (DN²)",
		// The MTF figure's caption: kernel, model, system, Nyquist.
		"pixel aperture |sinc f|", "Nyquist, 0.5 cycles/pixel",
		// The caution reflowed into one line of text.
		"Keep the original scene, label every product as restored",
		// The risk panel's caption, with the iterations used.
		"risk estimate per iteration, summed over the", "the dashed vertical line the iterations used"}
	for _, c := range []struct {
		name  string
		args  []string
		want  []string
		width int // the convergence figure: two panels
	}{
		{"grid", []string{"--bands", "3", "--uncertainty", filepath.Join(dir, "g.tif")}, []string{"EMS (grid)", `<td class="l">red</td>`, "Left: red's relative L1 change per iteration",
			"Observed | restored | noise error (DN)"}, 2},
		{"particle", []string{"--bands", "3,2", "--method", "particle", "--particles-per-pixel", "2", "--iterations", "6", "--batches", "2",
			"--uncertainty", filepath.Join(dir, "u.tif")},
			[]string{"EMS (particle)", `<td class="l">red</td>`, `<td class="l">green</td>`, "Observed | restored | total error: noise + Monte Carlo (DN)",
				"every tile ran 6 iterations", "particle method runs the fixed --iterations count"}, 2},
	} {
		t.Run(c.name, func(t *testing.T) {
			page, out := filepath.Join(dir, c.name+".html"), filepath.Join(dir, c.name+".tif")
			args := append([]string{"restore", "--psf", "gaussian:sigma=1.4", "--tile", "64", "--report-html", page}, c.args...)
			code, _, errs := limpid(t, nil, append(args, small, out)...)
			if code != 0 {
				t.Fatalf("exit %d: %s", code, errs)
			}
			if strings.Contains(errs, "warning") {
				t.Errorf("warnings: %s", errs)
			}
			html := string(mustRead(t, page))
			for _, bad := range []string{"<script", "http://", "https://", "<link", "@import"} {
				if strings.Contains(html, bad) {
					t.Errorf("the page is not self-contained: it contains %q", bad)
				}
			}
			if n := strings.Count(html, `src="data:image/png;base64,`); n != 3 {
				t.Errorf("%d inline PNG images, want 3 (PSF, quicklook, convergence)", n)
			}
			// Image decoding and text, as the browser sees them: a test copy
			// with a probe that lists naturalWidth.
			probeJS := `<script>window.addEventListener("load",function(){var r=[];for(var i=0;i<document.images.length;i++){var m=document.images[i];r.push(m.id+":"+(m.complete&&m.naturalWidth>0?"ok":"broken")+":"+m.naturalWidth);}var p=document.createElement("pre");p.id="imgcheck";p.textContent=r.join(" ");document.body.appendChild(p);});</script>`
			checked := filepath.Join(dir, c.name+"-checked.html")
			os.WriteFile(checked, []byte(strings.Replace(html, "</body>", probeJS+"</body>", 1)), 0o644)
			dom, e := runChromium(t, bin, "--dump-dom", "file://"+checked)
			if m := consoleLine.FindAllString(e, -1); len(m) > 0 {
				t.Errorf("console messages:\n%s", strings.Join(m, "\n"))
			}
			for _, want := range append(append([]string{}, common...), c.want...) {
				if !strings.Contains(dom, want) {
					t.Errorf("the page lacks %q", want)
				}
			}
			if regexp.MustCompile(`CAUTION:[^<]*\n`).MatchString(dom) {
				t.Error("the caution is hard-wrapped")
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
		})
	}
	// A screenshot of the grid page decodes and is not blank.
	shot := filepath.Join(dir, "shot.png")
	runChromium(t, bin, "--window-size=1200,2400", "--screenshot="+shot, "file://"+filepath.Join(dir, "grid.html"))
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
	if strings.Contains(html, "could not be drawn") != strings.Contains(errs, "limpid: warning: --report-html: the convergence figure is left out") {
		t.Errorf("a figure that could not be drawn needs a warning line (and only then), stderr: %s", errs)
	}
	// One tile and fixed smoothing: nothing worth a plot, so no empty
	// figure: the note says why, and it is not a warning.
	if !strings.Contains(html, "One tile per band") || !strings.Contains(html, "No risk curves") {
		t.Errorf("a one-tile run with fixed smoothing should say why there is no convergence figure")
	}
	if _, err := os.Stat(out); err != nil {
		t.Errorf("the product is missing: %v", err)
	}
}

// TestRiskPlotReachesTheIterationsUsed: when the iterations used (the
// tiles' median risk minimum) lie beyond the summed curve, the axis reaches
// them and the caption says why. Source: the report's own definition of the
// choice (step.CandidateReport: BestIterations is the weighted median of the
// tiles' minima, Curve is summed over the iterations every tile evaluated);
// no outside source.
func TestRiskPlotReachesTheIterationsUsed(t *testing.T) {
	var curve [][2]float64
	for k := 1; k <= 55; k++ {
		curve = append(curve, [2]float64{float64(k), 1e6 / float64(k)})
	}
	rep := &step.Report{Method: "grid", Bands: []step.BandReport{{Band: 1, Choice: &step.Choice{Smooth: 0, Iterations: 70, TilesUsed: 4,
		Candidates: []step.CandidateReport{{Smooth: 0, BestIterations: 70, Curve: curve}}}}}}
	pr, caption, err := riskPlot(rep, []string{"red"})
	if err != nil || pr == nil {
		t.Fatalf("riskPlot: %v", err)
	}
	if pr.X.Max < 70 {
		t.Errorf("x axis ends at %g, before the iterations used (70)", pr.X.Max)
	}
	for _, want := range []string{"red's risk estimate", "iterations used (70)", "lie beyond the summed curve (it ends at 55)"} {
		if !strings.Contains(caption, want) {
			t.Errorf("caption lacks %q: %s", want, caption)
		}
	}
	if png, _, err := convergencePNG(rep, []string{"red"}); err != nil || len(png) == 0 {
		t.Errorf("convergence figure: %v", err)
	}
}

// TestQuicklookStretchOnTheFixture: on the demo-like fixture, the stretch's
// white sets the tarp aside (about 3.5 % of the pixels near 3400 DN) but
// keeps the bright parcels: the red channel's 90th percentile of the valid
// pixels is 886 DN and its 95th 944 DN (numpy.percentile under Debian's
// python3-gdal, run on testdata/valley256/observed.tif band 3).
// Source: common practice, no source (a quicklook's white shows the
// brightest land cover, not calibration targets).
func TestQuicklookStretchOnTheFixture(t *testing.T) {
	s, err := cropScene(fixture("observed.tif"), []int{0, 1, 2, 3}, fixture("observed.tif"), "", qlInfo{})
	if err != nil {
		t.Fatal(err)
	}
	_, hi, out := s.stretch()
	if hi[0] < 886 || hi[0] > 2000 {
		t.Errorf("red white point %.0f DN: want between the parcels (886) and the tarp (3400)", hi[0])
	}
	// The tarp and point targets, about 3.5 % (measured as above: 3.5 % of
	// the red band's valid pixels exceed 2000 DN), are what is set aside.
	if out[0] < 0.03 || out[0] > 0.04 {
		t.Errorf("red: %.3f of the values set aside, want the tarp's 0.035", out[0])
	}
}

// TestMTFPlotCurves: for gaussian:sigma=1 the MTF panel draws the kernel,
// the model, the system and Nyquist, names the kernel and model as one
// curve along both axes only where they coincide, and quotes the values at
// Nyquist:
//   - model exp(-2 pi^2 sigma^2 f^2) at f = 0.5: exp(-pi^2/2) = 0.0072
//     (the Gaussian's Fourier transform);
//   - system = model x |sinc 0.5| = 0.0072 x 2/pi = 0.0046 (the square
//     pixel aperture's MTF, |sin(pi f)/(pi f)|);
//   - kernel: the sampled Gaussian's transfer is the sum of the model's
//     aliases G(f - k) (Poisson summation), at Nyquist about 2 G(0.5) =
//     0.014, twice the model's: so the legend must not merge them.
//
// Source: the Fourier transform of a Gaussian and the Poisson summation
// formula (derived above); sinc pixel aperture MTF (Boreman, "Modulation
// Transfer Function in Optical and Electro-Optical Systems", SPIE 2001,
// from memory).
func TestMTFPlotCurves(t *testing.T) {
	k, err := psf.Parse("gaussian:sigma=1", psf.Env{})
	if err != nil {
		t.Fatal(err)
	}
	pm, legend, err := mtfPlot(k, "gaussian:sigma=1")
	if err != nil {
		t.Fatal(err)
	}
	text := strings.Join(legend, "\n")
	for _, want := range []string{"kernel, fx = fy (0.014 at Nyquist)", "model fx = fy\n", "system fx = fy = model x aperture |sinc f| (0.0046 at Nyquist)", "Nyquist, 0.5 cycles/pixel"} {
		if !strings.Contains(text+"\n", want) {
			t.Errorf("legend lacks %q:\n%s", want, text)
		}
	}
	if pm.X.Max < 0.5 {
		t.Errorf("frequency axis ends at %g, before Nyquist", pm.X.Max)
	}
	// sigma 1.4: aliasing is negligible (2 G(0.5) = 1.3e-4), kernel and
	// model coincide and the legend says so.
	k, _ = psf.Parse("gaussian:sigma=1.4", psf.Env{})
	if _, legend, _ = mtfPlot(k, "gaussian:sigma=1.4"); !strings.Contains(strings.Join(legend, "\n"), "model fx = fy (= kernel up to Nyquist)") {
		t.Errorf("coinciding kernel and model not named as such: %q", legend)
	}
	// A kernel file: no model, the system from the kernel.
	if _, legend, _ = mtfPlot(k, "kernel:k.txt"); !strings.Contains(strings.Join(legend, "\n"), "system fx = kernel x aperture |sinc f|") {
		t.Errorf("kernel: spec: %q", legend)
	}
}
