package gdal

import (
	"errors"
	"fmt"
	"os"
	"strings"

	"github.com/airbusgeo/godal"

	"limpid/raster"
)

// Reader reads a scene through GDAL. Not safe for concurrent use.
type Reader struct {
	ds   *godal.Dataset
	meta raster.Meta
	name string
}

var _ raster.Reader = (*Reader)(nil)

// Open opens any GDAL-readable raster (including /vsi paths) for reading.
func Open(path string) (*Reader, error) {
	Init()
	if !strings.HasPrefix(path, "/vsi") {
		if _, err := os.Stat(path); err != nil {
			return nil, fmt.Errorf("%w: input %s: %v", raster.ErrInput, path, errors.Unwrap(err))
		}
	}
	ds, err := godal.Open(path, godal.RasterOnly(), quiet)
	if err != nil {
		return nil, fmt.Errorf("%w: input %s is not a raster GDAL can read: %v", raster.ErrInput, path, err)
	}
	r := &Reader{ds: ds, name: path}
	if err := r.readMeta(); err != nil {
		ds.Close()
		return nil, err
	}
	return r, nil
}

func (r *Reader) readMeta() error {
	st := r.ds.Structure()
	bands := r.ds.Bands()
	if len(bands) == 0 {
		return fmt.Errorf("%w: input %s has no raster bands", raster.ErrInput, r.name)
	}
	if st.SizeX <= 0 || st.SizeY <= 0 {
		return fmt.Errorf("%w: input %s has size %dx%d", raster.ErrInput, r.name, st.SizeX, st.SizeY)
	}
	// The declared size is checked before anything is sized from it.
	lim, err := raster.LimitsFrom(os.Getenv)
	if err != nil {
		return err
	}
	if err := lim.CheckScene("input "+r.name, st.SizeX, st.SizeY, len(bands)); err != nil {
		return err
	}
	m := raster.Meta{Width: st.SizeX, Height: st.SizeY, Metadata: r.ds.Metadatas()}
	for i, b := range bands {
		bt := b.Structure().DataType
		name, ok := supportedTypes[bt]
		if !ok {
			return fmt.Errorf("%w: input %s band %d has data type %s; limpid restores real-valued bands only (Byte, UInt16, Int16, UInt32, Int32, Float32, Float64)", raster.ErrInput, r.name, i+1, bt.String())
		}
		if i == 0 {
			m.DataType = name
		} else if name != m.DataType {
			m.DataType = widerType(m.DataType, name)
		}
		if ci := b.ColorInterp(); ci == godal.CIPalette {
			// Palette values are indices into a colour table, not
			// radiometry: deconvolving them mixes unrelated colours.
			return fmt.Errorf("%w: input %s band %d is a palette (colour-table) band: its values are colour indices, not radiometry; limpid refuses palette bands (expand the colours into bands first, e.g. gdal_translate -expand rgb)", raster.ErrInput, r.name, i+1)
		}
		nd, hasND := b.NoData()
		m.Bands = append(m.Bands, raster.BandInfo{
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

// Meta implements raster.Reader: the scene description.
func (r *Reader) Meta() raster.Meta { return r.meta }

// ReadRows implements raster.Reader.
func (r *Reader) ReadRows(y0, y1 int, bands []int, dst [][]float32) error {
	all := r.ds.Bands()
	h := y1 - y0
	for i, b := range bands {
		if b < 0 || b >= len(all) {
			return fmt.Errorf("%w: band %d does not exist (input has %d)", raster.ErrInput, b+1, len(all))
		}
		if err := all[b].Read(0, y0, dst[i][:r.meta.Width*h], r.meta.Width, h, quiet); err != nil {
			// The file's pixel data cannot be read (truncated, corrupt
			// compressed blocks): the input is unreadable, exit 2.
			return fmt.Errorf("%w: input %s: reading band %d rows %d-%d: %v", raster.ErrInput, r.name, b+1, y0, y1-1, err)
		}
	}
	return nil
}

// Path returns the path the reader was opened with (a spooled stdin's
// temporary file, for instance).
func (r *Reader) Path() string { return r.name }

// Close releases the dataset.
func (r *Reader) Close() error { return r.ds.Close() }
