// Package plan is a scene plan: what a restoration decides from the whole
// scene (step.Decide: background, noise model, smoothing and stop per
// band), the settings, the tiling and the output's description, written
// once and applied later by any number of processes. It also assigns tiles
// to shards (Assign) and blends shards' tiles back into the scene (Merge)
// with the single run's arithmetic, so that the merged scene is the single
// run's bit for bit.
package plan
