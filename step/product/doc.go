// Package product holds the rules of limpid's output products that do not
// depend on a file format: the output's bands, data type and nodata, and the
// processing metadata every restored raster and standard-error raster
// carries (the contract the README documents under "What is kept and what
// is added"). Writers (the GDAL adapter, the stream assembler) apply them.
package product
