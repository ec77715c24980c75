package main

import (
	"strings"
	"testing"
)

// The demo tells the truth about each method: the valley with the default
// restore and its noise error map, the particle method on the photon-limited
// harbour, where neither method's product scores below the observed input
// (PSNR against the demo's own reference; Source: the PSNR definition,
// 10 log10(L^2 / MSE), and the scenes' known truth). A small size keeps it
// to a few seconds.
func TestDemoShowsEachMethodWhereItServes(t *testing.T) {
	dir := t.TempDir()
	code, stdout, stderr := limpid(t, nil, "demo", "--out", dir, "--size", "128", "--particles-per-pixel", "4", "--workers", "2")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, stderr)
	}
	for _, want := range []string{"mean noise error", "Quillhaven harbour at night", "grid", "particle", "MC ", "noise_error.tif", "harbour_error_particle.tif"} {
		if !strings.Contains(stdout, want) {
			t.Errorf("the demo's summary lacks %q:\n%s", want, stdout)
		}
	}
	if strings.Contains(stdout, "do not use") {
		t.Errorf("a demo product scores below its observed input:\n%s", stdout)
	}
}
