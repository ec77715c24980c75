package product

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"

	"limpid/psf"
	"limpid/raster"
	"limpid/step"
	"limpid/step/settings"
)

// Label is the LIMPID_PRODUCT item of a restored raster.
const Label = "restored (deconvolved) image; keep the original"

// uncertaintyLabel is the LIMPID_PRODUCT item of the particle method's
// error raster: the total of its two parts (step/uncertainty.go).
const uncertaintyLabel = "total standard error (DN) of a restored (deconvolved) image: sqrt(noise^2 + mc^2) of the data-noise part and the Monte Carlo part; PSF and noise-model errors are not in it"

// totalRule is the particle map's LIMPID_SE_METHOD.
const totalRule = "noise part: the EMS recursion the particle method approximates (same PSF, bandwidth and iterations) linearised, " +
	"its noise error map as the grid method's; Monte Carlo part: "

// noiseMapRule and noiseMapBlendRule describe the grid method's noise error
// map (step/noisemap.go) in its metadata.
const (
	noiseMapRule      = "data noise (the band's noise model) propagated through the linearised EMS recursion: one Rademacher probe scaled by the noise standard deviation, its squared derivative averaged over 7 x 7 valid pixels (Hutchinson 1989)"
	noiseMapBlendRule = "tiles blended linearly (overlapping tiles restore the same data: their errors are fully correlated)"
)

// noiseMapLabel is the LIMPID_PRODUCT item of the grid method's noise error
// map.
const noiseMapLabel = "noise standard error (DN) of a restored (deconvolved) image: the data noise propagated through the restoration; PSF and noise-model errors are not in it"

// Meta is the output's description: the input's, restricted to bands
// (0-based, output order), Float32 when float32 is set, with a copy of the
// input's metadata.
func Meta(in raster.Meta, bands []int, float32 bool) raster.Meta {
	om := in
	om.Bands = nil
	for _, b := range bands {
		om.Bands = append(om.Bands, in.Bands[b])
	}
	if float32 {
		om.DataType = "Float32"
	}
	om.Metadata = map[string]string{}
	for k, v := range in.Metadata {
		om.Metadata[k] = v
	}
	return om
}

// NoData is the output's nodata: the input's when one of bands has one;
// otherwise NaN for float outputs and the type's maximum for integer ones,
// set only when invalid pixels can occur (float input, or a saturation
// level).
func NoData(in raster.Meta, bands []int, float32, saturated bool) (float64, bool) {
	for _, b := range bands {
		if in.Bands[b].HasNoData {
			return in.Bands[b].NoData, true
		}
	}
	_, _, inInteger := raster.TypeRange(in.DataType)
	if inInteger && !saturated {
		return 0, false // integer samples are always finite: no invalid pixel can occur
	}
	outType := in.DataType
	if float32 {
		outType = "Float32"
	}
	if _, hi, outInteger := raster.TypeRange(outType); outInteger {
		return hi, true
	}
	return math.NaN(), true
}

// UncertaintyMeta is the standard-error raster's description: the output's
// grid and bands, Float32, NaN nodata.
func UncertaintyMeta(om raster.Meta) raster.Meta {
	um := om
	um.DataType = "Float32"
	um.Metadata = map[string]string{}
	for k, v := range om.Metadata {
		um.Metadata[k] = v
	}
	um.Bands = append([]raster.BandInfo(nil), om.Bands...)
	for i := range um.Bands {
		um.Bands[i].NoData, um.Bands[i].HasNoData = math.NaN(), true
	}
	return um
}

// Item is one metadata item, written in order.
type Item struct{ Key, Value string }

// Record is a raster's processing metadata: the dataset's items and each
// output band's.
type Record struct {
	Scene []Item
	Bands [][]Item
}

// Metadata is the processing metadata of a restored raster, built from the
// step's report alone: LIMPID_PARAMETERS holds the job's parameters with,
// under "bands", what each band's final pass ran with (step.BandReport's
// Applied) and under "psf_used" the kernel (psf.Record); each band's items
// repeat its settings (LIMPID_SMOOTH, LIMPID_STOP, LIMPID_BAND_PARAMETERS).
// "smooth" is present only when it was given (one value for every band).
func Metadata(rep *step.Report) Record {
	var scene []Item
	var bands [][]Item
	pm := map[string]any{
		"smooth_rule": rep.SmoothRule, "stop": rep.Stop, "choose": rep.Choose, "iterations": rep.Iterations, "tolerance": rep.Tolerance,
		"tile": rep.Tile, "overlap": rep.Overlap, "blend": rep.Blend, "seed": rep.Seed, "saturated": rep.Saturated,
	}
	if rep.Smooth != nil {
		pm["smooth"] = *rep.Smooth
	}
	var applied []*settings.Band
	for _, b := range rep.Bands {
		applied = append(applied, b.Applied)
	}
	pm["bands"] = applied
	if rep.PSFUsed.SHA256 != "" {
		pm["psf_used"] = rep.PSFUsed
	}
	if rep.Particle != nil {
		pm["particle"] = ParticleParams(rep.Particle)
	}
	params, _ := json.Marshal(pm)
	scene = []Item{
		{"LIMPID_PRODUCT", Label},
		{"LIMPID_VERSION", rep.Version},
		{"LIMPID_METHOD", "EMS (" + rep.Method + ")"},
		{"LIMPID_PSF", rep.PSF},
	}
	scene = append(scene, psfItems(rep.PSFUsed)...)
	scene = append(scene, Item{"LIMPID_PARAMETERS", string(params)})
	for _, b := range rep.Bands {
		items := []Item{
			{"LIMPID_SOURCE_BAND", strconv.Itoa(b.SourceBand)},
			{"LIMPID_BACKGROUND", strconv.FormatFloat(b.Background, 'g', -1, 64)},
			{"LIMPID_ITERATIONS_MAX", strconv.Itoa(b.MaxIterations)},
		}
		items = append(items, bandPSFItems(&b)...)
		if a := b.Applied; a != nil {
			js, _ := json.Marshal(a)
			items = append(items, Item{"LIMPID_SMOOTH", strconv.FormatFloat(a.Smooth, 'g', -1, 64)},
				Item{"LIMPID_STOP", a.StopText()}, Item{"LIMPID_BAND_PARAMETERS", string(js)})
		}
		if b.Choice != nil {
			items = append(items, Item{"LIMPID_SMOOTH_CHOSEN", strconv.FormatFloat(b.Choice.Smooth, 'g', -1, 64)},
				Item{"LIMPID_ITERATIONS_CHOSEN", strconv.Itoa(b.Choice.Iterations)})
		}
		if b.Noise != nil {
			items = append(items, Item{"LIMPID_NOISE", fmt.Sprintf("var = %g * DN + %g (%s)", b.Noise.A, b.Noise.B, b.Noise.Source)})
		}
		bands = append(bands, items)
	}
	return Record{Scene: scene, Bands: bands}
}

