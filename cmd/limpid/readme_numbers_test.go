package main

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// readmeNumbers is the README's measured example of `limpid assess`,
// between these markers; `go test ./cmd/limpid -run TestREADMENumbers
// -update` regenerates it from the commands the README quotes.
const (
	numbersBegin = "<!-- numbers: assess (go test ./cmd/limpid -run TestREADMENumbers -update) -->\n"
	numbersEnd   = "<!-- /numbers -->"
)

// The numbers the README quotes for `limpid assess` are what the commands
// it describes give on the fixture: restore with the defaults, then assess
// against the reference (observed figures: assess of the observed scene
// against itself as the "restored" input). Source: the project's contract
// that documented figures are reproducible (README); no outside source.
func TestREADMENumbers(t *testing.T) {
	skipUnderRace(t)
	dir := t.TempDir()
	ref, obs, res := fixture("reference.tif"), fixture("observed.tif"), filepath.Join(dir, "restored.tif")
	if code, _, errs := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1.4", obs, res); code != 0 {
		t.Fatalf("restore: %s", errs)
	}
	band := func(restored string) map[string]any {
		j := filepath.Join(dir, "a.json")
		if code, _, errs := limpid(t, nil, "assess", "--reference", ref, "--data-range", "4095", "--json", j, obs, restored); code != 0 {
			t.Fatalf("assess: %s", errs)
		}
		var doc struct{ Bands []map[string]any }
		if err := json.Unmarshal(mustRead(t, j), &doc); err != nil {
			t.Fatal(err)
		}
		return doc.Bands[2] // red, band 3
	}
	o, r := band(obs), band(res)
	f := func(m map[string]any, k string) float64 {
		v, ok := m[k].(float64)
		if !ok {
			t.Fatalf("assess JSON has no number %q", k)
		}
		return v
	}
	text := fmt.Sprintf("red band (3): PSNR %.2f -> %.2f dB, SSIM %.3f -> %.3f, MTF50 %.3f -> %.3f\n"+
		"cycles/pixel (gain %.2f), ringing %.3f -> %.3f, flux change %+.3f %%; the noise measure reads %.1f -> %.1f DN.\n",
		f(o, "psnr"), f(r, "psnr"), f(o, "ssim"), f(r, "ssim"), f(r, "mtf50_observed"), f(r, "mtf50_restored"),
		f(r, "sharpness_gain"), f(r, "ringing_observed"), f(r, "ringing_restored"), 100*f(r, "flux_change"),
		f(r, "noise_observed"), f(r, "noise_restored"))
	readme := filepath.Join("..", "..", "README.md")
	doc := string(mustRead(t, readme))
	a, b := strings.Index(doc, numbersBegin), strings.Index(doc, numbersEnd)
	if a < 0 || b < a {
		t.Fatalf("README has no %q ... %q block", numbersBegin, numbersEnd)
	}
	if got := doc[a+len(numbersBegin) : b]; got != text {
		if *update {
			if err := os.WriteFile(readme, []byte(doc[:a+len(numbersBegin)]+text+doc[b:]), 0o644); err != nil {
				t.Fatal(err)
			}
			return
		}
		t.Errorf("README quotes\n%s\nthe commands give\n%s(go test ./cmd/limpid -run TestREADMENumbers -update rewrites it)", got, text)
	}
}
