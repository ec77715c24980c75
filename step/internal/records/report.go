package records

import (
	"limpid/psf"
	"limpid/step/noise"
	"limpid/step/settings"
)

// The report types of a restoration (step re-exports them by alias).

// Stop is the rule that ends a tile's iterations; the zero value means
// StopChange.
type Stop string

// Stop rules.
const (
	StopChange      Stop = "change"      // relative L1 change below Tolerance, or the cap
	StopAuto        Stop = "auto"        // risk minimum (patience RiskPatience)
	StopDiscrepancy Stop = "discrepancy" // Morozov with the estimated noise
	StopFixed       Stop = "fixed"       // recorded only: the particle method runs exactly Iterations
)

// Choose is the scope of the automatic choice; the zero value means
// ChooseGlobal.
type Choose string

// Choice scopes.
const (
	ChooseGlobal  Choose = "global"
	ChoosePerTile Choose = "per-tile"
)

// Choice records how a band's smoothing and stop were chosen.
type Choice struct {
	// Smooth and Iterations are the global choice (per-tile: the medians of
	// the smoothed tile map).
	Smooth     float64 `json:"smooth"`
	Iterations int     `json:"iterations"`
	Rule       string  `json:"rule"`
	// TilesUsed is the number of tiles whose risk curves entered.
	TilesUsed int `json:"tiles_used"`
	// PixelsUsed is the number of valid pixels the risk ran on (the
	// sample windows of a global choice, bounded by the pixel budget).
	PixelsUsed int `json:"pixels_used"`
	// PredictionTiles counts the tiles that used the prediction-domain
	// fallback (masked or asymmetric PSF); they enter the choice only when
	// no tile could use the DCT estimate.
	PredictionTiles int               `json:"prediction_domain_tiles"`
	Candidates      []CandidateReport `json:"candidates"`
	// TileChoices is the smoothed per-tile map (per-tile mode only).
	TileChoices []TileChoice `json:"tile_choices,omitempty"`
	// StopFrom says where the stop came from: the minimum of the summed
	// risk curve (every tile's run covers it and RiskPatience beyond), or
	// the valid-pixel-weighted median of the tiles' best iterations.
	StopFrom string `json:"stop_from,omitempty"`
	// CapBound is true when a tile's risk still fell at the iteration
	// limit for the chosen bandwidth: the stop is the limit's, not the
	// risk's.
	CapBound bool `json:"cap_bound,omitempty"`
}

// Where a choice's stop came from (Choice.StopFrom).
const (
	StopFromSummed = "summed risk curve"
	StopFromMedian = "weighted median of the tiles' best iterations"
)

// CandidateReport summarises one bandwidth over the tiles used.
type CandidateReport struct {
	Smooth float64 `json:"smooth"`
	// Risk is the sum over tiles of each tile's minimum risk (each tile's
	// R is defined up to its own constant ||Q x||^2, the same for every
	// candidate, so sums compare across candidates).
	Risk float64 `json:"risk"`
	// BestIterations is the minimum of the summed risk curve where every
	// tile's run covers it and RiskPatience iterations beyond (each tile
	// runs to its own stop), else the valid-pixel-weighted median of the
	// tiles' risk-minimising iterations; StopFrom says which.
	BestIterations int    `json:"best_iterations"`
	StopFrom       string `json:"stop_from"`
	// CapBound: a tile's risk still fell at the iteration limit.
	CapBound bool `json:"cap_bound,omitempty"`
	// Curve is the summed risk at the iterations every tile evaluated:
	// pairs [k, R_k].
	Curve [][2]float64 `json:"curve"`
	// Skipped is true when some tile did not run this bandwidth (its risk
	// had already risen at a smaller one).
	Skipped bool `json:"skipped,omitempty"`
}

// TileChoice is one tile's (smoothed) choice.
type TileChoice struct {
	Col        int     `json:"col"`
	Row        int     `json:"row"`
	Smooth     float64 `json:"smooth"`
	Iterations int     `json:"iterations"`
}

