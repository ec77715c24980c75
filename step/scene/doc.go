// Package scene renders the invented scenes of limpid's demo and tests and
// their simulated observations (Degrade, Poisson).
//
// The scenes: a fictional
// farming valley ("Brannock Vale") and the degradation that turns it into an
// observation. The reference follows limpid's PSF convention: it is the
// scene as an ideal sensor on the same pixel grid records it (each pixel the
// mean of a 4x4 supersampled patch, nothing else), and the observation is the
// reference convolved with the point-sampled PSF, plus noise.
package scene
