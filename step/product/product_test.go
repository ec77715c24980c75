package product

import (
	"encoding/json"
	"math"
	"strings"
	"testing"

	"limpid/psf"
	"limpid/raster"
	"limpid/step"
	"limpid/step/settings"
)

// Source: the output contract documented in the README ("Flags of restore":
// --output-type, --saturated; "What is kept and what is added"): the
// input's nodata when it has one; otherwise NaN for float outputs and the
// integer type's maximum, set only when invalid pixels can occur.
func TestNoDataRules(t *testing.T) {
	u16 := raster.Meta{DataType: "UInt16", Bands: []raster.BandInfo{{}, {NoData: 7, HasNoData: true}}}
	f32 := raster.Meta{DataType: "Float32", Bands: []raster.BandInfo{{}}}
	cases := []struct {
		name       string
		in         raster.Meta
		bands      []int
		float, sat bool
		want       float64
		has        bool
	}{
		{"input nodata kept", u16, []int{1}, false, false, 7, true},
		{"integer input, no saturation: none", u16, []int{0}, false, false, 0, false},
		{"integer input, saturation: type maximum", u16, []int{0}, false, true, 65535, true},
		{"integer input to float32 with saturation: NaN", u16, []int{0}, true, true, math.NaN(), true},
		{"float input: NaN", f32, []int{0}, false, false, math.NaN(), true},
	}
	for _, c := range cases {
		got, has := NoData(c.in, c.bands, c.float, c.sat)
		if has != c.has || !(got == c.want || (math.IsNaN(got) && math.IsNaN(c.want))) {
			t.Errorf("%s: %v %v, want %v %v", c.name, got, has, c.want, c.has)
		}
	}
	om := Meta(u16, []int{1, 0}, true)
	if om.DataType != "Float32" || len(om.Bands) != 2 || om.Bands[0].NoData != 7 {
		t.Errorf("Meta: %+v", om)
	}
}

// Source: the README's metadata contract: every restored raster says it is
// restored (LIMPID_PRODUCT) and records its version, method, PSF and
// parameters; each band its source band and background.
func TestMetadataLabelsTheProduct(t *testing.T) {
	rep := &step.Report{Version: "x", Method: "grid", PSF: "gaussian:sigma=1", Bands: []step.BandReport{{SourceBand: 3, Background: 2.5, MaxIterations: 9}}}
	rec := Metadata(rep)
	keys := map[string]string{}
	for _, it := range rec.Scene {
		keys[it.Key] = it.Value
	}
	if keys["LIMPID_PRODUCT"] != Label || keys["LIMPID_METHOD"] != "EMS (grid)" || keys["LIMPID_PSF"] != "gaussian:sigma=1" || keys["LIMPID_PARAMETERS"] == "" {
		t.Errorf("scene items %v", keys)
	}
	if len(rec.Bands) != 1 || rec.Bands[0][0] != (Item{"LIMPID_SOURCE_BAND", "3"}) || rec.Bands[0][1] != (Item{"LIMPID_BACKGROUND", "2.5"}) {
		t.Errorf("band items %v", rec.Bands)
	}
}

// Records state what was done (issue 16; the README's metadata contract):
// a chosen bandwidth is not stated for the scene, each band states its own;
// a given one is stated once; the PSF's hash has its own item.
func TestMetadataStatesAppliedSettings(t *testing.T) {
	given := 0.2
	for _, c := range []struct {
		smooth *float64
		want   bool
	}{{nil, false}, {&given, true}} {
		rep := &step.Report{Smooth: c.smooth, PSFUsed: psf.Record{Spec: "gaussian:sigma=1", Width: 9, Height: 9, SHA256: "ab"}, Bands: []step.BandReport{
			{SourceBand: 1, Applied: &settings.Band{Smooth: 0.5, SmoothFrom: "auto", Stop: "fixed", Iterations: 12, IterationsFrom: "auto"}},
			{SourceBand: 2, Applied: &settings.Band{Smooth: 0.3, SmoothFrom: "auto", Stop: "fixed", Iterations: 7, IterationsFrom: "auto"}},
		}}
		rec := Metadata(rep)
		scene := map[string]string{}
		for _, it := range rec.Scene {
			scene[it.Key] = it.Value
		}
		var pm map[string]any
		if err := json.Unmarshal([]byte(scene["LIMPID_PARAMETERS"]), &pm); err != nil {
			t.Fatal(err)
		}
		if _, has := pm["smooth"]; has != c.want || len(pm["bands"].([]any)) != 2 || scene["LIMPID_PSF_SHA256"] != "ab" || scene["LIMPID_PSF_USED"] == "" {
			t.Errorf("smooth %v: LIMPID_PARAMETERS %v, scene items %v", c.smooth, pm, scene)
		}
		for i, want := range []string{"0.5", "0.3"} {
			band := map[string]string{}
			for _, it := range rec.Bands[i] {
				band[it.Key] = it.Value
			}
			if band["LIMPID_SMOOTH"] != want || !strings.HasPrefix(band["LIMPID_STOP"], "fixed ") || band["LIMPID_BAND_PARAMETERS"] == "" {
				t.Errorf("band %d items %v", i+1, band)
			}
		}
	}
}
