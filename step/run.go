package step

import (
	"context"
	"fmt"
	"math"
	"runtime"
	"sort"
	"time"

	"limpid/psf"
	"limpid/raster"
	"limpid/step/conv"
	"limpid/step/internal/errs"
	"limpid/step/internal/level"
	"limpid/step/internal/records"
	"limpid/step/noise"
	"limpid/step/rowio"
	"limpid/step/watch"
)

// Version is limpid's version, recorded in outputs and reports.
const Version = "0.2.0"

// Method is the solver of a restoration.
type Method string

// Methods.
const (
	// MethodGrid is GridEMS, EMS on the pixel grid.
	MethodGrid Method = "grid"
	// MethodParticle is ParticleEMS, its particle approximation.
	MethodParticle Method = "particle"
)

// Defaults measured on the project's own scenes (DEVELOPERS.md, "Choosing
// the defaults").
const (
	DefaultSmooth     = 0.2
	DefaultIterations = 50
	DefaultTolerance  = 1e-4
	DefaultTile       = 512
	// BackgroundPercentile is the percentile of valid pixels --background
	// auto takes.
	BackgroundPercentile = 1.0
)

// Config is one restoration job. Zero values mean the documented default
// only where a field says so.
type Config struct {
	Method  Method // zero: MethodGrid
	PSF     *psf.Kernel
	PSFSpec string
	// BandPSF, when set, gives each output band its own PSF (one entry per
	// band; a nil entry: PSF); BandPSFSpec holds their specs.
	BandPSF     []*psf.Kernel
	BandPSFSpec []string
	// Smooth is the EMS smoothing bandwidth in pixels (0 = Richardson-Lucy).
	Smooth     float64
	Iterations int
	Tolerance  float64
	// Background is the additive background b for every band;
	// BackgroundAuto replaces it per band by a low percentile of the band's
	// valid pixels.
	Background     float64
	BackgroundAuto bool
	Tile           int
	// Overlap is the halo in pixels read around each tile: 0 (the zero
	// value) means DefaultOverlap; NoOverlap asks for none. Halo gives the
	// resolved value.
	Overlap int
	// Workers <= 0 means runtime.NumCPU().
	Workers      int
	Seed         uint64
	Saturated    float64
	HasSaturated bool
	// SmoothAuto chooses the bandwidth per band among AutoSmooths by the
	// risk estimate (then Smooth is only the fallback).
	SmoothAuto bool
	// Stop is StopChange (the zero value), StopAuto or StopDiscrepancy;
	// Iterations is the cap for all three.
	Stop Stop
	// IterationLimit, with StopAuto, lets the choice's runs whose risk still
	// falls at Iterations go on up to it (Resolve sets AutoHardCap when
	// Iterations was left to its default; 0 or less than Iterations: no
	// extension).
	IterationLimit int
	// Choose is ChooseGlobal (the zero value) or ChoosePerTile.
	Choose Choose
	// ChoiceBudget bounds the pixels per band a global choice over several
	// sample tiles runs its risk on (0: the default ChoiceBudget; negative:
	// the whole in-scene part of every sample tile).
	ChoiceBudget int
	// Noise, when set, replaces the estimated per-band noise model.
	Noise *noise.Model
	// Progress, when set, is called by the tile-stream route (step/stream)
	// after each tile with the tiles done (a stream's total is not known:
	// 0); the raster route reports through Watch.
	Progress func(done, total int)
	// Watch, when set, sees each pass over the scene start (noise estimate,
	// automatic choice, the final pass) and each of its tiles done.
	Watch watch.Watcher
	// Particle holds the particle method's parameters (particle_config.go).
	Particle ParticleConfig
	// Decided, when set, replays an earlier run's decisions per band
	// (Report.Decided): Restore decides nothing from the scene.
	Decided []Decision
	// Tiles, when set, makes Restore a shard (decided.go).
	Tiles *TileSink
	// Uncertainty, when set, receives the per-pixel error map, same grid
	// and bands as dst (NaN on invalid pixels): with the grid method the
	// data-noise standard error (noisemap.go), with the particle method the
	// total sqrt(noise^2 + mc^2) of that and its Monte Carlo standard error
	// (uncertainty.go). Restore writes it; the caller commits it.
	Uncertainty raster.Writer
	// seParts, when set (tests), sees each band's finished rows of the
	// particle method's parts and total (row y0 on; valid pixels only).
	seParts func(band, y0 int, mc, data, total []float32)
}

