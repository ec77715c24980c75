// Package rowio is the row I/O of the raster route: strips of full-width
// source rows read ahead on their own goroutine (Ahead), and finished rows
// written on theirs (Writer), each through a fixed number of buffers, so
// that reading and compressing overlap the solving while the memory stays
// a few strips, whatever the scene's height.
package rowio
