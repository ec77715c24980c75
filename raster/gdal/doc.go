// Package gdal is limpid's GDAL adapter, the only cgo in the module: it opens
// any raster GDAL can read as a raster.Reader (Open), writes the products as
// a raster.Writer (Create: a tiled, DEFLATE-compressed GeoTIFF, finished as a
// Cloud Optimized GeoTIFF on request, through GDAL's C API so that the copy
// can be canceled: cog.go), reads raster kernels (LoadKernel) and
// resolves EPSG codes (EPSGToWKT).
//
// Verified with GDAL 3.6.2 through github.com/airbusgeo/godal v0.0.18. The
// files it writes follow the OGC GeoTIFF 1.1 standard (OGC 19-008r4) and,
// with Format COG, the OGC Cloud Optimized GeoTIFF 1.0 standard (OGC
// 21-026), made by GDAL's COG driver from a finished GeoTIFF (GDAL 3.6's
// COG driver only copies).
//
// Outputs are written into a private temporary directory (limpid/raster/
// scratch: in the target directory, or in the system's temporary directory
// for stdout, a FIFO or a character device) and moved into place or copied
// to the stream on Commit, so a failed run leaves nothing at the output
// path and a FIFO or device is never replaced by a file. GDAL datasets are not shared between goroutines: callers funnel all
// raster I/O through one goroutine. Error messages keep the "raster:" prefix
// they had before the adapter moved into this package, so the command's
// error lines do not change.
//
// The package is named gdal, not gdalio: inside it the binding keeps its own
// name godal, and callers read gdal.Open, gdal.Create, gdal.Reader and
// gdal.Writer without stutter; no limpid package imports another binding
// named gdal.
package gdal
