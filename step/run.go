package step

import (
	"context"
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"sync"
	"time"

	"limpid/psf"
	"limpid/raster"
)

// Version is limpid's version, recorded in outputs and reports.
const Version = "0.2.0"

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
	Method  string // "grid" or "particle"
	PSF     *psf.Kernel
	PSFSpec string
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
	// Overlap < 0 means DefaultOverlap.
	Overlap int
	// Workers <= 0 means runtime.NumCPU().
	Workers      int
	Seed         uint64
	Saturated    float64
	HasSaturated bool
	// SmoothAuto chooses the bandwidth per band among AutoSmooths by the
	// risk estimate (then Smooth is only the fallback).
	SmoothAuto bool
	// Stop is StopChange (default), StopAuto or StopDiscrepancy;
	// Iterations is the cap for all three.
	Stop string
	// Choose is ChooseGlobal (default) or ChoosePerTile.
	Choose string
	// Noise, when set, replaces the estimated per-band noise model.
	Noise *NoiseModel
	// Progress, when set, is called after each strip with tiles done/total.
	Progress func(done, total int)
	// Stage, when set, is called when an extra pass over the scene starts
	// (noise estimate, automatic choice) with a short description.
	Stage func(what string)
	// Particle holds the particle method's parameters (particle_config.go).
	Particle ParticleConfig
	// Uncertainty, when set (particle method only), receives the blended
	// per-pixel Monte Carlo standard error, same grid and bands as dst
	// (NaN on invalid pixels). Restore writes it; the caller commits it.
	Uncertainty raster.Writer
}

// DefaultOverlap is the halo rule: 4 (r_H + r_S) rounded up to a multiple of
// 8, at least 16, at most the tile size. Exact tile independence would need
// K (2 r_H + r_S) after K iterations (GUIDE section 2); the influence of the
// tile border decays fast, and the tiled-vs-whole test measures that this
// halo keeps the difference below 0.5 % of the data range.
func DefaultOverlap(k *psf.Kernel, smooth float64, tile int) int {
	rs := (len(SmoothingKernel(smooth)) - 1) / 2
	if rs < 0 {
		rs = 0
	}
	r := max(k.Rx(), k.Ry())
	o := 4 * (r + rs)
	o = (o + 7) / 8 * 8
	return min(max(o, 16), tile)
}

// TileReport records one tile's solve.
type TileReport struct {
	Col        int     `json:"col"`
	Row        int     `json:"row"`
	Iterations int     `json:"iterations"`
	Change     float64 `json:"final_relative_change"`
	Flat       bool    `json:"flat,omitempty"`
	// Changes is the relative change per iteration, kept for up to
	// RecordedTiles tiles of the first band (the convergence plot).
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
	// Noise is the noise model used (estimated or given), when the stop or
	// smoothing rule needed one.
	Noise *NoiseModel `json:"noise,omitempty"`
	// Choice records the automatic smoothing/stop choice.
	Choice *Choice      `json:"choice,omitempty"`
	Tiles  []TileReport `json:"tiles"`
}

// Report is what a restoration did.
type Report struct {
	Version     string       `json:"limpid_version"`
	Method      string       `json:"method"`
	PSF         string       `json:"psf"`
	PSFSize     [2]int       `json:"psf_size"`
	ConvPath    string       `json:"convolution"`
	Smooth      float64      `json:"smooth"`
	SmoothRule  string       `json:"smooth_rule"`
	Stop        string       `json:"stop"`
	Choose      string       `json:"choose,omitempty"`
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
	Particle *ParticleReport `json:"particle,omitempty"`
}

// TileError locates a failure (like encoding/csv's ParseError).
type TileError struct {
	Band, Col, Row int
	Err            error
}

func (e *TileError) Error() string {
	return fmt.Sprintf("band %d tile (%d,%d): %v", e.Band+1, e.Col, e.Row, e.Err)
}

func (e *TileError) Unwrap() error { return e.Err }

// ErrConfig is wrapped by configuration errors (exit code 2).
var ErrConfig = errors.New("bad parameter")