// DefaultOverlap is the halo rule: 4 (r_H + r_S) rounded up to a multiple of
// 8, at least 16, at most the tile size. Exact tile independence would need
// K (2 r_H + r_S) after K iterations (derived: each EMS iteration applies H,
// H^T and S, so a pixel's influence spreads 2 r_H + r_S per iteration); the influence of the
// tile border decays fast, and the tiled-vs-whole test measures that this
// halo keeps the difference below 0.5 % of the data range.
func DefaultOverlap(k *psf.Kernel, smooth float64, tile int) int {
	rs := (len(conv.SmoothingKernel(smooth)) - 1) / 2
	if rs < 0 {
		rs = 0
	}
	r := max(k.Rx(), k.Ry())
	o := 4 * (r + rs)
	o = (o + 7) / 8 * 8
	return min(max(o, 16), tile)
}

// The report types live in step/internal/records (no engine code).
type (
	Stop            = records.Stop
	Choose          = records.Choose
	Choice          = records.Choice
	CandidateReport = records.CandidateReport
	TileChoice      = records.TileChoice
	TileReport      = records.TileReport
	BandReport      = records.BandReport
	Report          = records.Report
	Decision        = records.Decision
	RiskMode        = records.RiskMode
)

// Stop rules, choice scopes, stop sources and risk modes (see records).
const (
	StopChange, StopAuto, StopDiscrepancy, StopFixed = records.StopChange, records.StopAuto, records.StopDiscrepancy, records.StopFixed
	ChooseGlobal, ChoosePerTile                      = records.ChooseGlobal, records.ChoosePerTile
	StopFromSummed, StopFromMedian                   = records.StopFromSummed, records.StopFromMedian
	RiskDCT, RiskPrediction, RiskSkipped             = records.RiskDCT, records.RiskPrediction, records.RiskSkipped
)

// The engine's error types live in step/internal/errs.
type (
	TileError  = errs.TileError
	FieldError = errs.FieldError
)

// ErrConfig is wrapped by configuration errors (exit code 2).
var ErrConfig = errs.ErrConfig

// FieldErrorf is a FieldError about field with the formatted Text (field
// names in braces), for the engine's sub-packages.
var FieldErrorf = errs.FieldErrorf

var fieldErrorf = errs.FieldErrorf

// NoOverlap as Config.Overlap asks for tiles without a halo.
const NoOverlap = -1

// Halo is the halo in pixels that Overlap asks for (after Resolve).
func (cfg *Config) Halo() int { return max(cfg.Overlap, 0) }

// SetTiling sets the tile size and a halo given in pixels (0: none), as a
// tile stream records them.
func (cfg *Config) SetTiling(tile, halo int) {
	cfg.Tile, cfg.Overlap = tile, halo
	if halo == 0 {
		cfg.Overlap = NoOverlap
	}
}

// DefaultStop is the stop rule a method gets when the caller asks for none
// (a command line without a stop flag): the risk minimum for the grid
// method; the change rule for the particle method, which runs a fixed
// number of iterations (its Monte Carlo average has no pathwise derivative
// for the risk estimate). Config's zero Stop is StopChange.
func DefaultStop(m Method) Stop {
	if m == MethodParticle {
		return StopChange
	}
	return StopAuto
}

// IterationCap is the iteration cap a stop rule gets when Config.Iterations
// is 0: AutoCap for the risk and discrepancy stops (they end a tile
// themselves), DefaultIterations for the change rule.
func IterationCap(s Stop) int {
	if s == StopAuto || s == StopDiscrepancy {
		return AutoCap
	}
	return DefaultIterations
}

