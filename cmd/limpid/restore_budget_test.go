package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"testing"
)

// --choice-pixels sets the automatic choice's pixel budget per band and 0
// takes the sample tiles whole; the report's choice.pixels_used says which.
// On the 256^2 fixture in 128-pixel tiles (2 x 2 sample tiles) a budget of
// 4 x 128^2 gives four 128^2 windows (their valid pixels are counted). Source: project contract (README,
// "--choice-pixels"; issue 13: the choice samples by a pixel budget).
func TestChoicePixelsFlag(t *testing.T) {
	dir := t.TempDir()
	used := func(budget string) int {
		rep := filepath.Join(dir, "r"+budget+".json")
		code, _, stderr := limpid(t, nil, "restore", "--psf", "gaussian:sigma=0.7", "--tile", "128", "--bands", "1",
			"--choice-pixels", budget, "--report", rep, fixture("observed.tif"), filepath.Join(dir, "o"+budget+".tif"))
		if code != 0 {
			t.Fatalf("--choice-pixels %s: exit %d: %s", budget, code, stderr)
		}
		b, err := os.ReadFile(rep)
		if err != nil {
			t.Fatal(err)
		}
		var r struct {
			Restoration struct {
				Bands []struct {
					Choice struct {
						PixelsUsed int `json:"pixels_used"`
						TilesUsed  int `json:"tiles_used"`
					} `json:"choice"`
				} `json:"bands"`
			} `json:"restoration"`
		}
		if err := json.Unmarshal(b, &r); err != nil {
			t.Fatal(err)
		}
		if len(r.Restoration.Bands) != 1 || r.Restoration.Bands[0].Choice.TilesUsed != 4 {
			t.Fatalf("--choice-pixels %s: want one band chosen on 4 sample tiles, report %s", budget, b)
		}
		return r.Restoration.Bands[0].Choice.PixelsUsed
	}
	const budget = 4 * 128 * 128
	// pixels_used counts valid pixels: the fixture's nodata footprint
	// takes a few percent of the windows.
	if got := used("65536"); got > budget || got < budget*9/10 {
		t.Errorf("--choice-pixels 65536: the risk ran on %d valid pixels, want four 128^2 windows (%d, less the nodata)", got, budget)
	}
	if got := used("0"); got <= budget {
		t.Errorf("--choice-pixels 0: the risk ran on %d pixels, want the sample tiles whole (more than %d)", got, budget)
	}
}