// Resolve fills defaults and validates cfg against the scene.
func (cfg *Config) Resolve() error {
	if cfg.PSF == nil {
		return fmt.Errorf("%w: no PSF", ErrConfig)
	}
	if cfg.Method == "" {
		cfg.Method = "grid"
	}
	if cfg.Method != "grid" && cfg.Method != "particle" {
		return fmt.Errorf("%w: --method %q: use grid or particle", ErrConfig, cfg.Method)
	}
	if cfg.Iterations < 1 || cfg.Iterations > 100000 {
		return fmt.Errorf("%w: --iterations %d must be between 1 and 100000", ErrConfig, cfg.Iterations)
	}
	if math.IsNaN(cfg.Smooth) || cfg.Smooth < 0 || cfg.Smooth > 10 {
		return fmt.Errorf("%w: --smooth %g must be between 0 and 10 pixels", ErrConfig, cfg.Smooth)
	}
	switch cfg.Stop {
	case "":
		cfg.Stop = StopChange
	case StopChange, StopAuto, StopDiscrepancy:
	default:
		return fmt.Errorf("%w: --stop %q: use change, auto or discrepancy", ErrConfig, cfg.Stop)
	}
	switch cfg.Choose {
	case "":
		cfg.Choose = ChooseGlobal
	case ChooseGlobal, ChoosePerTile:
	default:
		return fmt.Errorf("%w: --choose %q: use global or per-tile", ErrConfig, cfg.Choose)
	}
	if cfg.SmoothAuto && cfg.Stop == StopDiscrepancy {
		return fmt.Errorf("%w: --stop discrepancy needs a fixed --smooth (the risk estimate chooses both with --stop auto)", ErrConfig)
	}
	if n := cfg.Noise; n != nil && (!(n.A >= 0) || !(n.B >= 0) || math.IsInf(n.A, 0) || math.IsInf(n.B, 0) || n.A+n.B == 0) {
		return fmt.Errorf("%w: --noise a=%g,b=%g: both must be finite, >= 0 and not both 0", ErrConfig, n.A, n.B)
	}
	if math.IsNaN(cfg.Tolerance) || cfg.Tolerance < 0 {
		return fmt.Errorf("%w: --tolerance %g must be >= 0", ErrConfig, cfg.Tolerance)
	}
	if math.IsNaN(cfg.Background) || math.IsInf(cfg.Background, 0) {
		return fmt.Errorf("%w: --background must be a finite number or auto", ErrConfig)
	}
	if cfg.Tile == 0 {
		cfg.Tile = DefaultTile
	}
	if cfg.Tile < 16 || cfg.Tile > 16384 {
		return fmt.Errorf("%w: --tile %d must be between 16 and 16384", ErrConfig, cfg.Tile)
	}
	if cfg.PSF.W > cfg.Tile || cfg.PSF.H > cfg.Tile {
		return fmt.Errorf("%w: the PSF (%dx%d) is larger than a tile (%d): raise --tile", ErrConfig, cfg.PSF.W, cfg.PSF.H, cfg.Tile)
	}
	if cfg.Overlap < 0 {
		eps := cfg.Smooth
		if cfg.SmoothAuto {
			eps = AutoSmooths[len(AutoSmooths)-1]
		}
		cfg.Overlap = DefaultOverlap(cfg.PSF, eps, cfg.Tile)
	}
	if cfg.Overlap > cfg.Tile {
		return fmt.Errorf("%w: --overlap %d is larger than the tile size %d", ErrConfig, cfg.Overlap, cfg.Tile)
	}
	if cfg.Workers <= 0 {
		cfg.Workers = runtime.NumCPU()
	}
	if cfg.Workers > 1024 {
		return fmt.Errorf("%w: --workers %d is more than 1024", ErrConfig, cfg.Workers)
	}
	if cfg.Method == "particle" {
		if cfg.Stop != StopChange {
			return fmt.Errorf("%w: --stop %s: the particle method runs a fixed number of iterations (--iterations, --burn-in); --stop auto and discrepancy apply to the grid method", ErrConfig, cfg.Stop)
		}
		return cfg.resolveParticle()
	}
	if cfg.Uncertainty != nil {
		return fmt.Errorf("%w: --uncertainty: the grid method has no Monte Carlo error (use --method particle)", ErrConfig)
	}
	return nil
}

// NewSolver builds the solver cfg names.
func (cfg *Config) NewSolver() Solver {
	if cfg.Method == "particle" {
		return cfg.newParticleSolver()
	}
	g := &GridEMS{H: NewConv(cfg.PSF), Iterations: cfg.Iterations, Tolerance: cfg.Tolerance}
	if k := SmoothingKernel(cfg.Smooth); k != nil {
		g.S = NewSeparableConv(k, k)
	}
	if cfg.Stop == StopDiscrepancy && cfg.Noise != nil {
		// Stateless per tile with a given noise model (tile streams);
		// Restore builds the same solver per band in regularise.
		g.Tolerance, g.Noise, g.Tau = 0, cfg.Noise, DiscrepancyTau
	} else if cfg.Stop != StopChange {
		g.Tolerance = 0
	}
	return g
}

