package gdal

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"runtime/debug"
	"sort"

	"github.com/airbusgeo/godal"

	"limpid/raster"
)

// Format is an output container.
type Format string

const (
	// GTiff is a tiled, DEFLATE-compressed GeoTIFF (BIGTIFF=IF_SAFER).
	GTiff Format = "gtiff"
	// COG is a Cloud Optimized GeoTIFF made by GDAL's COG driver.
	COG Format = "cog"
)

// WriteOptions configures a Writer.
type WriteOptions struct {
	Format Format
	// DataType of the output; integer types are rounded to nearest and
	// clamped to the type's range.
	DataType string
	// NoData written where the step returns NaN; HasNoData false writes NaN
	// (float types) or leaves the value as is.
	NoData    float64
	HasNoData bool
	// Stdout, when set, receives the finished file instead of a path.
	Stdout io.Writer
}

// Writer writes a GeoTIFF or COG under a temporary name and moves it to
// its final path (or copies it to stdout) on Commit.
type Writer struct {
	ds      *godal.Dataset
	final   string
	tmp     string
	tmpCOG  string
	opts    WriteOptions
	meta    raster.Meta
	buf     []float32
	buf64   []float64
	lo, hi  float64
	integer bool
	closed  bool
}

var _ raster.Writer = (*Writer)(nil)

// Create prepares an output for a scene described by meta (size,
// georeferencing, band descriptions and metadata are copied).
func Create(path string, meta raster.Meta, opts WriteOptions) (*Writer, error) {
	Init()
	dt, ok := gdalType(opts.DataType)
	if !ok {
		return nil, fmt.Errorf("%w: output data type %q is not supported", raster.ErrInput, opts.DataType)
	}
	w := &Writer{final: path, opts: opts, meta: meta}
	w.lo, w.hi, w.integer = raster.TypeRange(opts.DataType)
	dir := os.TempDir()
	if opts.Stdout == nil {
		dir = filepath.Dir(path)
	}
	f, err := os.CreateTemp(dir, ".limpid-*.tif")
	if err != nil {
		return nil, fmt.Errorf("%w: output %s: cannot create a file in %s: %v", raster.ErrInput, path, dir, errors.Unwrap(err))
	}
	w.tmp = f.Name()
	f.Close()
	os.Chmod(w.tmp, 0o644) // CreateTemp makes 0600; products are ordinary files
	pred := "PREDICTOR=2"
	if !w.integer {
		pred = "PREDICTOR=3"
	}
	co := []string{"TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE", pred, "BIGTIFF=IF_SAFER"}
	if len(meta.Bands) > 1 {
		co = append(co, "INTERLEAVE=BAND")
	}
	ds, err := godal.Create(godal.GTiff, w.tmp, len(meta.Bands), dt, meta.Width, meta.Height, godal.CreationOption(co...), quiet)
	if err != nil {
		os.Remove(w.tmp)
		return nil, fmt.Errorf("raster: creating %s: %w", path, err)
	}
	w.ds = ds
	if err := w.writeMeta(); err != nil {
		w.Abort()
		return nil, err
	}
	return w, nil
}

func colorInterpByName(name string) godal.ColorInterp {
	for c := godal.CIUndefined; c < godal.CIMax; c++ {
		if c.Name() == name {
			return c
		}
	}
	return godal.CIUndefined
}

func (w *Writer) writeMeta() error {
	m := w.meta
	if m.Geo.HasTransform {
		if err := w.ds.SetGeoTransform(m.Geo.Transform, quiet); err != nil {
			return fmt.Errorf("raster: geotransform: %w", err)
		}
	}
	if m.Geo.WKT != "" {
		if err := w.ds.SetProjection(m.Geo.WKT, quiet); err != nil {
			return fmt.Errorf("raster: CRS: %w", err)
		}
	}
	for _, k := range sortedKeys(m.Metadata) {
		if err := w.ds.SetMetadata(k, m.Metadata[k], quiet); err != nil {
			return fmt.Errorf("raster: metadata %s: %w", k, err)
		}
	}
	for i, b := range w.ds.Bands() {
		bi := m.Bands[i]
		if bi.Description != "" {
			if err := b.SetDescription(bi.Description, quiet); err != nil {
				return fmt.Errorf("raster: band %d description: %w", i+1, err)
			}
		}
		if bi.ColorInterp != "" {
			if err := b.SetColorInterp(colorInterpByName(bi.ColorInterp), quiet); err != nil {
				return fmt.Errorf("raster: band %d colour interpretation: %w", i+1, err)
			}
		}
		for _, k := range sortedKeys(bi.Metadata) {
			if err := b.SetMetadata(k, bi.Metadata[k], quiet); err != nil {
				return fmt.Errorf("raster: band %d metadata %s: %w", i+1, k, err)
			}
		}
		if w.opts.HasNoData {
			if err := b.SetNoData(w.opts.NoData, quiet); err != nil {
				return fmt.Errorf("raster: band %d nodata: %w", i+1, err)
			}
		}
	}
	return nil
}

func sortedKeys(m map[string]string) []string {
	k := make([]string, 0, len(m))
	for s := range m {
		k = append(k, s)
	}
	sort.Strings(k)
	return k
}

// writeChunk bounds the rows WriteRows converts and hands to GDAL at a time
// to about this many pixels (4 MiB of float32), so that its conversion
// buffer does not grow with the scene's width times the strip's height.
const writeChunk = 1 << 20

