package step

import (
	"testing"

	"limpid/step/settings"
)

// checkApplied: the band's record of what its final pass applied agrees
// with the choice the engine reported and with the iterations every tile
// actually ran (a fixed count is run by every tile with signal; a change or
// discrepancy stop stays within its cap). A project requirement (issue 16:
// records state what was done), no outside source.
func checkApplied(t *testing.T, cfg Config, b BandReport) {
	t.Helper()
	a, ch := b.Applied, b.Choice
	if a == nil {
		t.Fatal("no applied settings recorded")
	}
	fallback := b.Noise != nil && b.Noise.A+b.Noise.B <= 0
	switch {
	case fallback:
		want := settings.Band{Smooth: cfg.Smooth, SmoothFrom: settings.Fallback, Stop: settings.StopChange, Iterations: min(cfg.Iterations, DefaultIterations),
			IterationsFrom: settings.Fallback, Tolerance: DefaultTolerance}
		if a.String() != want.String() || a.Tolerance != want.Tolerance {
			t.Errorf("fallback applied %+v, want %+v", a, want)
		}
	case cfg.Stop == StopDiscrepancy:
		if a.Stop != settings.StopDiscrepancy || a.Noise == nil || a.Noise.A != b.Noise.A || a.Noise.B != b.Noise.B || a.Noise.Tau != DiscrepancyTau ||
			a.Iterations != cfg.Iterations || a.Smooth != cfg.Smooth || a.SmoothFrom != settings.Given {
			t.Errorf("discrepancy applied %+v (noise %+v), band noise %+v", a, a.Noise, b.Noise)
		}
	default:
		if a.Stop != settings.StopFixed || a.Smooth != ch.Smooth || a.Iterations != ch.Iterations || a.SmoothFrom != settings.Auto || a.IterationsFrom != settings.Auto {
			t.Errorf("applied %+v, choice smooth %g, %d iterations", a, ch.Smooth, ch.Iterations)
		}
	}
	perTile := map[[2]int]int{}
	if ch != nil && ch.TileChoices != nil {
		if len(a.Tiles) != len(ch.TileChoices) {
			t.Fatalf("%d tiles applied, %d chosen", len(a.Tiles), len(ch.TileChoices))
		}
		for i, tc := range ch.TileChoices {
			if at := a.Tiles[i]; at.Col != tc.Col || at.Row != tc.Row || at.Smooth != tc.Smooth || at.Iterations != tc.Iterations {
				t.Errorf("tile %d applied %+v, chosen %+v", i, at, tc)
			}
			perTile[[2]int{tc.Col, tc.Row}] = tc.Iterations
		}
	}
	for _, tr := range b.Tiles {
		want, fixed := a.Iterations, a.Stop == settings.StopFixed
		if n, ok := perTile[[2]int{tr.Col, tr.Row}]; ok {
			want = n
		}
		if !tr.Flat && (fixed && tr.Iterations != want || !fixed && tr.Iterations > want) {
			t.Errorf("tile (%d,%d) ran %d iterations; the record says %s", tr.Col, tr.Row, tr.Iterations, a.StopText())
		}
	}
}
