package gdal

/*
#cgo pkg-config: gdal
#include <stdlib.h>
#include "gdal.h"
#include "gdal_utils.h"
#include "cpl_conv.h"
#include "cpl_error.h"

// limpidProgress is GDAL's progress callback: returning FALSE makes the
// operation stop with CPLE_UserInterrupt. arg points at the stop flag.
static int limpidProgress(double done, const char *msg, void *arg) {
	(void)done; (void)msg;
	return __atomic_load_n((int *)arg, __ATOMIC_SEQ_CST) == 0;
}

// limpidTranslate runs GDALTranslate(dst, src, argv) with the stop flag
// checked at every progress step. It returns 0 on success; otherwise *msg
// holds GDAL's last error (free it with VSIFree).
static int limpidTranslate(const char *dst, const char *src, char **argv, int *stop, char **msg) {
	CPLPushErrorHandler(CPLQuietErrorHandler);
	CPLErrorReset();
	int ok = 0;
	GDALDatasetH in = GDALOpen(src, GA_ReadOnly);
	if (in != NULL) {
		GDALTranslateOptions *o = GDALTranslateOptionsNew(argv, NULL);
		if (o != NULL) {
			GDALTranslateOptionsSetProgress(o, limpidProgress, stop);
			int usage = 0;
			GDALDatasetH out = GDALTranslate(dst, in, o, &usage);
			GDALTranslateOptionsFree(o);
			if (out != NULL && usage == 0) {
				CPLErrorReset();
				GDALClose(out);
				ok = CPLGetLastErrorType() < CE_Failure;
			} else if (out != NULL) {
				GDALClose(out);
			}
		}
		GDALClose(in);
	}
	if (!ok) {
		*msg = CPLStrdup(CPLGetLastErrorMsg());
	}
	CPLPopErrorHandler();
	return ok ? 0 : 1;
}
*/
import "C"

import (
	"context"
	"errors"
	"strings"
	"sync/atomic"
	"unsafe"
)

// translate runs GDAL's gdal_translate library function from src to dst
// with args and stops it when ctx is done: GDAL calls a progress function
// at every block and overview step, which returns FALSE once ctx is done
// (GDALProgressFunc: "returns TRUE if the operation should continue or
// FALSE if the user has requested a cancel", GDAL API documentation).
// godal v0.0.18's Translate takes no progress function, hence this call of
// GDAL's C API. On cancel it returns ctx's error; dst may be left
// half-written (the caller removes it).
func translate(ctx context.Context, dst, src string, args []string) error {
	stop := (*C.int)(C.calloc(1, C.size_t(unsafe.Sizeof(C.int(0)))))
	defer C.free(unsafe.Pointer(stop))
	cargs := make([]*C.char, len(args)+1)
	for i, a := range args {
		cargs[i] = C.CString(a)
	}
	defer func() {
		for _, p := range cargs[:len(args)] {
			C.free(unsafe.Pointer(p))
		}
	}()
	// cargs lives in C memory so that C may keep the pointer array.
	argv := (**C.char)(C.calloc(C.size_t(len(cargs)), C.size_t(unsafe.Sizeof((*C.char)(nil)))))
	defer C.free(unsafe.Pointer(argv))
	copy(unsafe.Slice(argv, len(cargs)), cargs)
	cdst, csrc := C.CString(dst), C.CString(src)
	defer C.free(unsafe.Pointer(cdst))
	defer C.free(unsafe.Pointer(csrc))

	done := make(chan struct{})
	defer close(done)
	go func() {
		select {
		case <-ctx.Done():
			atomic.StoreInt32((*int32)(unsafe.Pointer(stop)), 1)
		case <-done:
		}
	}()
	var msg *C.char
	if C.limpidTranslate(cdst, csrc, argv, stop, &msg) == 0 {
		return nil
	}
	text := ""
	if msg != nil {
		text = strings.TrimSpace(C.GoString(msg))
		C.VSIFree(unsafe.Pointer(msg))
	}
	if ctx.Err() != nil {
		return ctx.Err()
	}
	if text == "" {
		text = "GDAL failed without a message"
	}
	return errors.New(text)
}