// Restore reads bands (0-based, output order) of src tile by tile, restores
// them and writes the blended result to dst in strips. Memory is bounded by
// about Width x (Tile + 2 Overlap) x bands floats; output is identical for
// any number of workers. dst receives NaN for invalid pixels.
func Restore(ctx context.Context, src raster.Reader, bands []int, dst raster.Writer, cfg Config) (*Report, error) {
	start := time.Now()
	if err := cfg.Resolve(); err != nil {
		return nil, err
	}
	meta := src.Meta()
	plan, err := NewPlan(meta.Width, meta.Height, cfg.Tile, cfg.Overlap)
	if err != nil {
		return nil, fmt.Errorf("%w: %v", ErrConfig, err)
	}
	solver := cfg.NewSolver()
	rep := &Report{Version: Version, Method: solver.Name(), PSF: cfg.PSFSpec, PSFSize: [2]int{cfg.PSF.W, cfg.PSF.H},
		ConvPath: NewConv(cfg.PSF).Kind(), Smooth: cfg.Smooth, SmoothRule: "given", Stop: cfg.Stop, Iterations: cfg.Iterations, Tolerance: cfg.Tolerance,
		Tile: cfg.Tile, Overlap: plan.Overlap, Blend: plan.Blend, Workers: cfg.Workers, Seed: cfg.Seed,
		Width: meta.Width, Height: meta.Height}
	if cfg.HasSaturated {
		s := cfg.Saturated
		rep.Saturated = &s
	}
	if cfg.Method == "particle" {
		pc := cfg.Particle
		rep.Particle = &ParticleReport{PerPixel: pc.PerPixel, Potential: pc.Potential, Resampling: pc.Resampling,
			ESSThreshold: pc.ESSThreshold, BurnIn: pc.BurnIn, Start: pc.Start, Batches: pc.Batches, SEBlend: SEBlendRule,
			Replicates: pc.Replicates, SEMethod: pc.seMethod()}
	}
	nb := len(bands)
	validity := make([]validFn, nb)
	for i, b := range bands {
		if b < 0 || b >= len(meta.Bands) {
			return nil, fmt.Errorf("%w: band %d does not exist (input has %d)", ErrConfig, b+1, len(meta.Bands))
		}
		bi := meta.Bands[b]
		validity[i] = makeValid(bi.NoData, bi.HasNoData, cfg.Saturated, cfg.HasSaturated)
		rep.Bands = append(rep.Bands, BandReport{Band: i + 1, SourceBand: b + 1, Background: cfg.Background, BackgroundRule: "given"})
	}
	if cfg.BackgroundAuto {
		bg, err := autoBackground(src, bands, validity)
		if err != nil {
			return nil, err
		}
		for i := range rep.Bands {
			rep.Bands[i].Background = bg[i]
			rep.Bands[i].BackgroundRule = fmt.Sprintf("auto: %g percentile of valid pixels", BackgroundPercentile)
		}
	}
	r := &runner{cfg: cfg, plan: plan, src: src, dst: dst, bands: bands, valid: validity, rep: rep, solver: solver,
		withSE: cfg.Method == "particle"}
	if cfg.SmoothAuto {
		rep.SmoothRule = fmt.Sprintf("auto: risk estimate over %v", AutoSmooths)
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
	if err := r.run(ctx); err != nil {
		return nil, err
	}
	if r.withSE {
		r.finishSE()
	}
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
	rep.WallSeconds = time.Since(start).Seconds()
	return rep, nil
}

type validFn func(v float32) bool

func makeValid(nodata float64, hasND bool, sat float64, hasSat bool) validFn {
	return func(v float32) bool { return raster.Valid(v, nodata, hasND, sat, hasSat) }
}

// autoBackground samples every k-th row (at most ~2000 rows) and returns the
// BackgroundPercentile of each band's valid pixels, floored at 0.
func autoBackground(src raster.Reader, bands []int, valid []validFn) ([]float64, error) {
	m := src.Meta()
	step := max(1, m.Height/2000)
	row := make([][]float32, len(bands))
	for i := range row {
		row[i] = make([]float32, m.Width)
	}
	samples := make([][]float32, len(bands))
	for y := 0; y < m.Height; y += step {
		if err := src.ReadRows(y, y+1, bands, row); err != nil {
			return nil, err
		}
		for i := range bands {
			for _, v := range row[i] {
				if valid[i](v) {
					samples[i] = append(samples[i], v)
				}
			}
		}
	}
	out := make([]float64, len(bands))
	for i, s := range samples {
		if len(s) == 0 {
			continue
		}
		sort.Slice(s, func(a, b int) bool { return s[a] < s[b] })
		k := int(BackgroundPercentile / 100 * float64(len(s)-1))
		out[i] = math.Max(0, float64(s[k]))
	}
	return out, nil
}

type runner struct {
	// need, when set, makes the run a pass: only the tiles it names are
	// read and solved, and nothing is blended or written.
	need func(col, row int) bool

	cfg    Config
	plan   Plan
	src    raster.Reader
	dst    raster.Writer
	bands  []int
	valid  []validFn
	rep    *Report
	solver Solver

	// Two strips of source rows per band: workers read one while the next
	// tile row is read into the other.
	strips  [2][][]float32
	stripYs [2]int
	acc     [][]float32 // per band, output rows [accY, accY+accRows)
	accY    int
	slots   []*slot // per (band, col)

	// withSE: the solver reports standard errors; accSE holds the blended
	// sum of w^2 se^2 like acc, seSum/seFlux the report's per-band sums.
	withSE        bool
	accSE         [][]float32
	seSum, seFlux []float64
	freeSE        chan [][]float32

	// Finished rows go to a writer goroutine so that compression overlaps
	// the next strip's computation.
	writes chan writeJob
	free   chan [][]float32
	werrMu sync.Mutex
	werr   error
}

func (r *runner) writeErr() error {
	r.werrMu.Lock()
	defer r.werrMu.Unlock()
	return r.werr
}

type writeJob struct {
	y0, y1 int
	bufs   [][]float32
	se     [][]float32 // nil without standard errors
}

// slot holds one tile's blended output window.
type slot struct {
	key    TileKey
	strip  int
	out    []float32
	seOut  []float32 // w^2 se^2 when the solver reports SE
	ox, oy Span
	res    Result
	err    error
}

type worker struct {
	ws      Workspace
	d, mask []float32
	f       []float32
	se      []float32
	wx, wy  []float32
}

func (r *runner) run(ctx context.Context) error {
	p := r.plan
	W := p.W
	nb := len(r.bands)
	maxRows := 0
	for i := range p.Rows {
		s := sourceRange(p.InSpan(p.Rows, i), p.H)
		maxRows = max(maxRows, s.Len())
	}
	for k := range r.strips {
		r.strips[k] = make([][]float32, nb)
		for i := range r.strips[k] {
			r.strips[k][i] = make([]float32, W*maxRows)
		}
	}
	maxOut := 0
	for i := range p.Rows {
		maxOut = max(maxOut, p.OutSpan(p.Rows, i).Len())
	}
	r.acc = make([][]float32, nb)
	for i := range r.acc {
		r.acc[i] = make([]float32, W*maxOut)
	}
	r.writes = make(chan writeJob)
	r.free = make(chan [][]float32, 2)
	for k := 0; k < 2; k++ {
		bufs := make([][]float32, nb)
		for i := range bufs {
			bufs[i] = make([]float32, W*maxOut)
		}
		r.free <- bufs
	}
	if r.withSE {
		r.accSE = make([][]float32, nb)
		for i := range r.accSE {
			r.accSE[i] = make([]float32, W*maxOut)
		}
		r.seSum, r.seFlux = make([]float64, nb), make([]float64, nb)
		r.freeSE = make(chan [][]float32, 2)
		for k := 0; k < 2; k++ {
			bufs := make([][]float32, nb)
			for i := range bufs {
				bufs[i] = make([]float32, W*maxOut)
			}
			r.freeSE <- bufs
		}
	}
	writerDone := make(chan struct{})
	go func() {
		defer close(writerDone)
		for j := range r.writes {
			if r.writeErr() == nil {
				err := r.dst.WriteRows(j.y0, j.y1, j.bufs)
				if err == nil && j.se != nil && r.cfg.Uncertainty != nil {
					err = r.cfg.Uncertainty.WriteRows(j.y0, j.y1, j.se)
				}
				r.werrMu.Lock()
				r.werr = err
				r.werrMu.Unlock()
			}
			r.free <- j.bufs
			if j.se != nil {
				r.freeSE <- j.se
			}
		}
	}()
	r.slots = make([]*slot, nb*len(p.Cols))
	for i := range r.slots {
		r.slots[i] = &slot{}
	}
	nw := min(r.cfg.Workers, len(r.slots))
	jobs := make(chan *slot)
	var wg sync.WaitGroup
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var rowWG sync.WaitGroup
	for k := 0; k < nw; k++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			wk := &worker{}
			for s := range jobs {
				s.err = r.solveTile(ctx, wk, s)
				if s.err != nil {
					cancel()
				}
				rowWG.Done()
			}
		}()
	}
	defer func() {
		close(jobs)
		wg.Wait()
	}()
	total := nb * p.NTiles()
	done := 0
	// rowNeeded: a pass (r.need set) reads and computes only the tile rows
	// holding a needed tile, and writes nothing.
	rowNeeded := func(row int) bool {
		if r.need == nil {
			return true
		}
		for col := range p.Cols {
			if r.need(col, row) {
				return true
			}
		}
		return false
	}
	readStrip := func(row, k int) error {
		if !rowNeeded(row) {
			return nil
		}
		in := sourceRange(p.InSpan(p.Rows, row), p.H)
		r.stripYs[k] = in.Start
		return r.src.ReadRows(in.Start, in.End, r.bands, r.strips[k])
	}
	if err := readStrip(0, 0); err != nil {
		close(r.writes)
		<-writerDone
		return err
	}
	err := func() error {
		for row := range p.Rows {
			if err := ctx.Err(); err != nil {
				return err
			}
			cur := row % 2
			for b := 0; b < nb; b++ {
				for col := range p.Cols {
					s := r.slots[b*len(p.Cols)+col]
					s.key = TileKey{Band: b, Col: col, Row: row}
					s.strip = cur
					s.err = nil
					if r.need != nil && !r.need(col, row) {
						continue
					}
					rowWG.Add(1)
					jobs <- s
				}
			}
			var rerr error
			if row+1 < len(p.Rows) {
				rerr = readStrip(row+1, 1-cur)
			}
			rowWG.Wait()
			if err := firstError(r.slots); err != nil {
				return err
			}
			if rerr != nil {
				return rerr
			}
			if r.need != nil {
				continue
			}
			if err := r.blendAndWrite(row, cur); err != nil {
				return err
			}
			done += nb * len(p.Cols)
			if r.cfg.Progress != nil {
				r.cfg.Progress(done, total)
			}
		}
		return nil
	}()
	close(r.writes)
	<-writerDone
	if err != nil {
		return err
	}
	return r.writeErr()
}

