// Package draw holds the particle method's discrete samplers: an integer
// displacement from a 1-D kernel by inversion of its CDF (Move), the
// moving particles of a cloud by geometric gaps when few move (Jump), and a
// PSF tap by Walker's alias method (Alias). They take the caller's random
// bits or generator, so a particle system's stream decides every draw.
package draw
