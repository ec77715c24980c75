package plan

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sort"
	"strconv"

	"limpid/psf"
	"limpid/raster"
	"limpid/step"
	"limpid/step/noise"
)

// Format and Version identify a plan file; a reader refuses other versions.
const (
	Format  = "limpid scene plan"
	Version = 1
)

// ErrPlan is wrapped by errors about a plan that does not fit its use
// (wrong version, another input, a shard outside the plan).
var ErrPlan = errors.New("plan")

// Float is a float64 that keeps NaN and infinities in JSON (as a string
// in Go's 'g' format); finite values are exact.
type Float float64

// MarshalJSON writes the shortest exact text.
func (f Float) MarshalJSON() ([]byte, error) {
	return json.Marshal(strconv.FormatFloat(float64(f), 'g', -1, 64))
}

// UnmarshalJSON reads what MarshalJSON wrote.
func (f *Float) UnmarshalJSON(b []byte) error {
	var s string
	if err := json.Unmarshal(b, &s); err != nil {
		return err
	}
	v, err := strconv.ParseFloat(s, 64)
	*f = Float(v)
	return err
}

// Settings are the restoration settings a plan fixes (step.Config without
// the per-run fields: workers, progress, sinks).
type Settings struct {
	Method  step.Method `json:"method"`
	PSFSpec string      `json:"psf"`
	PSF     *psf.Kernel `json:"psf_kernel"`
	// BandPSF: a PSF per output band when they differ (null: PSF).
	BandPSF        []*psf.Kernel `json:"band_psf_kernels,omitempty"`
	BandPSFSpec    []string      `json:"band_psfs,omitempty"`
	Smooth         float64       `json:"smooth"`
	SmoothAuto     bool          `json:"smooth_auto"`
	Stop           step.Stop     `json:"stop"`
	Choose         step.Choose   `json:"choose"`
	Iterations     int           `json:"iterations"`
	Tolerance      Float         `json:"tolerance"`
	Background     float64       `json:"background"`
	BackgroundAuto bool          `json:"background_auto"`
	Tile           int           `json:"tile"`
	Overlap        int           `json:"overlap"`
	RandomKey      uint64        `json:"random_stream_key"`
	Saturated      Float         `json:"saturated"`
	HasSaturated   bool          `json:"has_saturated"`
	Noise          *noise.Model  `json:"noise,omitempty"`
}

// SettingsOf copies cfg's plan settings (cfg resolved).
func SettingsOf(cfg step.Config) Settings {
	return Settings{Method: cfg.Method, PSFSpec: cfg.PSFSpec, PSF: cfg.PSF, BandPSF: cfg.BandPSF, BandPSFSpec: cfg.BandPSFSpec, Smooth: cfg.Smooth, SmoothAuto: cfg.SmoothAuto,
		Stop: cfg.Stop, Choose: cfg.Choose, Iterations: cfg.Iterations, Tolerance: Float(cfg.Tolerance),
		Background: cfg.Background, BackgroundAuto: cfg.BackgroundAuto, Tile: cfg.Tile, Overlap: cfg.Overlap,
		RandomKey: cfg.Seed, Saturated: Float(cfg.Saturated), HasSaturated: cfg.HasSaturated, Noise: cfg.Noise}
}

// Config is the step.Config the settings describe, with the decisions.
func (p *File) Config(workers int) step.Config {
	s := p.Settings
	return step.Config{Method: s.Method, PSFSpec: s.PSFSpec, PSF: s.PSF, BandPSF: s.BandPSF, BandPSFSpec: s.BandPSFSpec, Smooth: s.Smooth, SmoothAuto: s.SmoothAuto,
		Stop: s.Stop, Choose: s.Choose, Iterations: s.Iterations, Tolerance: float64(s.Tolerance),
		Background: s.Background, BackgroundAuto: s.BackgroundAuto, Tile: s.Tile, Overlap: s.Overlap,
		Seed: s.RandomKey, Saturated: float64(s.Saturated), HasSaturated: s.HasSaturated, Noise: s.Noise,
		Workers: workers, Decided: p.Decided}
}

// Band describes one output band (raster.BandInfo with a JSON-safe nodata).
type Band struct {
	Description string            `json:"description,omitempty"`
	ColorInterp string            `json:"color_interp,omitempty"`
	Metadata    map[string]string `json:"metadata,omitempty"`
	NoData      Float             `json:"nodata"`
	HasNoData   bool              `json:"has_nodata"`
}