// firstError returns the first tile failure in slot order, preferring a real
// failure over the cancellations it caused.
func firstError(slots []*slot) error {
	var canceled error
	for _, s := range slots {
		if s.err == nil {
			continue
		}
		te := &TileError{Band: s.key.Band, Col: s.key.Col, Row: s.key.Row, Err: s.err}
		if !errors.Is(s.err, context.Canceled) && !errors.Is(s.err, context.DeadlineExceeded) {
			return te
		}
		if canceled == nil {
			canceled = s.err
		}
	}
	return canceled
}

// solveTile copies the tile (with mirrored halo) out of the strip, restores
// it and stores the weighted output window in the slot.
func (r *runner) solveTile(ctx context.Context, wk *worker, s *slot) error {
	p := r.plan
	k := s.key
	ix, iy := p.InSpan(p.Cols, k.Col), p.InSpan(p.Rows, k.Row)
	tw, th := ix.Len(), iy.Len()
	n := tw * th
	wk.d = grow(wk.d, n)
	wk.mask = grow(wk.mask, n)
	wk.f = grow(wk.f, n)
	strip := r.strips[s.strip][k.Band]
	stripY := r.stripYs[s.strip]
	valid := r.valid[k.Band]
	for y := 0; y < th; y++ {
		sy := raster.Mirror(iy.Start+y, p.H) - stripY
		srow := strip[sy*p.W : (sy+1)*p.W]
		drow := wk.d[y*tw : (y+1)*tw]
		mrow := wk.mask[y*tw : (y+1)*tw]
		for x := 0; x < tw; x++ {
			v := srow[raster.Mirror(ix.Start+x, p.W)]
			drow[x] = v
			if valid(v) {
				mrow[x] = 1
			} else {
				mrow[x] = 0
			}
		}
	}
	bg := float32(r.rep.Bands[k.Band].Background)
	prob := &Problem{D: wk.d, Mask: wk.mask, W: tw, H: th, Background: bg, Key: k, Record: r.recorded(k)}
	if r.withSE {
		wk.se = grow(wk.se, n)
		prob.SE = wk.se
	}
	res, err := r.solver.Solve(ctx, &wk.ws, prob, wk.f)
	if err != nil {
		return err
	}
	s.res = res
	s.ox, s.oy = p.OutSpan(p.Cols, k.Col), p.OutSpan(p.Rows, k.Row)
	ow, oh := s.ox.Len(), s.oy.Len()
	s.out = grow(s.out, ow*oh)
	wk.wx = grow(wk.wx, ow)
	wk.wy = grow(wk.wy, oh)
	p.Weights(wk.wx, p.Cols, k.Col)
	p.Weights(wk.wy, p.Rows, k.Row)
	x0, y0 := s.ox.Start-ix.Start, s.oy.Start-iy.Start
	for y := 0; y < oh; y++ {
		frow := wk.f[(y0+y)*tw+x0:]
		orow := s.out[y*ow : (y+1)*ow]
		wy := wk.wy[y]
		for x := range orow {
			orow[x] = wy * wk.wx[x] * (frow[x] + bg)
		}
	}
	if r.withSE {
		r.weightSE(wk, s, res, tw, x0, y0)
	}
	return nil
}

