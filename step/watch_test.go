package step

import (
	"math/rand/v2"
	"testing"

	"limpid/psf"
	"limpid/step/conv"
	"limpid/step/scene"
	"limpid/step/watch"
)

// recorder is a watch.Watcher that keeps the events.
type recorder struct {
	passes []watch.Pass
	done   []int // tiles done per pass
}

func (r *recorder) Start(p watch.Pass) { r.passes, r.done = append(r.passes, p), append(r.done, 0) }
func (r *recorder) Done(n int)         { r.done[len(r.done)-1] += n }

// The watch events of Restore follow the run's passes: with the automatic
// choice, the noise pass, one to len(AutoSmooths) choice passes (global) or
// one (per tile), then the final pass over every tile; each pass reports
// exactly the tiles it announced. Source: the package contract (step/watch
// doc comment and Config.Watch); the pass order is the engine's own
// (regularise, DEVELOPERS.md "Architecture").
func TestWatchEvents(t *testing.T) {
	const n, tile = 96, 32 // 3 x 3 tiles
	k, _ := psf.GaussianIso(1.2)
	bands, _ := scene.ValleyReference(n, n)
	valid := make([]bool, n*n)
	for i := range valid {
		valid[i] = true
	}
	obs := scene.Degrade(bands[2], valid, n, n, conv.New(k), scene.Sensor{Gain: 0.3, Read: 3}, rand.New(rand.NewPCG(3, 4)))
	for _, choose := range []Choose{ChooseGlobal, ChoosePerTile} {
		rec := &recorder{}
		restorePlane(t, obs, n, Config{PSF: k, Workers: 2, Tile: tile, SmoothAuto: true, Stop: StopAuto, Iterations: 30, Choose: choose, Watch: rec})
		ps := rec.passes
		if len(ps) < 3 || ps[0].Kind != watch.Noise || ps[len(ps)-1].Kind != watch.Final {
			t.Fatalf("%s: passes %+v: want noise, choice..., final", choose, ps)
		}
		choices := ps[1 : len(ps)-1]
		maxChoices := len(AutoSmooths)
		if choose == ChoosePerTile {
			maxChoices = 1
		}
		if len(choices) > maxChoices {
			t.Errorf("%s: %d choice passes, at most %d", choose, len(choices), maxChoices)
		}
		for i, p := range choices {
			if p.Kind != watch.Choice || p.What == "" || p.Tiles <= 0 {
				t.Errorf("%s: choice pass %d is %+v", choose, i, p)
			}
		}
		if choose == ChoosePerTile && choices[0].Tiles != 9 {
			t.Errorf("per-tile choice: %d tiles, want every tile (9)", choices[0].Tiles)
		}
		if f := ps[len(ps)-1]; f.Tiles != 9 {
			t.Errorf("%s: final pass of %d tiles, want 9", choose, f.Tiles)
		}
		for i, p := range ps {
			if rec.done[i] != p.Tiles {
				t.Errorf("%s: pass %d (%s) announced %d tiles, reported %d", choose, i, p.Kind, p.Tiles, rec.done[i])
			}
		}
	}
}