// Resolve fills defaults and validates cfg against the scene.
func (cfg *Config) Resolve() error {
	if err := cfg.resolveSolver(); err != nil {
		return err
	}
	if err := cfg.resolveTiling(); err != nil {
		return err
	}
	if cfg.Method == MethodParticle {
		if cfg.Stop != StopChange {
			return fieldErrorf("Stop", "{Stop} %s: the particle method runs a fixed number of iterations ({Iterations}, {Particle.BurnIn}); {Stop} auto and discrepancy apply to the grid method", cfg.Stop)
		}
		return cfg.resolveParticle()
	}
	return nil
}

// resolveSolver: the method, the stop rule and its cap, the smoothing, the
// choice's scope and the given noise model.
func (cfg *Config) resolveSolver() error {
	if cfg.PSF == nil {
		return fmt.Errorf("%w: no PSF", ErrConfig)
	}
	if cfg.Method == "" {
		cfg.Method = MethodGrid
	}
	if cfg.Method != MethodGrid && cfg.Method != MethodParticle {
		return fieldErrorf("Method", "{Method} %q: use grid or particle", cfg.Method)
	}
	switch cfg.Stop {
	case "":
		cfg.Stop = StopChange
	case StopChange, StopAuto, StopDiscrepancy:
	default:
		return fieldErrorf("Stop", "{Stop} %q: use change, auto or discrepancy", cfg.Stop)
	}
	if cfg.Iterations == 0 {
		cfg.Iterations = IterationCap(cfg.Stop)
		if cfg.Stop == StopAuto && cfg.IterationLimit == 0 {
			cfg.IterationLimit = AutoHardCap
		}
	}
	if cfg.Iterations < 1 || cfg.Iterations > 100000 {
		return fieldErrorf("Iterations", "{Iterations} %d must be between 1 and 100000", cfg.Iterations)
	}
	if math.IsNaN(cfg.Smooth) || cfg.Smooth < 0 || cfg.Smooth > 10 {
		return fieldErrorf("Smooth", "{Smooth} %g must be between 0 and 10 pixels", cfg.Smooth)
	}
	switch cfg.Choose {
	case "":
		cfg.Choose = ChooseGlobal
	case ChooseGlobal, ChoosePerTile:
	default:
		return fieldErrorf("Choose", "{Choose} %q: use global or per-tile", cfg.Choose)
	}
	if cfg.SmoothAuto && cfg.Stop == StopDiscrepancy {
		return fieldErrorf("Stop", "{Stop} discrepancy needs a fixed {Smooth} (the risk estimate chooses both with {Stop} auto)")
	}
	if n := cfg.Noise; n != nil && (!(n.A >= 0) || !(n.B >= 0) || math.IsInf(n.A, 0) || math.IsInf(n.B, 0) || n.A+n.B == 0) {
		return fieldErrorf("Noise", "{Noise} a=%g,b=%g: both must be finite, >= 0 and not both 0", n.A, n.B)
	}
	if n := cfg.Noise; n != nil && n.Floor == 0 {
		m := *n
		m.Floor = noise.GivenFloor(m.B)
		cfg.Noise = &m
	}
	return nil
}

// resolveTiling: the change tolerance, the background, the tiles, their
// halo and the workers.
func (cfg *Config) resolveTiling() error {
	if math.IsNaN(cfg.Tolerance) || cfg.Tolerance < 0 {
		return fieldErrorf("Tolerance", "{Tolerance} %g must be >= 0", cfg.Tolerance)
	}
	if math.IsNaN(cfg.Background) || math.IsInf(cfg.Background, 0) {
		return fieldErrorf("Background", "{Background} must be a finite number or auto")
	}
	if cfg.Tile == 0 {
		cfg.Tile = DefaultTile
	}
	if cfg.Tile < 16 || cfg.Tile > 16384 {
		return fieldErrorf("Tile", "{Tile} %d must be between 16 and 16384", cfg.Tile)
	}
	eps := cfg.Smooth
	if cfg.SmoothAuto {
		eps = AutoSmooths[len(AutoSmooths)-1]
	}
	o := 0
	for _, k := range append([]*psf.Kernel{cfg.PSF}, cfg.BandPSF...) {
		if k != nil && (k.W > cfg.Tile || k.H > cfg.Tile) {
			return fieldErrorf("Tile", "the PSF (%dx%d) is larger than a tile (%d): raise {Tile}", k.W, k.H, cfg.Tile)
		} else if k != nil {
			o = max(o, DefaultOverlap(k, eps, cfg.Tile))
		}
	}
	if cfg.Overlap == 0 {
		cfg.Overlap = o
	}
	if cfg.Overlap < NoOverlap {
		return fieldErrorf("Overlap", "{Overlap} %d must be >= 0", cfg.Overlap)
	}
	if cfg.Overlap > cfg.Tile {
		return fieldErrorf("Overlap", "{Overlap} %d is larger than the tile size %d", cfg.Overlap, cfg.Tile)
	}
	if cfg.Workers <= 0 {
		cfg.Workers = runtime.NumCPU()
	}
	if cfg.Workers > 1024 {
		return fieldErrorf("Workers", "{Workers} %d is more than 1024", cfg.Workers)
	}
	return nil
}