// UncertaintyMetadata is the processing metadata of the --uncertainty
// raster: the grid method's noise error map, or the particle method's total
// error.
func UncertaintyMetadata(rep *step.Report) Record {
	var scene []Item
	var bands [][]Item
	if rep.Particle == nil {
		// The grid method's noise error map.
		scene = []Item{
			{"LIMPID_PRODUCT", noiseMapLabel},
			{"LIMPID_VERSION", rep.Version},
			{"LIMPID_METHOD", "EMS (" + rep.Method + ")"},
			{"LIMPID_PSF", rep.PSF},
			{"LIMPID_SE_BLEND", noiseMapBlendRule},
			{"LIMPID_SE_METHOD", noiseMapRule},
		}
		for _, b := range rep.Bands {
			items := []Item{{"LIMPID_MEAN_NOISE_STANDARD_ERROR", fmt.Sprintf("%.6g", b.NoiseSE)}}
			items = append(items, bandPSFItems(&b)...)
			if b.Noise != nil {
				items = append(items, Item{"LIMPID_NOISE_MODEL", fmt.Sprintf("var = %.6g * DN + %.6g (%s)", b.Noise.A, b.Noise.B, b.Noise.Source)})
			}
			bands = append(bands, items)
		}
		return Record{Scene: scene, Bands: bands}
	}
	params, _ := json.Marshal(ParticleParams(rep.Particle))
	scene = []Item{
		{"LIMPID_PRODUCT", uncertaintyLabel},
		{"LIMPID_VERSION", rep.Version},
		{"LIMPID_METHOD", "EMS (" + rep.Method + ")"},
		{"LIMPID_PSF", rep.PSF},
	}
	scene = append(scene, psfItems(rep.PSFUsed)...)
	scene = append(scene, []Item{
		{"LIMPID_PARAMETERS", string(params)},
		{"LIMPID_SE_BLEND", "Monte Carlo part: " + step.SEBlendRule + "; noise part: " + noiseMapBlendRule + "; then sqrt(noise^2 + mc^2) per pixel (independent sources)"},
		{"LIMPID_SE_METHOD", totalRule + rep.Particle.SEMethod},
	}...)
	for i, b := range rep.Particle.Bands {
		items := []Item{{"LIMPID_MEAN_STANDARD_ERROR", fmt.Sprintf("%.6g", b.MeanTotalSE)},
			{"LIMPID_MEAN_NOISE_STANDARD_ERROR", fmt.Sprintf("%.6g", b.MeanNoiseSE)},
			{"LIMPID_MEAN_MONTE_CARLO_STANDARD_ERROR", fmt.Sprintf("%.6g", b.MeanSE)}}
		if i < len(rep.Bands) && rep.Bands[i].Noise != nil {
			nm := rep.Bands[i].Noise
			items = append(items, Item{"LIMPID_NOISE_MODEL", fmt.Sprintf("var = %.6g * DN + %.6g (%s)", nm.A, nm.B, nm.Source)})
		}
		bands = append(bands, items)
	}
	return Record{Scene: scene, Bands: bands}
}

// psfItems are the kernel's items: LIMPID_PSF_USED (the psf.Record as
// JSON) and LIMPID_PSF_SHA256 (the weights' hash, psf.WeightsSHA256); none
// for a report without a record (a stream written before records were).
// bandPSFItems records a band's own PSF (when the bands' PSFs differ).
func bandPSFItems(b *step.BandReport) []Item {
	if b.PSFUsed == nil {
		return nil
	}
	return append([]Item{{"LIMPID_PSF", b.PSF}}, psfItems(*b.PSFUsed)...)
}

func psfItems(r psf.Record) []Item {
	if r.SHA256 == "" {
		return nil
	}
	js, _ := json.Marshal(r)
	return []Item{{"LIMPID_PSF_USED", string(js)}, {"LIMPID_PSF_SHA256", r.SHA256}}
}

// ParticleParams are the particle method's parameters as the metadata and
// the HTML report record them.
func ParticleParams(p *step.ParticleReport) map[string]any {
	return map[string]any{"particles_per_pixel": p.PerPixel, "potential": p.Potential, "resampling": p.Resampling,
		"ess_threshold": p.ESSThreshold, "burn_in": p.BurnIn, "start": p.Start, "batches": p.Batches, "replicates": p.Replicates}
}
