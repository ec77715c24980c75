package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// The README's measured example of `limpid assess` sits between the
// markers numbersBegin (the figures) or tableBegin (the comparison table)
// and numbersEnd; `go test ./cmd/limpid -run TestREADMENumbers -update`
// regenerates both from the commands the README quotes.
const (
	numbersBegin = "<!-- numbers: assess (go test ./cmd/limpid -run TestREADMENumbers -update) -->\n"
	tableBegin   = "<!-- numbers: assess table (go test ./cmd/limpid -run TestREADMENumbers -update) -->\n"
	numbersEnd   = "<!-- /numbers -->"
)

// The numbers the README quotes for `limpid assess` are what the commands
// it describes give on the fixture: restore with the defaults, then assess
// against the reference, observed and restored side by side in one call.
// The observed figures of that call are those of assessing the observed
// scene as the "restored" input (the same pixels, the same function).
// Source: the project's contract that documented figures are reproducible
// (README); no outside source.
func TestREADMENumbers(t *testing.T) {
	skipUnderRace(t)
	dir := t.TempDir()
	ref, obs, res := fixture("reference.tif"), fixture("observed.tif"), filepath.Join(dir, "restored.tif")
	if code, _, errs := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", obs, res); code != 0 {
		t.Fatalf("restore: %s", errs)
	}
	assessBand := func(restored string) (map[string]any, string) {
		j := filepath.Join(dir, "a.json")
		code, stdout, errs := limpid(t, nil, "assess", "--reference", ref, "--data-range", "4095", "--json", j, obs, restored)
		if code != 0 {
			t.Fatalf("assess: %s", errs)
		}
		var doc struct{ Bands []map[string]any }
		if err := json.Unmarshal(mustRead(t, j), &doc); err != nil {
			t.Fatal(err)
		}
		return doc.Bands[2], stdout // red, band 3
	}
	r, stdout := assessBand(res)
	f := func(m map[string]any, k string) float64 {
		v, ok := m[k].(float64)
		if !ok {
			t.Fatalf("assess JSON has no number %q", k)
		}
		return v
	}
	sub := func(k string) map[string]any {
		m, ok := r[k].(map[string]any)
		if !ok {
			t.Fatalf("assess JSON has no object %q", k)
		}
		return m
	}
	o, g := sub("observed_vs_reference"), sub("gain")
	// Tolerance: the same float64 sums over the same pixels in the same
	// order; only a different nodata mask would move them.
	const sameTol = 1e-12
	if self, _ := assessBand(obs); math.Abs(f(self, "psnr")-f(o, "psnr")) > sameTol || math.Abs(f(self, "ssim")-f(o, "ssim")) > sameTol {
		t.Errorf("observed side by side: PSNR %v, SSIM %v; assessed alone: %v, %v", o["psnr"], o["ssim"], self["psnr"], self["ssim"])
	}
	text := fmt.Sprintf("red band (3): PSNR %.2f -> %.2f dB (gain %+.2f), SSIM %.3f -> %.3f (%+.3f), RMSE %.1f -> %.1f DN,\n"+
		"MTF50 %.3f -> %.3f cycles/pixel (gain %.2f), ringing %.3f -> %.3f, flux change %+.3f %%;\n"+
		"the noise measure reads %.1f -> %.1f DN.\n",
		f(o, "psnr"), f(r, "psnr"), f(g, "psnr"), f(o, "ssim"), f(r, "ssim"), f(g, "ssim"), f(o, "rmse"), f(r, "rmse"),
		f(r, "mtf50_observed"), f(r, "mtf50_restored"), f(r, "sharpness_gain"), f(r, "ringing_observed"), f(r, "ringing_restored"),
		100*f(r, "flux_change"), f(r, "noise_observed"), f(r, "noise_restored"))
	// The comparison table's header and band 3's rows, as printed.
	table := "```text\n"
	tables := strings.SplitN(stdout, "\n\n", 2)
	if len(tables) != 2 {
		t.Fatalf("assess printed no comparison table:\n%s", stdout)
	}
	for i, l := range strings.Split(strings.TrimSpace(tables[1]), "\n") {
		if i == 0 || strings.HasPrefix(l, "3 ") {
			table += l + "\n"
		}
	}
	table += "```\n"
	readme := filepath.Join("..", "..", "README.md")
	doc := string(mustRead(t, readme))
	changed := false
	for _, blk := range []struct{ begin, text string }{{numbersBegin, text}, {tableBegin, table}} {
		a := strings.Index(doc, blk.begin)
		b := a + strings.Index(doc[max(a, 0):], numbersEnd)
		if a < 0 || b < a {
			t.Fatalf("README has no %q ... %q block", blk.begin, numbersEnd)
		}
		if got := doc[a+len(blk.begin) : b]; got != blk.text {
			if *update {
				doc, changed = doc[:a+len(blk.begin)]+blk.text+doc[b:], true
				continue
			}
			t.Errorf("README quotes\n%s\nthe commands give\n%s(go test ./cmd/limpid -run TestREADMENumbers -update rewrites it)", got, blk.text)
		}
	}
	if changed {
		if err := os.WriteFile(readme, []byte(doc), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}