// TileReport records one tile's solve.
type TileReport struct {
	Col        int     `json:"col"`
	Row        int     `json:"row"`
	Iterations int     `json:"iterations"`
	Change     float64 `json:"final_relative_change"`
	Flat       bool    `json:"flat,omitempty"`
	// Changes is the relative change per iteration, kept for the tiles of
	// the first band nearest the quarter points of the tile plan (all tiles
	// of a plan with at most 2 per axis; runner.recorded), for the
	// convergence plot.
	Changes []float64 `json:"changes,omitempty"`
}

// BandReport records one output band.
type BandReport struct {
	Band           int     `json:"band"`
	SourceBand     int     `json:"source_band"`
	Background     float64 `json:"background"`
	BackgroundRule string  `json:"background_rule"`
	FluxBefore     float64 `json:"flux_before"`
	FluxAfter      float64 `json:"flux_after"`
	ValidPixels    int64   `json:"valid_pixels"`
	MaxIterations  int     `json:"max_iterations"`
	// PSF and PSFUsed: the band's own PSF, when the bands' PSFs differ.
	PSF     string      `json:"psf,omitempty"`
	PSFUsed *psf.Record `json:"psf_used,omitempty"`
	// Noise is the noise model used (estimated or given), when the stop,
	// the smoothing rule or the noise error map needed one.
	Noise *noise.Model `json:"noise,omitempty"`
	// NoiseSE is the mean over valid pixels of the grid method's noise
	// error map (DN; noisemap.go), when one was written.
	NoiseSE float64 `json:"mean_noise_se,omitempty"`
	// Choice records the automatic smoothing/stop choice.
	Choice *Choice `json:"choice,omitempty"`
	// Applied is what the band's final pass ran with, read from its solver.
	Applied *settings.Band `json:"applied,omitempty"`
	Tiles   []TileReport   `json:"tiles"`
}

// Report is what a restoration did.
type Report struct {
	Version     string       `json:"limpid_version"`
	Method      string       `json:"method"`
	PSF         string       `json:"psf"`
	PSFSize     [2]int       `json:"psf_size"`
	PSFUsed     psf.Record   `json:"psf_used"`
	ConvPath    string       `json:"convolution"`
	Smooth      *float64     `json:"smooth,omitempty"` // the given bandwidth; nil when chosen (see Bands[].Applied)
	SmoothRule  string       `json:"smooth_rule"`
	Stop        Stop         `json:"stop"`
	Choose      Choose       `json:"choose,omitempty"`
	Iterations  int          `json:"iterations"`
	Tolerance   float64      `json:"tolerance"`
	Tile        int          `json:"tile"`
	Overlap     int          `json:"overlap"`
	Blend       int          `json:"blend"`
	Workers     int          `json:"workers"`
	Seed        uint64       `json:"seed"`
	Saturated   *float64     `json:"saturated,omitempty"`
	Width       int          `json:"width"`
	Height      int          `json:"height"`
	Bands       []BandReport `json:"bands"`
	WallSeconds float64      `json:"wall_seconds"`
	// Particle is set for the particle method.
	Particle *Particle `json:"particle,omitempty"`
	// Decided is every band's decision (Config.Decided replays it).
	Decided []Decision `json:"-"`
}

// Decision is what Restore decided for one band from the whole scene: the
// background, the noise model and the smoothing and stop (Report.Decided).
// Given back as Config.Decided it makes Restore build the same solvers and
// decide nothing again (a scene plan, step/plan).
type Decision struct {
	Rule       string  `json:"rule"`
	Smooth     float64 `json:"smooth"`
	Iterations int     `json:"iterations"`
	// Kept: the scene is one tile and the choice kept its iterate; the
	// replay recomputes it (iterateJVP reproduces the plain iterate).
	Kept       bool         `json:"kept_iterate,omitempty"`
	Tiles      []TileChoice `json:"tiles,omitempty"`
	Background float64      `json:"background"`
	Noise      *noise.Model `json:"noise,omitempty"`
	Choice     *Choice      `json:"choice,omitempty"`
}

// RiskMode is where a tile's risk was estimated.
type RiskMode string

// Risk modes.
const (
	// RiskDCT: the DCT-domain estimate (the PSF is diagonal there).
	RiskDCT RiskMode = "dct"
	// RiskPrediction: the prediction-domain estimate over valid pixels
	// (heavily masked tiles).
	RiskPrediction RiskMode = "prediction"
	// RiskSkipped: the candidate was not run on the tile.
	RiskSkipped RiskMode = "skipped"
)
