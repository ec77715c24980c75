package raster

import "errors"

// ErrInput is wrapped by errors caused by the user's input (exit code 2).
var ErrInput = errors.New("bad input")

// Geo is a scene's georeferencing.
type Geo struct {
	// Transform is GDAL's affine geotransform; HasTransform is false for
	// scenes without one (not an error).
	Transform    [6]float64
	HasTransform bool
	// WKT is the CRS as WKT, "" when there is none.
	WKT string
}

// BandInfo describes one band.
type BandInfo struct {
	Description string
	// ColorInterp is GDAL's colour interpretation name ("Red", "Gray", ...).
	ColorInterp string
	Metadata    map[string]string
	NoData      float64
	HasNoData   bool
}

// Meta describes a scene: size, type, georeferencing, bands and metadata.
type Meta struct {
	Width, Height int
	// DataType is GDAL's type name: Byte, Int8, UInt16, Int16, UInt32, Int32,
	// Float32, Float64.
	DataType string
	Geo      Geo
	Bands    []BandInfo
	Metadata map[string]string
}

// Reader reads full-width rows of a scene.
type Reader interface {
	Meta() Meta
	// ReadRows reads rows [y0, y1) of the given 0-based bands into dst
	// (dst[i] holds (y1-y0)*Width values for bands[i]).
	ReadRows(y0, y1 int, bands []int, dst [][]float32) error
}

// Writer receives full-width rows in increasing order. NaN marks invalid
// pixels; the writer maps them to the output nodata value.
type Writer interface {
	WriteRows(y0, y1 int, src [][]float32) error
	// Commit finishes the output and moves it to its final place.
	Commit() error
	// Abort removes everything written so far.
	Abort()
}

// TypeRange returns the representable range of an integer GDAL type and
// whether the type is an integer type.
func TypeRange(dtype string) (lo, hi float64, integer bool) {
	switch dtype {
	case "Byte":
		return 0, 255, true
	case "Int8":
		return -128, 127, true
	case "UInt16":
		return 0, 65535, true
	case "Int16":
		return -32768, 32767, true
	case "UInt32":
		return 0, 4294967295, true
	case "Int32":
		return -2147483648, 2147483647, true
	}
	return 0, 0, false
}
