package simulate

import (
	"encoding/json"
	"errors"
	"math"
	"testing"

	"limpid/raster"
	"limpid/step"
)

// Each noise kind's name is the spelling ParseNoise reads, both ways and
// in JSON; the zero value is NoiseNone. Source: ParseNoise's grammar.
func TestNoiseKindNames(t *testing.T) {
	for k, name := range map[NoiseKind]string{NoiseNone: "none", NoisePoisson: "poisson", NoiseGaussian: "gaussian"} {
		if k.String() != name {
			t.Errorf("%d.String() = %q, want %q", int(k), k.String(), name)
		}
		if got, ok := ParseNoiseKind(name); !ok || got != k {
			t.Errorf("ParseNoiseKind(%q) = %v, %v", name, got, ok)
		}
		b, err := json.Marshal(Noise{Kind: k})
		var back Noise
		if err != nil || json.Unmarshal(b, &back) != nil || back.Kind != k {
			t.Errorf("%v: JSON %s, %v, read back %v", k, b, err, back.Kind)
		}
	}
	if _, ok := ParseNoiseKind("laplace"); ok {
		t.Error("laplace parsed as a noise kind")
	}
	if _, err := json.Marshal(Noise{Kind: NoiseKind(7)}); err == nil {
		t.Error("an unnamed kind marshalled")
	}
	var zero Config
	if zero.Noise.Kind != NoiseNone || zero.Noise.Variance(100) != 0 {
		t.Errorf("zero Config noise: %v, variance %g", zero.Noise.Kind, zero.Noise.Variance(100))
	}
}

// Resolve's output type and nodata rules, and its field-naming errors.
// Source: the rules in Resolve's documentation (README, "limpid simulate").
func TestSimConfigResolve(t *testing.T) {
	meta := func(dtype string, nd float64, has bool) raster.Meta {
		return raster.Meta{Width: 4, Height: 4, DataType: dtype,
			Bands: []raster.BandInfo{{}, {NoData: nd, HasNoData: has}}}
	}
	nan := math.NaN()
	cases := []struct {
		in       raster.Meta
		dataType string
		want     string
		outND    float64 // NaN: want NaN
		outHas   bool
	}{
		{meta("Float32", nan, true), "UInt16", "UInt16", 65535, true},
		{meta("Float32", nan, true), "", "Float32", nan, true},
		{meta("Float64", 0, false), "", "Float32", nan, true},
		{meta("Float32", 0, false), "Byte", "Byte", 255, true},
		{meta("UInt16", 0, true), "", "UInt16", 0, true},
		{meta("UInt16", 0, false), "Int16", "Int16", 0, false},
	}
	for _, c := range cases {
		cfg := Config{DataType: c.dataType}
		if err := cfg.Resolve(c.in); err != nil {
			t.Fatalf("%s -> %q: %v", c.in.DataType, c.dataType, err)
		}
		ndOK := cfg.OutNoData == c.outND || (math.IsNaN(c.outND) && math.IsNaN(cfg.OutNoData))
		if cfg.DataType != c.want || cfg.HasOutNoData != c.outHas || (c.outHas && !ndOK) {
			t.Errorf("%s -> %q: got %s, out nodata %g/%v; want %s, %g/%v", c.in.DataType, c.dataType,
				cfg.DataType, cfg.OutNoData, cfg.HasOutNoData, c.want, c.outND, c.outHas)
		}
		if cfg.HasNoData != c.in.Bands[1].HasNoData {
			t.Errorf("%s: input nodata %v, want %v", c.in.DataType, cfg.HasNoData, c.in.Bands[1].HasNoData)
		}
	}
	for _, c := range []struct {
		in              raster.Meta
		dataType, field string
	}{
		{meta("Float32", 0, false), "Int4", "DataType"},
		{meta("Float32", 70000, true), "UInt16", "NoData"},
		{meta("Float32", 0.5, true), "Int32", "NoData"},
	} {
		cfg := Config{DataType: c.dataType}
		var se *Error
		if err := cfg.Resolve(c.in); !errors.As(err, &se) || se.Field != c.field || !errors.Is(err, step.ErrConfig) {
			t.Errorf("%q: %v, want a Error on %s", c.dataType, err, c.field)
		}
	}
}

// Simulate refuses a configuration without a PSF operator instead of
// failing on it. Source: Config's documentation (H is required).
func TestSimulateNeedsOperator(t *testing.T) {
	src := raster.NewMem(raster.Meta{Width: 2, Height: 2, DataType: "Float32", Bands: []raster.BandInfo{{}}})
	var se *Error
	if err := Simulate(t.Context(), src, raster.NewMem(src.Meta()), Config{}); !errors.As(err, &se) || se.Field != "H" {
		t.Errorf("got %v, want a Error on H", err)
	}
}
