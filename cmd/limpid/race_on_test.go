//go:build race

package main

// raceEnabled: the race detector slows the documentation checks (whole
// example commands) about sixfold; make test runs them in a separate pass
// without it.
const raceEnabled = true