// NewSolver builds the solver cfg names.
func (cfg *Config) NewSolver() Solver {
	if cfg.PerBandPSF() {
		bs := &bandSolver{}
		for b := range cfg.BandPSF {
			c := *cfg
			c.PSF, c.BandPSF = cfg.Kernel(b), nil
			bs.byBand = append(bs.byBand, c.NewSolver())
		}
		return bs
	}
	if cfg.Method == MethodParticle {
		return cfg.newParticleSolver()
	}
	g := newGrid(conv.New(cfg.PSF), cfg.Smooth, cfg.Iterations, cfg.Tolerance)
	if cfg.Stop == StopDiscrepancy && cfg.Noise != nil {
		// Stateless per tile with a given noise model (tile streams);
		// Restore builds the same solver per band in regularise.
		g.Tolerance, g.Noise, g.Tau = 0, cfg.Noise, DiscrepancyTau
	} else if cfg.Stop != StopChange {
		g.Tolerance = 0
	}
	return g
}

// Kernel is output band b's PSF.
func (cfg *Config) Kernel(b int) *psf.Kernel {
	if b < len(cfg.BandPSF) && cfg.BandPSF[b] != nil {
		return cfg.BandPSF[b]
	}
	return cfg.PSF
}

// PerBandPSF: some band has a PSF other than PSF.
func (cfg *Config) PerBandPSF() bool {
	for b := range cfg.BandPSF {
		if cfg.Kernel(b) != cfg.PSF {
			return true
		}
	}
	return false
}

// operators is every band's PSF operator, one per distinct kernel.
func (cfg *Config) operators(nb int) []*conv.Operator {
	hs, by := make([]*conv.Operator, nb), map[*psf.Kernel]*conv.Operator{}
	for b := range hs {
		k := cfg.Kernel(b)
		if by[k] == nil {
			by[k] = conv.New(k)
		}
		hs[b] = by[k]
	}
	return hs
}

// Restore reads bands (0-based, output order) of src tile by tile, restores
// them and writes the blended result to dst in strips. Memory is bounded by
// about Width x (Tile + 2 Overlap) x bands floats; output is identical for
// any number of workers. dst receives NaN for invalid pixels.
func Restore(ctx context.Context, src raster.Reader, bands []int, dst raster.Writer, cfg Config) (*Report, error) {
	return restore(ctx, src, bands, dst, cfg, false)
}

