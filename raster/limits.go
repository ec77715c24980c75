package raster

import (
	"fmt"
	"strconv"
	"strings"
)

// Size limits on declared raster sizes. A raster's header declares its size;
// a few bytes can declare 10^12 pixels. Each command checks the declared size
// against these limits before it allocates anything from it (the tile-stream
// reader has its own, arrowio's Max* constants).
const (
	// DefaultMaxPixels bounds width x height x bands of every raster
	// INPUT (2^32 = 4,294,967,296: a 65536 x 65536 band, or ten bands of
	// 20000 x 20000). The streamed commands hold strips of rows, at most
	// this many pixels.
	DefaultMaxPixels int64 = 1 << 32
	// DefaultMaxWholePixels bounds the pixels a command holds whole: psf
	// measure --auto and restore --psf auto hold the measured band
	// (width x height), assess holds every band of each of its inputs
	// (width x height x bands). 2^29 = 536,870,912 pixels, 2 GiB as
	// float32 (a 23170 x 23170 band).
	DefaultMaxWholePixels int64 = 1 << 29
)

// Environment variables that raise (or lower) the limits; read by
// LimitsFrom only.
const (
	EnvMaxPixels      = "LIMPID_MAX_PIXELS"
	EnvMaxWholePixels = "LIMPID_MAX_WHOLE_PIXELS"
)

// Limits are the size limits in force.
type Limits struct {
	// Pixels bounds width x height x bands of a raster input.
	Pixels int64
	// Whole bounds the pixels a command holds whole.
	Whole int64
}

// LimitsFrom returns the default limits, replaced by the values of
// EnvMaxPixels and EnvMaxWholePixels when getenv returns them non-empty
// (os.Getenv in the program). A value that is not a whole number >= 1 is an
// ErrInput error naming the variable.
func LimitsFrom(getenv func(string) string) (Limits, error) {
	l := Limits{Pixels: DefaultMaxPixels, Whole: DefaultMaxWholePixels}
	for _, v := range []struct {
		name string
		dst  *int64
	}{{EnvMaxPixels, &l.Pixels}, {EnvMaxWholePixels, &l.Whole}} {
		s := strings.TrimSpace(getenv(v.name))
		if s == "" {
			continue
		}
		n, err := strconv.ParseInt(s, 10, 64)
		if err != nil || n < 1 {
			return l, fmt.Errorf("%w: %s=%q: give a whole number of pixels >= 1", ErrInput, v.name, getenv(v.name))
		}
		*v.dst = n
	}
	return l, nil
}

// pixels multiplies sizes, saturating at the largest int64 (never wraps).
func pixels(f ...int) int64 {
	p := int64(1)
	for _, v := range f {
		if v <= 0 {
			return 0
		}
		if p > (1<<63-1)/int64(v) {
			return 1<<63 - 1
		}
		p *= int64(v)
	}
	return p
}

// CheckScene refuses a raster input named name whose declared width x
// height x bands exceeds l.Pixels, with one ErrInput line naming the size
// and the limit.
func (l Limits) CheckScene(name string, width, height, bands int) error {
	if n := pixels(width, height, bands); n > l.Pixels {
		return fmt.Errorf("%w: %s is %d x %d pixels x %d bands = %d pixels, over the limit of %d (set %s to raise it)",
			ErrInput, name, width, height, bands, n, l.Pixels, EnvMaxPixels)
	}
	return nil
}

// CheckWhole refuses to hold width x height x planes pixels of the input
// name whole (what names them, e.g. "band 1 (the --auto edge search)") when
// that exceeds l.Whole, with one ErrInput line naming the size and the
// limit.
func (l Limits) CheckWhole(name, what string, width, height, planes int) error {
	if n := pixels(width, height, planes); n > l.Whole {
		return fmt.Errorf("%w: %s: %s is read whole: %d x %d pixels x %d = %d pixels, over the limit of %d (set %s to raise it)",
			ErrInput, name, what, width, height, planes, n, l.Whole, EnvMaxWholePixels)
	}
	return nil
}
