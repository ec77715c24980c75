package gdal

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"runtime/debug"
	"sort"
	"syscall"

	"github.com/airbusgeo/godal"

	"limpid/raster"
	"limpid/raster/scratch"
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

// Writer writes a GeoTIFF or COG into a private temporary directory and
// moves it to its final path (or copies it to stdout, a FIFO or a character
// device) on Commit.
//
// A path that names a FIFO or a character device (/dev/null, /dev/stdout)
// is never replaced: GeoTIFF needs a seekable file, so the product is
// finished in the system's temporary directory as for stdout and then
// copied into the stream; Commit succeeds only when every byte was
// accepted. An existing regular file reached through symbolic links is
// replaced at the links' end, in its own directory; the links stay.
type Writer struct {
	ds    *godal.Dataset
	final string // the path as given (messages)
	dest  string // where the file is renamed to ("" for a stream)
	// dir is the private temporary directory holding tmp, tmpCOG and
	// whatever GDAL's COG driver adds next to tmpCOG.
	dir     string
	tmp     string
	tmpCOG  string
	out     io.Writer // stdout or a stream target; nil for a file
	outName string
	sw      *scratch.StreamWriter
	opts    WriteOptions
	meta    raster.Meta
	buf     []float32
	buf64   []float64
	lo, hi  float64
	integer bool
	closed  bool
	co      []string // the GeoTIFF creation options (relayout.go)
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
	if err := checkWKT(meta.Geo.WKT); err != nil {
		return nil, err
	}
	w := &Writer{final: path, opts: opts, meta: meta}
	w.lo, w.hi, w.integer = raster.TypeRange(opts.DataType)
	dir := os.TempDir()
	switch {
	case opts.Stdout != nil:
		w.out, w.outName = opts.Stdout, "stdout"
	default:
		t, err := scratch.Inspect(path)
		if err != nil {
			return nil, fmt.Errorf("%w: output %s: %v", raster.ErrInput, path, err)
		}
		if t.Kind == scratch.Stream {
			w.sw = &scratch.StreamWriter{Path: path, Name: path}
			w.out, w.outName = w.sw, path
		} else {
			w.dest = t.Path
			dir = filepath.Dir(t.Path)
		}
	}
	d, err := scratch.MkdirTemp(dir)
	if err != nil {
		return nil, fmt.Errorf("%w: output %s: cannot create a file in %s: %v", raster.ErrInput, path, dir, errors.Unwrap(err))
	}
	w.dir = d
	w.tmp = filepath.Join(d, "product.tif")
	pred := "PREDICTOR=2"
	if !w.integer {
		pred = "PREDICTOR=3"
	}
	co := []string{"TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE", pred, "BIGTIFF=IF_SAFER"}
	if len(meta.Bands) > 1 {
		co = append(co, "INTERLEAVE=BAND")
	}
	w.co = co
	ds, err := godal.Create(godal.GTiff, w.tmp, len(meta.Bands), dt, meta.Width, meta.Height, godal.CreationOption(scratchOptions(len(meta.Bands))...), quiet)
	if err != nil {
		scratch.Remove(w.dir)
		return nil, fmt.Errorf("raster: creating %s: %w", path, err)
	}
	os.Chmod(w.tmp, 0o644) // products are ordinary files, whatever the umask made of GDAL's 0666
	w.ds = ds
	if err := w.writeMeta(); err != nil {
		w.Abort()
		return nil, err
	}
	return w, nil
}

