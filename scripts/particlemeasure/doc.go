// Command particlemeasure is the measurement behind the particle method's
// defaults and the README's advice (DEVELOPERS.md, "Particle EMS"): cost
// and accuracy of grid and particle EMS on two invented scenes (the
// Brannock Vale red band of the demo, and Quillhaven harbour at night in
// photon counts), then the Monte Carlo error and efficiency of variants at
// K = 16 on a 96 x 96 crop of each.
//
// Usage, from the repository root (a few minutes on one core):
//
//	go run ./scripts/particlemeasure [-out FILE.md] [-n 256]
//
// It prints the markdown tables (and writes them to -out).
package main
