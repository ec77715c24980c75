package raster

import (
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"

	"github.com/airbusgeo/godal"
)

var registerOnce sync.Once

// Init registers GDAL's drivers once and bounds GDAL's block cache so that
// memory stays bounded by limpid's strips (GDAL's default is 5 % of RAM).
func Init() {
	registerOnce.Do(func() {
		if os.Getenv("GDAL_CACHEMAX") == "" {
			os.Setenv("GDAL_CACHEMAX", "64")
		}
		godal.RegisterAll()
	})
}

// ErrInput is wrapped by errors caused by the user's input (exit code 2).
var ErrInput = errors.New("bad input")

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

// GDALReader reads a scene through GDAL. Not safe for concurrent use.
type GDALReader struct {
	ds   *godal.Dataset
	meta Meta
	name string
}

// Open opens any GDAL-readable raster (including /vsi paths) for reading.
func Open(path string) (*GDALReader, error) {
	Init()
	if !strings.HasPrefix(path, "/vsi") {
		if _, err := os.Stat(path); err != nil {
			return nil, fmt.Errorf("%w: input %s: %v", ErrInput, path, errors.Unwrap(err))
		}
	}
	ds, err := godal.Open(path, godal.RasterOnly(), quiet)
	if err != nil {
		return nil, fmt.Errorf("%w: input %s is not a raster GDAL can read: %v", ErrInput, path, err)
	}
	r := &GDALReader{ds: ds, name: path}
	if err := r.readMeta(); err != nil {
		ds.Close()
		return nil, err
	}
	return r, nil
}

func (r *GDALReader) readMeta() error {
	st := r.ds.Structure()
	bands := r.ds.Bands()
	if len(bands) == 0 {
		return fmt.Errorf("%w: input %s has no raster bands", ErrInput, r.name)
	}
	if st.SizeX <= 0 || st.SizeY <= 0 {
		return fmt.Errorf("%w: input %s has size %dx%d", ErrInput, r.name, st.SizeX, st.SizeY)
	}
	m := Meta{Width: st.SizeX, Height: st.SizeY, Metadata: r.ds.Metadatas()}
	for i, b := range bands {
		bt := b.Structure().DataType
		name, ok := supportedTypes[bt]
		if !ok {
			return fmt.Errorf("%w: input %s band %d has data type %s; limpid restores real-valued bands only (Byte, UInt16, Int16, UInt32, Int32, Float32, Float64)", ErrInput, r.name, i+1, bt.String())
		}
		if i == 0 {
			m.DataType = name
		} else if name != m.DataType {
			m.DataType = widerType(m.DataType, name)
		}
		nd, hasND := b.NoData()
		m.Bands = append(m.Bands, BandInfo{
			Description: b.Description(),
			ColorInterp: b.ColorInterp().Name(),
			Metadata:    b.Metadatas(),
			NoData:      nd,
			HasNoData:   hasND,
		})
	}
	if gt, err := r.ds.GeoTransform(quiet); err == nil {
		m.Geo.Transform, m.Geo.HasTransform = gt, true
	}
	m.Geo.WKT = r.ds.Projection()
	r.meta = m
	return nil
}

// widerType picks a type that holds both (mixed-type inputs are rare).
func widerType(a, b string) string {
	order := []string{"Byte", "UInt16", "Int16", "UInt32", "Int32", "Float32", "Float64"}
	ia, ib := 0, 0
	for i, n := range order {
		if n == a {
			ia = i
		}
		if n == b {
			ib = i
		}
	}
	if (a == "UInt16" && b == "Int16") || (a == "Int16" && b == "UInt16") {
		return "Int32"
	}
	if ia > ib {
		return a
	}
	return b
}

// Meta returns the scene description.
func (r *GDALReader) Meta() Meta { return r.meta }

// ReadRows implements Reader.
func (r *GDALReader) ReadRows(y0, y1 int, bands []int, dst [][]float32) error {
	all := r.ds.Bands()
	h := y1 - y0
	for i, b := range bands {
		if b < 0 || b >= len(all) {
			return fmt.Errorf("%w: band %d does not exist (input has %d)", ErrInput, b+1, len(all))
		}
		if err := all[b].Read(0, y0, dst[i][:r.meta.Width*h], r.meta.Width, h, quiet); err != nil {
			return fmt.Errorf("raster: reading %s band %d rows %d-%d: %w", r.name, b+1, y0, y1-1, err)
		}
	}
	return nil
}