// checkWKT refuses, before any file is created, a CRS that GDAL cannot
// read (it comes from the input: a raster's or a tile stream's metadata).
func checkWKT(wkt string) error {
	if wkt == "" {
		return nil
	}
	sr, err := godal.NewSpatialRefFromWKT(wkt, quiet)
	if err != nil {
		short := wkt
		if len(short) > 40 {
			short = short[:40] + "..."
		}
		return fmt.Errorf("%w: the input's CRS %q is not a coordinate reference system GDAL can read: %v", raster.ErrInput, short, err)
	}
	sr.Close()
	return nil
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
func (w *Writer) Commit() error { return w.CommitContext(context.Background()) }

// CommitContext finishes the output: the GeoTIFF is closed, made a COG on
// request, then renamed to its path or copied to its stream. It stops with
// ctx's error between phases, inside GDAL's COG copy (at its next progress
// step: translate) and between the 1 MiB pieces of a copy to a stream.
// Closing the GeoTIFF (GDAL flushing its cache) and a write blocked on a
// full pipe cannot be interrupted: a caller that must stop sooner exits the
// process and removes the private directory with scratch.RemoveAll.
// Nothing is left at the path when it fails.
func (w *Writer) CommitContext(ctx context.Context) error {
	if w.closed {
		return errors.New("raster: output already finished")
	}
	w.closed = true
	if err := w.ds.Close(quiet); err != nil {
		w.cleanup()
		return fmt.Errorf("raster: finishing %s: %w", w.final, err)
	}
	if err := ctx.Err(); err != nil {
		w.cleanup()
		return err
	}
	src := w.tmp
	if w.opts.Format == COG {
		// GDAL's COG copy (overviews included) runs in C memory: hand the
		// pages of the Go heap that the restoration no longer uses back to
		// the system first, so that the two do not add up in the peak RSS.
		debug.FreeOSMemory()
		w.tmpCOG = filepath.Join(w.dir, "product.cog.tif")
		err := translate(ctx, w.tmpCOG, w.tmp, []string{"-of", "COG", "-co", "COMPRESS=DEFLATE", "-co", "PREDICTOR=YES",
			"-co", "BIGTIFF=IF_SAFER", "-co", "BLOCKSIZE=512"})
		if err != nil {
			w.cleanup()
			if ctx.Err() != nil {
				return ctx.Err()
			}
			return fmt.Errorf("raster: writing COG %s: %w", w.final, err)
		}
		os.Remove(w.tmp)
		os.Chmod(w.tmpCOG, 0o644)
		src = w.tmpCOG
	} else {
		var err error
		if src, err = w.relayout(); err != nil { // relayout.go
			w.cleanup()
			return err
		}
	}
	if err := ctx.Err(); err != nil {
		w.cleanup()
		return err
	}
	if w.out != nil {
		err := w.copyOut(ctx, src)
		w.cleanup()
		return err
	}
	if err := scratch.Commit(src, w.dest, w.dir); err != nil {
		w.cleanup()
		return fmt.Errorf("raster: moving the output to %s: %w", w.final, err)
	}
	// A side-car left by an earlier file at this path (GDAL's PAM file:
	// statistics, histograms, metadata a reader computed) describes that
	// file, not this one; GDAL would read it with the new file (GDAL raster
	// data model, "PAM": https://gdal.org/user/raster_data_model.html).
	if err := os.Remove(w.dest + ".aux.xml"); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("raster: removing the stale side-car %s.aux.xml of the replaced output: %w", w.final, err)
	}
	return nil
}

// copyOut copies the finished file src to the stream output.
func (w *Writer) copyOut(ctx context.Context, src string) error {
	f, err := os.Open(src)
	if err != nil {
		return fmt.Errorf("raster: %w", err)
	}
	defer f.Close()
	if w.sw == nil {
		scratch.Started(w.outName)
	}
	err = CopyContext(ctx, w.out, f)
	if err == nil && w.sw != nil {
		err = w.sw.Close()
	}
	if err != nil {
		if ctx.Err() != nil {
			return ctx.Err()
		}
		return StreamError(w.outName, err)
	}
	if w.sw == nil {
		scratch.Written(w.outName)
	}
	return nil
}

// StreamError names the stream output whose write failed; a reader that
// went away (EPIPE) is said in words and stays testable with errors.Is.
func StreamError(name string, err error) error {
	if errors.Is(err, syscall.EPIPE) {
		return fmt.Errorf("the reader of %s closed it before the end of the output (%w); what it got is incomplete", name, syscall.EPIPE)
	}
	return fmt.Errorf("raster: copying the output to %s: %w", name, err)
}

// CopyContext copies src to dst in 1 MiB pieces, stopping with ctx's error
// between pieces.
func CopyContext(ctx context.Context, dst io.Writer, src io.Reader) error {
	buf := make([]byte, 1<<20)
	for {
		if err := ctx.Err(); err != nil {
			return err
		}
		n, err := src.Read(buf)
		if n > 0 {
			if _, werr := dst.Write(buf[:n]); werr != nil {
				return werr
			}
		}
		if err == io.EOF {
			return nil
		}
		if err != nil {
			return err
		}
	}
}

func (w *Writer) release() {
	if w.sw != nil {
		w.sw.Release()
	}
}

// cleanup removes the temporaries and releases an unfinished stream.
func (w *Writer) cleanup() {
	w.release()
	scratch.Remove(w.dir)
}

// Abort implements raster.Writer: the temporaries go and a stream output
// is released (its reader sees the end).
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