func restore(ctx context.Context, src raster.Reader, bands []int, dst raster.Writer, cfg Config, decideOnly bool) (*Report, error) {
	start := time.Now()
	if err := cfg.Resolve(); err != nil {
		return nil, err
	}
	meta := src.Meta()
	plan, err := NewPlan(meta.Width, meta.Height, cfg.Tile, cfg.Halo())
	if err != nil {
		return nil, fmt.Errorf("%w: %v", ErrConfig, err)
	}
	if cfg.BandPSF != nil && len(cfg.BandPSF) != len(bands) {
		return nil, fmt.Errorf("%w: %d band PSFs for %d bands", ErrConfig, len(cfg.BandPSF), len(bands))
	}
	solver := cfg.NewSolver()
	rep := newReport(&cfg, plan, solver)
	validity := make([]ValidFunc, len(bands))
	for i, b := range bands {
		if b < 0 || b >= len(meta.Bands) {
			return nil, fmt.Errorf("%w: band %d does not exist (input has %d)", ErrConfig, b+1, len(meta.Bands))
		}
		bi := meta.Bands[b]
		validity[i] = NewValid(bi.NoData, bi.HasNoData, cfg.Saturated, cfg.HasSaturated)
		rep.Bands = append(rep.Bands, BandReport{Band: i + 1, SourceBand: b + 1, Background: cfg.Background, BackgroundRule: "given"})
		if cfg.PerBandPSF() {
			spec := cfg.PSFSpec
			if i < len(cfg.BandPSFSpec) && cfg.BandPSF[i] != nil {
				spec = cfg.BandPSFSpec[i]
			}
			used := psf.Describe(spec, cfg.Kernel(i))
			rep.Bands[i].PSF, rep.Bands[i].PSFUsed = spec, &used
		}
	}
	if cfg.Decided != nil && len(cfg.Decided) != len(bands) {
		return nil, fmt.Errorf("%w: %d decided bands for %d bands", ErrConfig, len(cfg.Decided), len(bands))
	}
	if cfg.BackgroundAuto {
		bg, err := AutoBackground(src, bands, validity)
		if cfg.Decided != nil {
			bg, err = decidedBackground(cfg.Decided), nil
		}
		if err != nil {
			return nil, err
		}
		for i := range rep.Bands {
			rep.Bands[i].Background = bg[i]
			rep.Bands[i].BackgroundRule = fmt.Sprintf("auto: %g percentile of valid pixels", BackgroundPercentile)
		}
	}
	r := &runner{cfg: cfg, plan: plan, src: src, dst: dst, bands: bands, valid: validity, rep: rep, solver: solver,
		withSE: cfg.Method == MethodParticle || cfg.Uncertainty != nil, dataSE: cfg.Method == MethodGrid && cfg.Uncertainty != nil,
		noisePart: cfg.Method == MethodParticle && cfg.Uncertainty != nil, seParts: cfg.seParts, sink: cfg.Tiles}
	if cfg.Tiles != nil {
		r.need = cfg.Tiles.Need
	}
	if cfg.SmoothAuto || cfg.Stop != StopChange {
		if cfg.SmoothAuto || cfg.Stop == StopAuto {
			rep.Choose = cfg.Choose
		}
		s, err := r.regularise(ctx)
		if err != nil {
			return nil, err
		}
		r.solver = s
	}
	if (r.dataSE || r.noisePart) && r.noise == nil && !decideOnly {
		if _, err := r.bandNoise(ctx); err != nil {
			return nil, err
		}
	}
	for i := range rep.Bands {
		rep.Bands[i].Applied = applied(r.solver, i, cfg.SmoothAuto, cfg.Stop == StopAuto, rep.Bands[i].Noise)
	}
	if r.finishDecided(); decideOnly {
		return rep, nil
	}
	if cfg.Watch != nil {
		cfg.Watch.Start(watch.Pass{Kind: watch.Final, What: "restoring", Tiles: len(bands) * plan.NTiles()})
	}
	if err := r.run(ctx); err != nil {
		return nil, err
	}
	if r.withSE {
		r.finishSE()
	}
	finishReport(rep)
	rep.WallSeconds = time.Since(start).Seconds()
	return rep, nil
}

// newReport records the resolved job (bands are added by Restore).
func newReport(cfg *Config, plan Plan, solver Solver) *Report {
	rep := &Report{Version: Version, Method: solver.Name(), PSF: cfg.PSFSpec, PSFSize: [2]int{cfg.PSF.W, cfg.PSF.H},
		ConvPath: conv.New(cfg.PSF).Kind(), PSFUsed: psf.Describe(cfg.PSFSpec, cfg.PSF), SmoothRule: "given", Stop: cfg.RecordedStop(), Iterations: cfg.Iterations, Tolerance: cfg.Tolerance,
		Tile: cfg.Tile, Overlap: plan.Overlap, Blend: plan.Blend, Workers: cfg.Workers, Seed: cfg.Seed,
		Width: plan.W, Height: plan.H}
	if cfg.HasSaturated {
		s := cfg.Saturated
		rep.Saturated = &s
	}
	if cfg.Method == MethodParticle {
		pc := cfg.Particle
		rep.Particle = &ParticleReport{PerPixel: pc.PerPixel, Potential: pc.Potential.String(), Resampling: pc.Resampling.String(),
			ESSThreshold: pc.ESSThreshold, BurnIn: pc.BurnIn, Start: pc.Start.String(), Batches: pc.Batches, SEBlend: SEBlendRule,
			Replicates: pc.Replicates, SEMethod: pc.SEMethod()}
	}
	if cfg.SmoothAuto {
		rep.SmoothRule = fmt.Sprintf("auto: risk estimate over %v", AutoSmooths)
	} else {
		s := cfg.Smooth
		rep.Smooth = &s
	}
	return rep
}