// Output describes the output raster: its grid and bands (raster.Meta) and
// what invalid pixels become.
type Output struct {
	Width     int               `json:"width"`
	Height    int               `json:"height"`
	DataType  string            `json:"data_type"`
	InputType string            `json:"input_data_type"`
	Geo       raster.Geo        `json:"georeferencing"`
	Bands     []Band            `json:"bands"`
	Metadata  map[string]string `json:"metadata,omitempty"`
	NoData    Float             `json:"nodata"`
	HasNoData bool              `json:"has_nodata"`
}

// OutputOf records the output meta om (and the writer's nodata).
func OutputOf(om raster.Meta, inType string, nodata float64, hasND bool) Output {
	o := Output{Width: om.Width, Height: om.Height, DataType: om.DataType, InputType: inType, Geo: om.Geo, Metadata: om.Metadata,
		NoData: Float(nodata), HasNoData: hasND}
	for _, b := range om.Bands {
		o.Bands = append(o.Bands, Band{Description: b.Description, ColorInterp: b.ColorInterp, Metadata: b.Metadata, NoData: Float(b.NoData), HasNoData: b.HasNoData})
	}
	return o
}

// Meta is the output's raster.Meta.
func (o Output) Meta() raster.Meta {
	m := raster.Meta{Width: o.Width, Height: o.Height, DataType: o.DataType, Geo: o.Geo, Metadata: o.Metadata}
	for _, b := range o.Bands {
		m.Bands = append(m.Bands, raster.BandInfo{Description: b.Description, ColorInterp: b.ColorInterp, Metadata: b.Metadata, NoData: float64(b.NoData), HasNoData: b.HasNoData})
	}
	return m
}

// Tile is one tile of the plan with its valid pixel count over all bands
// (the shards' balance).
type Tile struct {
	Col   int   `json:"col"`
	Row   int   `json:"row"`
	Valid int64 `json:"valid_pixels"`
}

// File is a scene plan as written to PLAN.json.
type File struct {
	Format  string `json:"format"`
	Version int    `json:"version"`
	// Input is Fingerprint of the input the plan was made for; InputSize
	// says it in words for messages.
	Input     string `json:"input_sha256"`
	InputSize string `json:"input"`
	// Bands are the restored source bands, 0-based, in output order.
	Bands      []int    `json:"bands"`
	OutputType string   `json:"output_type"`
	Settings   Settings `json:"settings"`
	Output     Output   `json:"output"`
	// Decided is every band's decision (step.Report.Decided).
	Decided []step.Decision `json:"decided"`
	// Report is the restoration report up to the final pass (no tiles):
	// a merge completes it.
	Report *step.Report `json:"report"`
	// FluxBefore and ValidPixels per band, summed in the single run's
	// order (rows, then columns), for the merged report.
	FluxBefore  []float64 `json:"flux_before"`
	ValidPixels []int64   `json:"valid_pixels"`
	Tiles       []Tile    `json:"tiles"`
}

// Fingerprint is the SHA-256 (hex) of what a plan depends on in its input
// besides the pixels: size, data type, georeferencing and the band list
// (count and each band's nodata).
func Fingerprint(m raster.Meta) string {
	h := sha256.New()
	put := func(v uint64) { binary.Write(h, binary.LittleEndian, v) }
	put(uint64(m.Width))
	put(uint64(m.Height))
	fmt.Fprintf(h, "%s\x00", m.DataType)
	for _, v := range m.Geo.Transform {
		put(math.Float64bits(v))
	}
	fmt.Fprintf(h, "%t\x00%s\x00", m.Geo.HasTransform, m.Geo.WKT)
	put(uint64(len(m.Bands)))
	for _, b := range m.Bands {
		put(math.Float64bits(b.NoData))
		fmt.Fprintf(h, "%t\x00", b.HasNoData)
	}
	return hex.EncodeToString(h.Sum(nil))
}

// Describe is the input summary for messages: "W x H, N bands, TYPE".
func Describe(m raster.Meta) string {
	return fmt.Sprintf("%dx%d, %d bands, %s", m.Width, m.Height, len(m.Bands), m.DataType)
}

// Check refuses a plan made for another input or by another version.
func (p *File) Check(m raster.Meta) error {
	if err := p.Validate(); err != nil {
		return err
	}
	if fp := Fingerprint(m); fp != p.Input {
		return fmt.Errorf("%w: made for another input (%s; this input: %s, size, georeferencing or bands differ)", ErrPlan, p.InputSize, Describe(m))
	}
	for _, b := range p.Bands {
		if b >= len(m.Bands) {
			return fmt.Errorf("%w: band %d does not exist (the input has %d)", ErrPlan, b+1, len(m.Bands))
		}
	}
	return nil
}

