// Package steptest holds test fixtures shared by the restoration engine's
// packages (scenes of the invented demo scenario). Tests only.
package steptest
