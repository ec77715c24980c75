// Package draw holds the particle method's discrete samplers: an integer
// displacement from a 1-D kernel by inversion of its CDF, and a PSF tap by
// Walker's alias method. Both take the caller's random bits, so a particle
// system's stream decides every draw.
package draw