// Validate refuses a plan of another version and one whose parts do not
// fit together (a file edited by hand or cut short): the kernel, the
// bands, the decisions, the report, the output and the tiles.
func (p *File) Validate() error {
	if p.Format != Format || p.Version != Version {
		return fmt.Errorf("%w: format %q version %d; this limpid reads %q version %d (make the plan again)", ErrPlan, p.Format, p.Version, Format, Version)
	}
	bad := func(what string) error { return fmt.Errorf("%w: %s (make the plan again)", ErrPlan, what) }
	if p.Settings.PSF == nil {
		return bad("no PSF kernel")
	}
	for i, k := range append([]*psf.Kernel{p.Settings.PSF}, p.Settings.BandPSF...) {
		if k == nil && i > 0 {
			continue
		}
		if _, err := psf.NewKernel(k.W, k.H, k.Data); err != nil {
			return bad(err.Error())
		}
		if (k.X != nil && len(k.X) != k.W) || (k.Y != nil && len(k.Y) != k.H) || (k.X == nil) != (k.Y == nil) {
			return bad("the PSF kernel's factors do not match its size")
		}
	}
	nb := len(p.Bands)
	if p.Settings.BandPSF != nil && len(p.Settings.BandPSF) != nb {
		return bad(fmt.Sprintf("%d band PSFs for %d bands", len(p.Settings.BandPSF), nb))
	}
	if nb == 0 || len(p.Decided) != nb || p.Report == nil || len(p.Report.Bands) != nb || len(p.Output.Bands) != nb {
		return bad(fmt.Sprintf("%d bands with %d decisions, %d output bands", nb, len(p.Decided), len(p.Output.Bands)))
	}
	for _, b := range p.Bands {
		if b < 0 {
			return bad(fmt.Sprintf("band %d", b+1))
		}
	}
	for i, d := range p.Decided {
		switch d.Rule {
		case step.DecideNone, step.DecideFixed, step.DecideDiscrepancy, step.DecideChosen:
		default:
			return bad(fmt.Sprintf("band %d: decision rule %q", i+1, d.Rule))
		}
	}
	if p.Output.Width < 1 || p.Output.Height < 1 {
		return bad(fmt.Sprintf("output size %dx%d", p.Output.Width, p.Output.Height))
	}
	tp, err := p.Tiling()
	if err != nil {
		return bad(err.Error())
	}
	if len(p.Tiles) != tp.NTiles() || len(p.FluxBefore) != nb || len(p.ValidPixels) != nb {
		return bad(fmt.Sprintf("%d tiles listed, the tiling has %d", len(p.Tiles), tp.NTiles()))
	}
	for i, t := range p.Tiles {
		if t.Col != i%len(tp.Cols) || t.Row != i/len(tp.Cols) || t.Valid < 0 {
			return bad(fmt.Sprintf("tile entry %d is (%d,%d)", i, t.Col, t.Row))
		}
	}
	return nil
}

// Tiling is the plan's tile layout.
func (p *File) Tiling() (step.Plan, error) {
	return step.NewPlan(p.Output.Width, p.Output.Height, p.Settings.Tile, max(p.Settings.Overlap, 0))
}

// Hash is the plan's identity for shard files: the first 16 hex digits of
// the SHA-256 of its JSON.
func (p *File) Hash() string {
	b, _ := json.Marshal(p)
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:8])
}

// Assign gives each tile (in the order of tiles) a shard in [0, n): the
// longest-processing-time rule over the tiles' valid pixels plus one (an
// empty tile still costs a read), heaviest first, ties by tile order, each
// to the least loaded shard (ties: the lowest index). Source: Graham,
// "Bounds on multiprocessing timing anomalies", SIAM J. Appl. Math. 17
// (1969): the rule is within 4/3 of the best balance.
func Assign(tiles []Tile, n int) []int {
	order := make([]int, len(tiles))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return tiles[order[a]].Valid > tiles[order[b]].Valid })
	load := make([]int64, n)
	out := make([]int, len(tiles))
	for _, t := range order {
		best := 0
		for s := 1; s < n; s++ {
			if load[s] < load[best] {
				best = s
			}
		}
		out[t] = best
		load[best] += tiles[t].Valid + 1
	}
	return out
}

// New is the plan of a decided run: rep from step.Decide with cfg (resolved)
// on an input described by in, restoring bands into out.
func New(rep *step.Report, cfg step.Config, in raster.Meta, bands []int, outputType string, out Output) *File {
	r := *rep
	r.WallSeconds = 0
	return &File{Format: Format, Version: Version, Input: Fingerprint(in), InputSize: Describe(in),
		Bands: bands, OutputType: outputType, Settings: SettingsOf(cfg), Output: out, Decided: rep.Decided, Report: &r}
}
