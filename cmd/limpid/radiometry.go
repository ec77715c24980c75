package main

import (
	"fmt"
	"io"
	"math"
	"strconv"

	"limpid/raster"
	"limpid/step"
	"limpid/step/stream"
)

// The radiometric guard of the raster route (README, "Radiometry the
// engine accepts"). EMS models counts: it needs d >= 0 (Prepare clamps
// anything below to 0), and its sums of squares must stay finite. A scene
// whose valid values go below 0 or above stream.MaxEngineValue is restored
// through an exact linear change of units, stated on stderr and recorded in
// the product:
//
//	d' = (d - offset) * scale,   output = restored' / scale + offset,
//
// offset = the smallest valid value when it is negative (else 0), scale = a
// power of two (exact in binary floating point, IEEE 754) bringing the
// largest |d - offset| to at most MaxEngineValue (else 1). Only types that
// can hold such values are scanned (Int8, Int16, Int32, Float32, Float64).
type radiometry struct {
	Offset float64 `json:"offset"`
	Scale  float64 `json:"scale"`
	// Min and Max are the valid range found by the scan.
	Min float64 `json:"min"`
	Max float64 `json:"max"`
}

// active says whether the data go through a change of units.
func (r radiometry) active() bool { return r.Offset != 0 || r.Scale != 1 }

// scanRows is the strip height of the radiometric scan.
const scanRows = 64