// finishReport sorts each band's tiles by (row, column) and records the
// band's largest iteration count.
func finishReport(rep *Report) {
	for i := range rep.Bands {
		b := &rep.Bands[i]
		sort.Slice(b.Tiles, func(x, y int) bool {
			if b.Tiles[x].Row != b.Tiles[y].Row {
				return b.Tiles[x].Row < b.Tiles[y].Row
			}
			return b.Tiles[x].Col < b.Tiles[y].Col
		})
		for _, t := range b.Tiles {
			b.MaxIterations = max(b.MaxIterations, t.Iterations)
		}
	}
}

// ValidFunc tells a valid sample from nodata, saturated and non-finite ones.
type ValidFunc func(v float32) bool

// NewValid is the ValidFunc of a band (raster.Valid's rule).
func NewValid(nodata float64, hasND bool, sat float64, hasSat bool) ValidFunc {
	return func(v float32) bool { return raster.Valid(v, nodata, hasND, sat, hasSat) }
}

// AutoBackground returns the BackgroundPercentile of each band's valid
// pixels, floored at 0, from every k-th row (level.Background).
func AutoBackground(src raster.Reader, bands []int, valid []ValidFunc) ([]float64, error) {
	return level.Background(src, bands, func(i int, v float32) bool { return valid[i](v) }, BackgroundPercentile)
}

type runner struct {
	// need, when set, makes the run a pass: only the tiles it names are
	// read and solved, and nothing is blended or written (but with sink,
	// a shard: their weighted outputs go to sink).
	need func(col, row int) bool
	sink *TileSink

	cfg    Config
	plan   Plan
	src    raster.Reader
	dst    raster.Writer
	bands  []int
	valid  []ValidFunc
	rep    *Report
	solver Solver

	// withSE: the solver reports standard errors; seSum/seFlux hold the
	// report's per-band sums (uncertainty.go). dataSE: they are the grid
	// method's noise error map (noisemap.go), propagated from noise, the
	// bands' noise models. noisePart: the particle method's error map is
	// the total of its Monte Carlo error and the data-noise part
	// (ParticleEMS.Solve), blended separately (uncertainty.go).
	withSE, dataSE, noisePart bool
	seSum, seFlux             []float64
	noiseSum, totalSum        []float64
	noise                     []noise.Model
	seParts                   func(band, y0 int, mc, data, total []float32) // Config.seParts
}

// rasterJob is one tile of the raster route and its weighted output window.
type rasterJob struct {
	key   TileKey
	strip *rowio.Strip // the rows its tile row's input windows touch
	last  bool         // the last tile of its tile row that the run produces
	out   []float32
	seOut []float32 // w^2 se^2 when the solver reports standard errors
	nse   []float32 // w se of the data-noise part (noisePart)
	ox    Span
	oy    Span
	res   Result
}

// scan is one run of the raster route over the scene (runner.run): it reads
// strips of source rows, feeds their tiles through runOrdered and blends
// and writes the finished rows. Its memory does not grow with the scene's
// height: two strips (one read ahead while the other is solved), the
// blender's strips, one set of output rows being written, and a ring of job
// slots sized by the workers.
type scan struct {
	*runner
	ahead   *rowio.Ahead  // source strips, read on their own goroutine
	jobs    []rasterJob   // a ring of job slots, as many as jobs in flight
	seq     int           // jobs produced
	blend   *Blender      // weighted outputs
	blendSE *Blender      // weighted standard errors (withSE)
	blendN  *Blender      // weighted data-noise parts (noisePart)
	out     *rowio.Writer // finished rows, written on their own goroutine
	row     int           // producer position: tile row, band, column
	band    int
	col     int
	cur     *rowio.Strip
}