// WriteRows implements raster.Writer: NaN becomes nodata, integer outputs are
// rounded to nearest and clamped. The rows go to GDAL in chunks of whole rows
// (writeChunk).
func (w *Writer) WriteRows(y0, y1 int, src [][]float32) error {
	W := w.meta.Width
	step := max(1, writeChunk/W)
	for i, b := range w.ds.Bands() {
		for r0 := y0; r0 < y1; r0 += step {
			r1 := min(r0+step, y1)
			if err := w.writeBand(b, r0, r1, src[i][(r0-y0)*W:(r1-y0)*W]); err != nil {
				return fmt.Errorf("raster: writing band %d rows %d-%d: %w", i+1, r0, r1-1, err)
			}
		}
	}
	return nil
}

// writeBand converts rows [y0, y1) of one band (src) to the output's values
// and writes them.
func (w *Writer) writeBand(b godal.Band, y0, y1 int, src []float32) error {
	n := len(src)
	if cap(w.buf) < n {
		w.buf = make([]float32, n)
	}
	buf := w.buf[:n]
	nd := float32(w.opts.NoData)
	for j, v := range src {
		switch {
		case v != v:
			if w.opts.HasNoData {
				v = nd
			}
		case w.integer:
			f := math.RoundToEven(float64(v))
			if f < w.lo {
				f = w.lo
			} else if f > w.hi {
				f = w.hi
			}
			v = float32(f)
		}
		buf[j] = v
	}
	if w.integer && w.hi > 1<<24 {
		// float32 cannot hold every 32-bit integer: go through float64.
		if cap(w.buf64) < n {
			w.buf64 = make([]float64, n)
		}
		b64 := w.buf64[:n]
		for j, v := range buf {
			b64[j] = float64(v)
		}
		return b.Write(0, y0, b64, w.meta.Width, y1-y0, quiet)
	}
	return b.Write(0, y0, buf, w.meta.Width, y1-y0, quiet)
}

// SetMetadata adds a dataset metadata item (processing record).
func (w *Writer) SetMetadata(key, value string) error {
	return w.ds.SetMetadata(key, value, quiet)
}

// SetBandMetadata adds a metadata item to band i (0-based).
func (w *Writer) SetBandMetadata(i int, key, value string) error {
	return w.ds.Bands()[i].SetMetadata(key, value, quiet)
}

// Commit implements raster.Writer.
func (w *Writer) Commit() error {
	if w.closed {
		return errors.New("raster: output already finished")
	}
	w.closed = true
	if err := w.ds.Close(quiet); err != nil {
		w.cleanup()
		return fmt.Errorf("raster: finishing %s: %w", w.final, err)
	}
	src := w.tmp
	if w.opts.Format == COG {
		// GDAL's COG copy (overviews included) runs in C memory: hand the
		// pages of the Go heap that the restoration no longer uses back to
		// the system first, so that the two do not add up in the peak RSS.
		debug.FreeOSMemory()
		in, err := godal.Open(w.tmp, quiet)
		if err != nil {
			w.cleanup()
			return fmt.Errorf("raster: reopening for COG: %w", err)
		}
		w.tmpCOG = w.tmp + ".cog.tif"
		pred := "PREDICTOR=YES"
		out, err := in.Translate(w.tmpCOG, []string{"-of", "COG", "-co", "COMPRESS=DEFLATE", "-co", pred,
			"-co", "BIGTIFF=IF_SAFER", "-co", "BLOCKSIZE=512"}, quiet)
		in.Close()
		if err != nil {
			w.cleanup()
			return fmt.Errorf("raster: writing COG %s: %w", w.final, err)
		}
		if err := out.Close(quiet); err != nil {
			w.cleanup()
			return fmt.Errorf("raster: finishing COG %s: %w", w.final, err)
		}
		os.Remove(w.tmp)
		src = w.tmpCOG
	}
	if w.opts.Stdout != nil {
		f, err := os.Open(src)
		if err != nil {
			w.cleanup()
			return fmt.Errorf("raster: %w", err)
		}
		_, err = io.Copy(w.opts.Stdout, f)
		f.Close()
		w.cleanup()
		if err != nil {
			return fmt.Errorf("raster: copying the output to stdout: %w", err)
		}
		return nil
	}
	if err := os.Rename(src, w.final); err != nil {
		w.cleanup()
		return fmt.Errorf("raster: moving the output to %s: %w", w.final, err)
	}
	return nil
}

func (w *Writer) cleanup() {
	os.Remove(w.tmp)
	if w.tmpCOG != "" {
		os.Remove(w.tmpCOG)
	}
}

// Abort implements raster.Writer.
func (w *Writer) Abort() {
	if !w.closed {
		w.closed = true
		w.ds.Close()
	}
	w.cleanup()
}

// WriteFloat32 writes float32 planes in one go as the output opts describes
// (small rasters: demo products, kernels, test fixtures). Output goes through
// a temporary name.
func WriteFloat32(path string, meta raster.Meta, planes [][]float32, opts WriteOptions) error {
	w, err := Create(path, meta, opts)
	if err != nil {
		return err
	}
	if err := w.WriteRows(0, meta.Height, planes); err != nil {
		w.Abort()
		return err
	}
	return w.Commit()
}