// scanRadiometry reads the selected bands once, in strips, and returns the
// change of units they need (identity for types that cannot go below 0 or
// above the bound). Values that float32 cannot hold are refused.
func scanRadiometry(src raster.Reader, bands []int, cfg step.Config, name string) (radiometry, error) {
	m := src.Meta()
	r := radiometry{Scale: 1}
	switch m.DataType {
	case "Int8", "Int16", "Int32", "Float32", "Float64":
	default:
		return r, nil
	}
	valid := make([]step.ValidFunc, len(bands))
	buf := make([][]float32, len(bands))
	for i, b := range bands {
		bi := m.Bands[b]
		valid[i] = step.NewValid(bi.NoData, bi.HasNoData, cfg.Saturated, cfg.HasSaturated)
		buf[i] = make([]float32, m.Width*min(scanRows, m.Height))
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for y := 0; y < m.Height; y += scanRows {
		y1 := min(y+scanRows, m.Height)
		if err := src.ReadRows(y, y1, bands, buf); err != nil {
			return r, err
		}
		for i := range bands {
			for _, v := range buf[i][:(y1-y)*m.Width] {
				if valid[i](v) {
					lo, hi = min(lo, float64(v)), max(hi, float64(v))
				}
			}
		}
	}
	if math.IsInf(lo, 1) {
		return r, nil // no valid pixel: the engine writes nodata
	}
	r.Min, r.Max = lo, hi
	if m.DataType == "Float64" && (hi >= math.MaxFloat32 || lo <= -math.MaxFloat32) {
		return r, fmt.Errorf("%w: input %s has values beyond the float32 range (+-%g); limpid holds pixels as float32: rescale the scene first", raster.ErrInput, name, math.MaxFloat32)
	}
	if lo < 0 {
		r.Offset = lo
	}
	span := hi - r.Offset
	for span*r.Scale > stream.MaxEngineValue {
		r.Scale /= 2
	}
	return r, nil
}

// warn prints the one warning line of an active change of units.
func (r radiometry) warn(w io.Writer, name string) {
	switch {
	case r.Offset != 0 && r.Scale != 1:
		fmt.Fprintf(w, "limpid: warning: %s has values from %g to %g: EMS needs data >= 0 and at most %g, so it restores (DN - (%g)) x %g and converts back (recorded as LIMPID_RADIOMETRY_OFFSET/SCALE)\n", name, r.Min, r.Max, stream.MaxEngineValue, r.Offset, r.Scale)
	case r.Offset != 0:
		fmt.Fprintf(w, "limpid: warning: %s has values down to %g: EMS needs data >= 0, so it restores DN - (%g) and adds the offset back (recorded as LIMPID_RADIOMETRY_OFFSET)\n", name, r.Min, r.Offset)
	case r.Scale != 1:
		fmt.Fprintf(w, "limpid: warning: %s has values up to %g: above %g the engine's sums of squares overflow, so it restores DN x %g and divides it back out (recorded as LIMPID_RADIOMETRY_SCALE)\n", name, r.Max, stream.MaxEngineValue, r.Scale)
	}
}

// config returns cfg in the engine's units: the background, the saturation
// threshold and a given noise model (var = a DN + b) follow the data.
func (r radiometry) config(cfg step.Config) step.Config {
	if !r.active() {
		return cfg
	}
	s, o := r.Scale, r.Offset
	cfg.Background *= s
	// unitsReader has marked saturated samples NaN already; a threshold in
	// changed units could catch valid ones.
	cfg.Saturated, cfg.HasSaturated = 0, false
	if n := cfg.Noise; n != nil {
		// var(d') = s^2 var(d) = s a d' + s^2 (a o + b).
		m := *n
		m.A, m.B = s*n.A, s*s*math.Max(n.A*o+n.B, 0)
		m.Floor *= s * s
		if m.Hi > 0 {
			m.Hi = (m.Hi - o) * s
		}
		if m.A+m.B == 0 {
			m.B = m.Floor
		}
		cfg.Noise = &m
	}
	return cfg
}

// report converts the engine's figures back to the data's units: the
// background (b' / s + offset: the level under the signal), the flux above
// it (flux' / s) and the saturation threshold.
func (r radiometry) report(rep *step.Report, orig step.Config) {
	if !r.active() || rep == nil {
		return
	}
	for i := range rep.Bands {
		b := &rep.Bands[i]
		b.Background = b.Background/r.Scale + r.Offset
		b.FluxBefore /= r.Scale
		b.FluxAfter /= r.Scale
	}
	if orig.HasSaturated {
		s := orig.Saturated
		rep.Saturated = &s
	}
}

// unitsReader reads a scene in the engine's units: invalid samples (nodata,
// saturated, non-finite) become NaN, valid ones (v - offset) * scale.
type unitsReader struct {
	raster.Reader
	r     radiometry
	valid []step.ValidFunc // per source band
}

func newUnitsReader(src raster.Reader, r radiometry, cfg step.Config) *unitsReader {
	m := src.Meta()
	u := &unitsReader{Reader: src, r: r}
	for _, bi := range m.Bands {
		u.valid = append(u.valid, step.NewValid(bi.NoData, bi.HasNoData, cfg.Saturated, cfg.HasSaturated))
	}
	return u
}

// Meta is the scene without nodata values: invalid samples arrive as NaN,
// and a valid sample in changed units may equal the nodata value.
func (u *unitsReader) Meta() raster.Meta {
	m := u.Reader.Meta()
	m.Bands = append([]raster.BandInfo(nil), m.Bands...)
	for i := range m.Bands {
		m.Bands[i].NoData, m.Bands[i].HasNoData = 0, false
	}
	return m
}

func (u *unitsReader) ReadRows(y0, y1 int, bands []int, dst [][]float32) error {
	if err := u.Reader.ReadRows(y0, y1, bands, dst); err != nil {
		return err
	}
	n := (y1 - y0) * u.Reader.Meta().Width
	nan := float32(math.NaN())
	for i, b := range bands {
		ok := u.valid[b]
		row := dst[i][:n]
		for j, v := range row {
			if ok(v) {
				row[j] = float32((float64(v) - u.r.Offset) * u.r.Scale)
			} else {
				row[j] = nan
			}
		}
	}
	return nil
}

// unitsWriter writes rows given in the engine's units back in the data's:
// v / scale + offset (NaN stays NaN); with offset 0 it also converts the
// standard-error raster (a spread: divided by the scale only).
type unitsWriter struct {
	raster.Writer
	r     radiometry
	width int
	buf   [][]float32
}

func (u *unitsWriter) WriteRows(y0, y1 int, src [][]float32) error {
	if len(u.buf) < len(src) {
		u.buf = make([][]float32, len(src))
	}
	n := (y1 - y0) * u.width
	for i, row := range src {
		row = row[:n]
		if cap(u.buf[i]) < len(row) {
			u.buf[i] = make([]float32, len(row))
		}
		out := u.buf[i][:len(row)]
		for j, v := range row {
			out[j] = float32(float64(v)/u.r.Scale + u.r.Offset)
		}
		u.buf[i] = out
	}
	return u.Writer.WriteRows(y0, y1, u.buf[:len(src)])
}

// recordUnits writes the change of units into OUTPUT's metadata.
func recordUnits(dst interface{ SetMetadata(k, v string) error }, r radiometry) error {
	if err := dst.SetMetadata("LIMPID_RADIOMETRY_OFFSET", strconv.FormatFloat(r.Offset, 'g', -1, 64)); err != nil {
		return err
	}
	return dst.SetMetadata("LIMPID_RADIOMETRY_SCALE", strconv.FormatFloat(r.Scale, 'g', -1, 64))
}

// inputName is INPUT as messages show it.
func inputName(in string) string {
	if in == "-" {
		return "INPUT - (stdin)"
	}
	return "INPUT " + in
}