func (r *runner) run(ctx context.Context) error {
	p := r.plan
	nb := len(r.bands)
	nw := min(r.cfg.Workers, nb*len(p.Cols))
	// In flight: a tile per worker, as many waiting, and two for the
	// consumer; RunOrdered keeps job seq's slot (seq mod len) busy until
	// job seq is finished.
	sc := &scan{runner: r, jobs: make([]rasterJob, 2*nw+2)}
	var spans []rowio.Span
	maxRows := 0
	for i := range p.Rows {
		in := sourceRange(p.InSpan(p.Rows, i), p.H)
		maxRows = max(maxRows, in.Len())
		if sc.rowNeeded(i) {
			spans = append(spans, rowio.Span{Start: in.Start, End: in.End})
		}
	}
	sc.ahead = rowio.NewAhead(ctx, r.src, r.bands, spans, 2, p.W*maxRows)
	defer sc.ahead.Close()
	if r.need == nil {
		sc.blend = NewBlender(p, nb, false)
		if r.withSE {
			sc.blendSE = NewBlender(p, nb, false)
			r.seSum, r.seFlux = make([]float64, nb), make([]float64, nb)
		}
		if r.noisePart {
			sc.blendN = NewBlender(p, nb, false)
			r.noiseSum, r.totalSum = make([]float64, nb), make([]float64, nb)
		}
		sc.out = rowio.NewWriter(r.dst, r.cfg.Uncertainty, nb, p.W*sc.blend.StripRows(), r.withSE)
	}
	err := RunOrdered(ctx, nw, len(sc.jobs), sc.produce, sc.solve, sc.finish)
	if sc.out != nil {
		if werr := sc.out.Close(); err == nil {
			err = werr
		}
	}
	return err
}

// rowNeeded: a pass (need set) reads and computes only the tile rows holding
// a needed tile.
func (sc *scan) rowNeeded(row int) bool {
	if sc.need == nil {
		return true
	}
	for col := range sc.plan.Cols {
		if sc.need(col, row) {
			return true
		}
	}
	return false
}

// produce returns the next tile in (tile row, band, column) order, reading
// the tile row's strip when it starts a row.
func (sc *scan) produce(ctx context.Context) (*rasterJob, bool, error) {
	p := sc.plan
	nb, nc := len(sc.bands), len(p.Cols)
	for ; sc.row < len(p.Rows); sc.row, sc.band, sc.col, sc.cur = sc.row+1, 0, 0, nil {
		if sc.cur == nil {
			if !sc.rowNeeded(sc.row) {
				continue
			}
			var err error
			if sc.cur, err = sc.ahead.Next(ctx); err != nil {
				return nil, false, err
			}
		}
		for ; sc.band < nb; sc.band, sc.col = sc.band+1, 0 {
			for ; sc.col < nc; sc.col++ {
				if sc.need != nil && !sc.need(sc.col, sc.row) {
					continue
				}
				j := &sc.jobs[sc.seq%len(sc.jobs)]
				sc.seq++
				j.key, j.strip, j.last = TileKey{Band: sc.band, Col: sc.col, Row: sc.row}, sc.cur, sc.lastOfRow(sc.band, sc.col)
				sc.col++
				return j, true, nil
			}
		}
	}
	return nil, false, nil
}

// lastOfRow reports whether (band, col) is the last tile of the current
// tile row that the run produces.
func (sc *scan) lastOfRow(band, col int) bool {
	nb, nc := len(sc.bands), len(sc.plan.Cols)
	for b := band; b < nb; b++ {
		for c := 0; c < nc; c++ {
			if (b > band || c > col) && (sc.need == nil || sc.need(c, sc.row)) {
				return false
			}
		}
	}
	return true
}

