// Package simulate is limpid simulate: blur a scene with a PSF, add
// Poisson-Gaussian sensor noise and quantise, streamed in strips.
//
// Simulation: the degradation that turns a sharp scene into an observation,
// for validating restoration settings on data whose truth is known. It
// follows limpid's PSF convention (the input is the scene as an ideal sensor
// on the same grid records it; the PSF operator is the Conv restore uses,
// half-sample symmetric boundaries), then adds sensor noise and quantises.
package simulate
