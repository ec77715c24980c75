package watch

// Kind tells the passes of a run apart. The values are the Name of the
// engine's solver of that pass (step's noise sampler and chooser), so the
// engine passes solver.Name() through; Final is the restoring pass.
type Kind string

const (
	// Noise is the pass that samples the noise model on the sample tiles.
	Noise Kind = "noise"
	// Choice is a pass of the automatic choice of smoothing and stop: one
	// candidate bandwidth on the sample tiles (a global choice), or every
	// candidate on every tile (a per-tile choice).
	Choice Kind = "choose"
	// Final is the pass that restores and writes the scene.
	Final Kind = "restore"
)

// Pass describes a pass as it starts.
type Pass struct {
	Kind Kind
	// What is a short description for a log line, e.g. "choosing
	// smoothing and stop: bandwidth 0.3 on 16 sample tiles".
	What string
	// Tiles is the work of the pass: the tiles it solves, counted once
	// per band.
	Tiles int
}

// Watcher receives a run's events in order and never concurrently: Start
// for each pass, then Done after each tile of it.
type Watcher interface {
	Start(p Pass)
	Done(tiles int)
}