// solve restores one tile and weights its output window (a pass keeps only
// the solver's side effects).
func (sc *scan) solve(ctx context.Context, wk *TileWork, j *rasterJob) error {
	p := sc.plan
	k := j.key
	bg := float32(sc.rep.Bands[k.Band].Background)
	src := Window{Pix: j.strip.Rows[k.Band], Y: j.strip.Y, W: p.W}
	var nm *noise.Model
	if sc.dataSE || sc.noisePart {
		nm = &sc.noise[k.Band]
	}
	s, err := p.SolveTile(ctx, sc.solver, wk, k, src, sc.valid[k.Band], bg, sc.recorded(k), sc.withSE, nm)
	if err != nil {
		return &TileError{Band: k.Band, Col: k.Col, Row: k.Row, Err: err}
	}
	j.res = s.Result
	if sc.need != nil && sc.sink == nil {
		return nil
	}
	j.out, j.ox, j.oy = p.Weigh(j.out, wk, k, s.F, bg)
	if sc.withSE {
		j.seOut = weighSE(j.seOut, wk, s.HasSE, j.ox.Len(), j.oy.Len(), s.SE, j.ox, j.oy, sc.dataSE)
	}
	if sc.noisePart {
		j.nse = weighSE(j.nse, wk, s.HasNoiseSE, j.ox.Len(), j.oy.Len(), s.NoiseSE, j.ox, j.oy, true)
	}
	return nil
}

// finish blends a tile in production order; the last tile of a tile row
// writes the finished rows and frees the row's strip.
func (sc *scan) finish(j *rasterJob, failed bool) error {
	var err error
	if !failed && sc.cfg.Watch != nil {
		sc.cfg.Watch.Done(1)
	}
	if !failed && sc.sink != nil {
		err = sc.put(j)
	}
	if !failed && sc.need == nil {
		sc.blend.Add(j.key.Band, j.ox, j.oy, j.out)
		if sc.withSE {
			sc.blendSE.Add(j.key.Band, j.ox, j.oy, j.seOut)
		}
		if sc.noisePart {
			sc.blendN.Add(j.key.Band, j.ox, j.oy, j.nse)
		}
		br := &sc.rep.Bands[j.key.Band]
		br.Tiles = append(br.Tiles, TileReport{Col: j.key.Col, Row: j.key.Row, Iterations: j.res.Iterations, Change: j.res.Change, Flat: j.res.Flat, Changes: j.res.Changes})
		if j.last {
			err = sc.writeRow(j.key.Row, j.strip)
		}
	}
	if j.last {
		sc.ahead.Release(j.strip)
	}
	return err
}

// writeRow hands the rows finished by tile row `row` to the writer: NaN
// where the input is invalid, with the flux bookkeeping over valid pixels.
func (sc *scan) writeRow(row int, st *rowio.Strip) error {
	W := sc.plan.W
	end := sc.blend.RowEnd(row)
	n := end - sc.blend.Y()
	bufs, err := sc.out.Buffer()
	if err != nil {
		return err
	}
	for b := range bufs {
		acc, out := sc.blend.Rows(b, n), bufs[b][:n*W]
		br := &sc.rep.Bands[b]
		for y := 0; y < n; y++ {
			sy := sc.blend.Y() + y - st.Y
			srow := st.Rows[b][sy*W : (sy+1)*W]
			arow, orow := acc[y*W:(y+1)*W], out[y*W:(y+1)*W]
			for x, v := range srow {
				if sc.valid[b](v) {
					br.FluxBefore += float64(v)
					br.FluxAfter += float64(arow[x])
					br.ValidPixels++
					orow[x] = arow[x]
				} else {
					orow[x] = nan
				}
			}
		}
	}
	var se [][]float32
	if sc.withSE {
		se = sc.outputSE(n, st)
		sc.blendSE.Shift(n)
		if sc.noisePart {
			sc.blendN.Shift(n)
		}
	}
	sc.out.Write(rowio.Job{Y0: sc.blend.Y(), Y1: end, Rows: bufs, SE: se})
	sc.blend.Shift(n)
	return nil
}

// recorded reports whether tile k keeps its change history.
func (r *runner) recorded(k TileKey) bool {
	if k.Band != 0 || (r.need != nil && r.sink == nil) {
		return false
	}
	pick := func(i, n int) bool {
		if n <= 2 {
			return true
		}
		return i == n/4 || i == (3*n)/4
	}
	return pick(k.Col, len(r.plan.Cols)) && pick(k.Row, len(r.plan.Rows))
}
