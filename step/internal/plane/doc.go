// Package plane holds pure helpers on float32 planes (row-major, w x h)
// used by step's solvers: the relative L1 change of an iteration, a local
// root mean square over valid pixels (the noise error map's averaging) and
// the masked risk's taper (a raised-cosine weight on the chamfer distance
// to the nearest invalid pixel; Borgefors, CVGIP 34(3):344-371, 1986).
package plane
