// Package watch is how the engine tells its caller how far a run has got,
// without knowing how (or whether) that is shown: step.Restore and
// step.Decide call a Watcher when a pass over the scene starts (the noise
// pass, each pass of the automatic choice, the final restoring pass) and
// after each tile of it; cmd/limpid draws one progress display from those
// events. The package holds only the event types, so that the engine
// imports nothing about terminals.
package watch