// blendAndWrite adds the strip's tiles into the accumulator in a fixed order
// and writes the rows no later strip touches.
func (r *runner) blendAndWrite(row, cur int) error {
	p := r.plan
	W := p.W
	nb := len(r.bands)
	for _, s := range r.slots {
		acc := r.acc[s.key.Band]
		ow := s.ox.Len()
		for y := 0; y < s.oy.Len(); y++ {
			arow := acc[(s.oy.Start+y-r.accY)*W+s.ox.Start:]
			orow := s.out[y*ow : (y+1)*ow]
			for x, v := range orow {
				arow[x] += v
			}
		}
		if r.withSE {
			r.blendSE(s)
		}
		br := &r.rep.Bands[s.key.Band]
		br.Tiles = append(br.Tiles, TileReport{Col: s.key.Col, Row: s.key.Row, Iterations: s.res.Iterations, Change: s.res.Change, Flat: s.res.Flat, Changes: s.res.Changes})
	}
	last := row == len(p.Rows)-1
	end := p.Rows[row].End
	if !last {
		end -= p.Blend
	}
	n := end - r.accY
	bufs := <-r.free
	if err := r.writeErr(); err != nil {
		r.free <- bufs
		return err
	}
	// Invalid input pixels come out as NaN; flux bookkeeping over valid ones.
	for b := 0; b < nb; b++ {
		acc := r.acc[b][:n*W]
		out := bufs[b][:n*W]
		br := &r.rep.Bands[b]
		for y := 0; y < n; y++ {
			sy := r.accY + y - r.stripYs[cur]
			srow := r.strips[cur][b][sy*W : (sy+1)*W]
			arow := acc[y*W : (y+1)*W]
			orow := out[y*W : (y+1)*W]
			for x, v := range srow {
				if r.valid[b](v) {
					br.FluxBefore += float64(v)
					br.FluxAfter += float64(arow[x])
					br.ValidPixels++
					orow[x] = arow[x]
				} else {
					orow[x] = float32(math.NaN())
				}
			}
		}
		bufs[b] = bufs[b][:cap(bufs[b])]
	}
	var se [][]float32
	if r.withSE {
		se = r.outputSE(n, cur)
	}
	r.writes <- writeJob{y0: r.accY, y1: end, bufs: bufs, se: se}
	// Carry the rows still being blended to the top of the accumulator.
	for b := 0; b < nb; b++ {
		acc := r.acc[b]
		rest := len(acc)/W - n
		copy(acc[:rest*W], acc[n*W:])
		for i := rest * W; i < len(acc); i++ {
			acc[i] = 0
		}
		if r.withSE {
			a := r.accSE[b]
			copy(a[:rest*W], a[n*W:])
			clear(a[rest*W:])
		}
	}
	r.accY = end
	return nil
}

// RecordedTiles is how many tiles of the first band keep their per-iteration
// change history in the report: the tiles nearest the quarter points of the
// tile plan (all tiles of a plan with at most 4).
const RecordedTiles = 4

// recorded reports whether tile k keeps its change history.
func (r *runner) recorded(k TileKey) bool {
	if k.Band != 0 || r.need != nil {
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