// Close releases the dataset.
func (r *GDALReader) Close() error { return r.ds.Close() }

// Format is an output container.
type Format string

const (
	// GTiff is a tiled, DEFLATE-compressed GeoTIFF (BIGTIFF=IF_SAFER).
	GTiff Format = "gtiff"
	// COG is a Cloud Optimized GeoTIFF made by GDAL's COG driver.
	COG Format = "cog"
)

// WriteOptions configures a GDALWriter.
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

// GDALWriter writes a GeoTIFF or COG under a temporary name and moves it to
// its final path (or copies it to stdout) on Commit.
type GDALWriter struct {
	ds      *godal.Dataset
	final   string
	tmp     string
	tmpCOG  string
	opts    WriteOptions
	meta    Meta
	buf     []float32
	buf64   []float64
	lo, hi  float64
	integer bool
	closed  bool
}

// Create prepares an output for a scene described by meta (size,
// georeferencing, band descriptions and metadata are copied).
func Create(path string, meta Meta, opts WriteOptions) (*GDALWriter, error) {
	Init()
	dt, ok := gdalType(opts.DataType)
	if !ok {
		return nil, fmt.Errorf("%w: output data type %q is not supported", ErrInput, opts.DataType)
	}
	w := &GDALWriter{final: path, opts: opts, meta: meta}
	w.lo, w.hi, w.integer = TypeRange(opts.DataType)
	dir := os.TempDir()
	if opts.Stdout == nil {
		dir = filepath.Dir(path)
	}
	f, err := os.CreateTemp(dir, ".limpid-*.tif")
	if err != nil {
		return nil, fmt.Errorf("%w: output %s: cannot create a file in %s: %v", ErrInput, path, dir, errors.Unwrap(err))
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

func (w *GDALWriter) writeMeta() error {
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

// WriteRows implements Writer: NaN becomes nodata, integer outputs are
// rounded to nearest and clamped.
func (w *GDALWriter) WriteRows(y0, y1 int, src [][]float32) error {
	n := (y1 - y0) * w.meta.Width
	if cap(w.buf) < n {
		w.buf = make([]float32, n)
	}
	buf := w.buf[:n]
	nd := float32(w.opts.NoData)
	for i, b := range w.ds.Bands() {
		for j, v := range src[i][:n] {
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
			if err := b.Write(0, y0, b64, w.meta.Width, y1-y0, quiet); err != nil {
				return fmt.Errorf("raster: writing band %d rows %d-%d: %w", i+1, y0, y1-1, err)
			}
			continue
		}
		if err := b.Write(0, y0, buf, w.meta.Width, y1-y0, quiet); err != nil {
			return fmt.Errorf("raster: writing band %d rows %d-%d: %w", i+1, y0, y1-1, err)
		}
	}
	return nil
}

// SetMetadata adds a dataset metadata item (processing record).
func (w *GDALWriter) SetMetadata(key, value string) error {
	return w.ds.SetMetadata(key, value, quiet)
}

// SetBandMetadata adds a metadata item to band i (0-based).
func (w *GDALWriter) SetBandMetadata(i int, key, value string) error {
	return w.ds.Bands()[i].SetMetadata(key, value, quiet)
}

// Commit implements Writer.
func (w *GDALWriter) Commit() error {
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

func (w *GDALWriter) cleanup() {
	os.Remove(w.tmp)
	if w.tmpCOG != "" {
		os.Remove(w.tmpCOG)
	}
}

// Abort implements Writer.
func (w *GDALWriter) Abort() {
	if !w.closed {
		w.closed = true
		w.ds.Close()
	}
	w.cleanup()
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

// WriteFloat32 writes planes as a float32 GeoTIFF in one go (small rasters:
// demo products, test fixtures). Output goes through a temporary name.
func WriteFloat32(path string, meta Meta, planes [][]float32, opts WriteOptions) error {
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
