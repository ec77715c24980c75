// Command choicebudget measures what the pixel budget of the automatic
// choice (step.Config.ChoiceBudget, DEVELOPERS.md "Automatic
// regularisation", "The cost of the choice") costs in fidelity and saves in
// time. On the tuning scenes (scripts/internal/tunescene) at -n pixels a
// side, restored in -tile pixel tiles so that the global choice runs on
// several sample tiles, it restores each scene twice with the defaults:
// once with the risk on the whole in-scene part of every sample tile (no
// budget), once with windows under -budget pixels per band, and reports
// both PSNRs against the reference (interior, 16 px margin), the choices
// and the wall-time ratio (one worker; ratios, the machine may be shared).
//
// Usage, from the repository root (several minutes on 2 cores):
//
//	go run ./scripts/choicebudget [-n 1024] [-tile 256] [-budget 262144] [-scenes SUBSTRING] [-out FILE.md]
//
// The defaults keep the proportion of the default run on a 2048 x 2048
// band (16 sample tiles of 512 pixels, windows of 256: a fifth of the
// pixels) at a quarter of the size. It reports, it does not fail.
package main
