package gdal

import (
	"errors"
	"fmt"
	"strings"
	"sync"

	"github.com/airbusgeo/godal"
)

var registerOnce sync.Once

// Init registers GDAL's drivers once and bounds GDAL's block cache
// (DefaultCacheMax, unless GDAL_CACHEMAX is set) so that memory stays
// bounded by limpid's strips (GDAL's default is 5 % of RAM).
func Init() {
	registerOnce.Do(func() {
		godal.RegisterAll()
		limitCache()
	})
}

// quiet turns GDAL warnings into no error; failures stay errors.
var quiet = godal.ErrLogger(func(ec godal.ErrorCategory, code int, msg string) error {
	if ec > godal.CE_Warning {
		return errors.New(strings.TrimSpace(msg))
	}
	return nil
})

var supportedTypes = map[godal.DataType]string{
	godal.Byte: "Byte", godal.UInt16: "UInt16", godal.Int16: "Int16",
	godal.UInt32: "UInt32", godal.Int32: "Int32", godal.Float32: "Float32", godal.Float64: "Float64",
}

func gdalType(name string) (godal.DataType, bool) {
	for t, n := range supportedTypes {
		if n == name {
			return t, true
		}
	}
	return godal.Unknown, false
}

// LoadKernel reads a single-band raster as kernel weights (for psf.Env).
func LoadKernel(path string) (int, int, []float64, error) {
	Init()
	ds, err := godal.Open(path, godal.RasterOnly(), quiet)
	if err != nil {
		return 0, 0, nil, fmt.Errorf("not a text matrix nor a raster GDAL can read: %v", err)
	}
	defer ds.Close()
	st := ds.Structure()
	if st.NBands != 1 {
		return 0, 0, nil, fmt.Errorf("has %d bands, a kernel needs exactly 1", st.NBands)
	}
	if st.SizeX > 1025 || st.SizeY > 1025 {
		return 0, 0, nil, fmt.Errorf("is %dx%d, larger than a kernel may be (1025)", st.SizeX, st.SizeY)
	}
	if _, ok := supportedTypes[st.DataType]; !ok {
		return 0, 0, nil, fmt.Errorf("has data type %s; kernels must be real-valued", st.DataType.String())
	}
	data := make([]float64, st.SizeX*st.SizeY)
	if err := ds.Bands()[0].Read(0, 0, data, st.SizeX, st.SizeY, quiet); err != nil {
		return 0, 0, nil, err
	}
	return st.SizeX, st.SizeY, data, nil
}

// EPSGToWKT returns the WKT of an EPSG coordinate reference system.
func EPSGToWKT(code int) (string, error) {
	Init()
	sr, err := godal.NewSpatialRefFromEPSG(code, quiet)
	if err != nil {
		return "", fmt.Errorf("raster: EPSG:%d: %w", code, err)
	}
	defer sr.Close()
	return sr.WKT(quiet)
}
