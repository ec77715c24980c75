// Package settings is the record of what a band's final restoration pass
// ran with: its smoothing bandwidth, stop rule, iteration count or cap,
// tolerance and noise model, and how each was chosen. The engine fills it
// from the solvers it ran (step.Restore, step.Config.Applied), so the
// records of a product (the report, the LIMPID_* metadata, a restored tile
// stream's parameters, the HTML report) state the values that made it.
package settings
