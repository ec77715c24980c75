package gdal

/*
#cgo pkg-config: gdal
#include <stdlib.h>
#include "gdal.h"
#include "cpl_conv.h"
*/
import "C"

import "unsafe"

// DefaultCacheMax is the size of GDAL's block cache (bytes) that Init sets
// when GDAL_CACHEMAX is not given. GDAL's own default is 5 % of the RAM
// (1.2 GB on a 24 GB machine), which the cache fills on a large scene: that
// is memory limpid's strips do not need. 64 MiB holds, for a 20000-pixel-wide
// scene, the input strip's blocks (Float32: 3 rows of 256 x 256 blocks, 60
// MiB) or the output's partly written row of blocks, so a block is not
// written twice.
const DefaultCacheMax = 64 << 20

// CacheMax is the size of GDAL's block cache in bytes (GDALGetCacheMax64).
func CacheMax() int64 { return int64(C.GDALGetCacheMax64()) }

// limitCache sets GDAL's block cache to DefaultCacheMax unless the user set
// GDAL_CACHEMAX (environment or GDAL configuration option), which GDAL
// reads itself the first time the cache size is asked for.
// Source: https://gdal.org/user/configoptions.html (GDAL_CACHEMAX, the block
// cache size in megabytes; GDALSetCacheMax64 takes bytes, gdal.h).
func limitCache() {
	key := C.CString("GDAL_CACHEMAX")
	defer C.free(unsafe.Pointer(key))
	if C.CPLGetConfigOption(key, nil) != nil {
		return
	}
	C.GDALSetCacheMax64(C.GIntBig(DefaultCacheMax))
}
