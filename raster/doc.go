// Package raster holds limpid's plain scene types and pixel helpers, in pure
// Go (no cgo, no GDAL): the scene description (Meta, Geo, BandInfo), the
// strip interfaces Reader and Writer, the in-memory scene Mem, the boundary
// rule Mirror (half-sample symmetric reflection, the even extension of the
// DCT-II: Martucci, IEEE Trans. Signal Process. 42(5):1038-1051, 1994), the
// sample test Valid, TypeRange and ErrInput.
//
// Scenes are read and written in strips of full-width rows through the
// Reader and Writer interfaces, so memory is bounded by the strip, never by
// the scene height. Data type and colour interpretation names, nodata and the
// affine geotransform follow GDAL's data model (GDAL 3.6 "Raster Data Model"),
// so that the adapter in limpid/raster/gdal maps them one to one; this
// package itself never calls GDAL, and the restoration engine (limpid/step),
// the PSF package and the tile-stream contract build and test without
// libgdal.
package raster
