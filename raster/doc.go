// Package raster holds limpid's pixel planes, scene metadata (georeferencing,
// nodata, band descriptions) and the GDAL adapter, the project's only cgo.
//
// Scenes are read and written in strips of full-width rows through the
// Reader and Writer interfaces, so memory is bounded by the strip, never by
// the scene height. GDAL handles are not shared between goroutines: the step
// funnels all raster I/O through one goroutine.
package raster
