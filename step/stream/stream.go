package stream

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"

	"limpid/arrowio"
	"limpid/psf"
	"limpid/raster"
	"limpid/step"
	"limpid/step/plan"
	"limpid/step/settings"
)

// TileSource yields tiles in stream order (arrowio.Reader, SceneTiler).
type TileSource interface {
	Next(t *arrowio.Tile) (bool, error)
}

// TileSink receives tiles in stream order (arrowio.Writer, Assembler).
type TileSink interface {
	Write(t *arrowio.Tile) error
}

// ObservedHeader describes the stream limpid tiles pack cuts from a scene:
// bands (0-based, stream order) of meta, tile core size and halo.
func ObservedHeader(meta raster.Meta, bands []int, sceneID string, tile, overlap int) (*arrowio.Header, error) {
	if _, err := step.NewPlan(meta.Width, meta.Height, tile, overlap); err != nil {
		return nil, fmt.Errorf("%w: %v", step.ErrConfig, err)
	}
	h := &arrowio.Header{Kind: arrowio.KindObserved, SceneID: sceneID, Width: meta.Width, Height: meta.Height,
		DataType: meta.DataType, Geo: meta.Geo, Metadata: meta.Metadata, Tile: tile, Overlap: overlap}
	for _, b := range bands {
		if b < 0 || b >= len(meta.Bands) {
			return nil, fmt.Errorf("%w: band %d does not exist (input has %d)", step.ErrConfig, b+1, len(meta.Bands))
		}
		bi := meta.Bands[b]
		h.Bands = append(h.Bands, arrowio.Band{SourceBand: b + 1, BandInfo: bi})
		if bi.HasNoData && !h.HasNoData {
			h.NoData, h.HasNoData = bi.NoData, true
		}
	}
	// Widest buffer: the longest core (a merged last tile) plus two halos.
	p, _ := step.NewPlan(meta.Width, meta.Height, tile, overlap)
	bw, bh := 0, 0
	for i := range p.Cols {
		bw = max(bw, clipSpan(p.InSpan(p.Cols, i), p.W).Len())
	}
	for i := range p.Rows {
		bh = max(bh, clipSpan(p.InSpan(p.Rows, i), p.H).Len())
	}
	if int64(bw)*int64(bh) > arrowio.MaxTilePixels {
		return nil, step.FieldErrorf("Tile", "tile %d with overlap %d makes %dx%d buffers, more than %d pixels per batch: lower {Tile}", tile, overlap, bw, bh, arrowio.MaxTilePixels)
	}
	return h, nil
}

func clipSpan(s step.Span, n int) step.Span {
	return step.Span{Start: max(0, s.Start), End: min(n, s.End)}
}

// streamParams are the restoration parameters a restored stream records
// (the same keys as the LIMPID_PARAMETERS metadata of a restored raster).
type streamParams struct {
	Smooth     float64     `json:"smooth"`
	SmoothRule string      `json:"smooth_rule"`
	Stop       step.Stop   `json:"stop"`
	Choose     step.Choose `json:"choose"`
	Iterations int         `json:"iterations"`
	Tolerance  float64     `json:"tolerance"`
	Tile       int         `json:"tile"`
	Overlap    int         `json:"overlap"`
	Blend      int         `json:"blend"`
	Seed       uint64      `json:"seed"`
	Saturated  *float64    `json:"saturated"`
	// Applied is what every band's pass ran with; PSFUsed the kernel.
	Applied *settings.Band `json:"applied,omitempty"`
	PSFUsed *psf.Record    `json:"psf_used,omitempty"`
}

// RestoredHeader is the header of the stream RestoreTiles makes from in with
// a resolved cfg and per-band backgrounds.
func RestoredHeader(in *arrowio.Header, cfg step.Config, backgrounds []float64) (*arrowio.Header, error) {
	out := *in
	out.Kind = arrowio.KindRestored
	out.Bands = append([]arrowio.Band(nil), in.Bands...)
	for i := range out.Bands {
		out.Bands[i].Background = backgrounds[i]
	}
	used := psf.Describe(cfg.PSFSpec, cfg.PSF)
	p := streamParams{Smooth: cfg.Smooth, SmoothRule: "given", Stop: cfg.RecordedStop(), Iterations: cfg.Iterations, Tolerance: cfg.Tolerance, Tile: in.Tile,
		Overlap: in.Overlap, Blend: in.Overlap / 2, Seed: cfg.Seed, Applied: cfg.Applied(), PSFUsed: &used}
	if cfg.HasSaturated {
		s := cfg.Saturated
		p.Saturated = &s
	}
	b, err := json.Marshal(p)
	if err != nil {
		return nil, fmt.Errorf("%w: %v", step.ErrConfig, err)
	}
	out.Restored = &arrowio.Restoration{SoftwareVersion: step.Version, Method: cfg.NewSolver().Name(), PSF: cfg.PSFSpec, Parameters: string(b)}
	return &out, nil
}

// ReportFromHeader rebuilds the step.Report fields a restored stream records
// (for the metadata of the raster Assembler writes). Tiles and
// MaxIterations are filled by the Assembler.
func ReportFromHeader(h *arrowio.Header) (*step.Report, error) {
	if h.Restored == nil {
		return nil, errors.New("not a restored stream")
	}
	if h.Plan != "" {
		return planReport(h)
	}
	var p streamParams
	if err := json.Unmarshal([]byte(h.Restored.Parameters), &p); err != nil {
		return nil, &arrowio.StreamError{Row: -1, Err: fmt.Errorf("metadata %s: %v", arrowio.KeyParameters, err)}
	}
	rep := &step.Report{Version: h.Restored.SoftwareVersion, Method: h.Restored.Method, PSF: h.Restored.PSF,
		Smooth: &p.Smooth, SmoothRule: p.SmoothRule, Stop: p.Stop, Choose: p.Choose, Iterations: p.Iterations, Tolerance: p.Tolerance, Tile: p.Tile, Overlap: p.Overlap,
		Blend: p.Blend, Seed: p.Seed, Saturated: p.Saturated, Width: h.Width, Height: h.Height}
	for i, b := range h.Bands {
		rep.Bands = append(rep.Bands, step.BandReport{Band: i + 1, SourceBand: b.SourceBand, Background: b.Background, BackgroundRule: "recorded in the stream"})
		if p.Applied != nil {
			a := *p.Applied
			rep.Bands[i].Applied = &a
		}
	}
	if p.PSFUsed != nil {
		rep.PSFUsed = *p.PSFUsed
	}
	return rep, nil
}

// StreamBackgrounds returns the background of each band of h: cfg.Background,
// or with cfg.BackgroundAuto the percentile rule of Restore over src (which
// must then be the whole scene; nil for a stream input is an error).
func StreamBackgrounds(cfg step.Config, h *arrowio.Header, src raster.Reader, bands []int) ([]float64, error) {
	out := make([]float64, len(h.Bands))
	if !cfg.BackgroundAuto {
		for i := range out {
			out[i] = cfg.Background
		}
		return out, nil
	}
	if src == nil {
		return nil, step.FieldErrorf("Background", "{Background} auto needs the whole scene; a tile-stream input is restored tile by tile: give a value")
	}
	valid := make([]step.ValidFunc, len(bands))
	for i, b := range h.Bands {
		valid[i] = step.NewValid(b.NoData, b.HasNoData, cfg.Saturated, cfg.HasSaturated)
	}
	return step.AutoBackground(src, bands, valid)
}

// CheckPlan checks that t is a tile of plan: its column and row exist and
// its buffer is the tile's input window clipped to the scene.
func CheckPlan(p step.Plan, t *arrowio.Tile) error {
	if t.Col >= len(p.Cols) {
		return arrowio.TileErrorf(t, arrowio.ColTileColumn, "is %d; the tiling has %d columns (scene width %d, tile %d)", t.Col, len(p.Cols), p.W, p.Tile)
	}
	if t.TileRow >= len(p.Rows) {
		return arrowio.TileErrorf(t, arrowio.ColTileRow, "is %d; the tiling has %d rows (scene height %d, tile %d)", t.TileRow, len(p.Rows), p.H, p.Tile)
	}
	for _, ax := range []struct {
		spans                 []step.Span
		i, n                  int
		pos, size, lo, hi     int
		cPos, cSize, cLo, cHi string
	}{
		{p.Cols, t.Col, p.W, t.X, t.W, t.HaloLeft, t.HaloRight, arrowio.ColBufferX, arrowio.ColBufferWidth, arrowio.ColHaloLeft, arrowio.ColHaloRight},
		{p.Rows, t.TileRow, p.H, t.Y, t.H, t.HaloTop, t.HaloBottom, arrowio.ColBufferY, arrowio.ColBufferHeight, arrowio.ColHaloTop, arrowio.ColHaloBottom},
	} {
		core := ax.spans[ax.i]
		in := clipSpan(p.InSpan(ax.spans, ax.i), ax.n)
		switch {
		case ax.pos != in.Start:
			return arrowio.TileErrorf(t, ax.cPos, "is %d, want %d for tile (%d,%d) (core %d-%d, overlap %d)", ax.pos, in.Start, t.Col, t.TileRow, core.Start, core.End, p.Overlap)
		case ax.size != in.Len():
			return arrowio.TileErrorf(t, ax.cSize, "is %d, want %d for tile (%d,%d)", ax.size, in.Len(), t.Col, t.TileRow)
		case ax.lo != core.Start-in.Start:
			return arrowio.TileErrorf(t, ax.cLo, "is %d, want %d for tile (%d,%d)", ax.lo, core.Start-in.Start, t.Col, t.TileRow)
		case ax.hi != in.End-core.End:
			return arrowio.TileErrorf(t, ax.cHi, "is %d, want %d for tile (%d,%d)", ax.hi, in.End-core.End, t.Col, t.TileRow)
		}
	}
	return nil
}

// SceneTiler cuts a scene into the tiles of an observed stream, in the order
// (tile row, band, tile column). It reads one strip of rows of one band at a
// time. Invalid pixels (nodata, NaN, Inf) become NaN.
type SceneTiler struct {
	src      raster.Reader
	bands    []int
	hdr      *arrowio.Header
	plan     step.Plan
	valid    []step.ValidFunc
	row, b   int
	col      int
	strip    []float32
	stripY   int
	loaded   bool
	finished bool
}

// NewSceneTiler tiles bands (0-based, stream order) of src as h describes.
func NewSceneTiler(src raster.Reader, bands []int, h *arrowio.Header) (*SceneTiler, error) {
	p, err := step.NewPlan(h.Width, h.Height, h.Tile, h.Overlap)
	if err != nil {
		return nil, fmt.Errorf("%w: %v", step.ErrConfig, err)
	}
	s := &SceneTiler{src: src, bands: bands, hdr: h, plan: p}
	for _, b := range h.Bands {
		s.valid = append(s.valid, step.NewValid(b.NoData, b.HasNoData, 0, false))
	}
	return s, nil
}

// Next implements TileSource.
func (s *SceneTiler) Next(t *arrowio.Tile) (bool, error) {
	p := s.plan
	if s.finished {
		return false, nil
	}
	iy := clipSpan(p.InSpan(p.Rows, s.row), p.H)
	if !s.loaded {
		s.strip = grow(s.strip, p.W*iy.Len())
		if err := s.src.ReadRows(iy.Start, iy.End, s.bands[s.b:s.b+1], [][]float32{s.strip}); err != nil {
			return false, err
		}
		s.stripY = iy.Start
		s.loaded = true
	}
	ix := clipSpan(p.InSpan(p.Cols, s.col), p.W)
	band := s.hdr.Bands[s.b]
	*t = arrowio.Tile{SceneID: s.hdr.SceneID, Band: s.b, BandName: band.Description, Col: s.col, TileRow: s.row,
		X: ix.Start, Y: iy.Start, W: ix.Len(), H: iy.Len(),
		HaloLeft: p.Cols[s.col].Start - ix.Start, HaloRight: ix.End - p.Cols[s.col].End,
		HaloTop: p.Rows[s.row].Start - iy.Start, HaloBottom: iy.End - p.Rows[s.row].End,
		Pix: t.Pix, Uncertainty: nil}
	t.Pix = grow(t.Pix, t.W*t.H)
	valid := s.valid[s.b]
	for y := 0; y < t.H; y++ {
		src := s.strip[(iy.Start+y-s.stripY)*p.W+ix.Start:][:t.W]
		dst := t.Pix[y*t.W : (y+1)*t.W]
		for x, v := range src {
			if valid(v) {
				dst[x] = v
			} else {
				dst[x] = nan
			}
		}
	}
	// Advance: column, then band, then tile row.
	s.col++
	if s.col == len(p.Cols) {
		s.col = 0
		s.loaded = false
		s.b++
		if s.b == len(s.bands) {
			s.b = 0
			s.row++
			if s.row == len(p.Rows) {
				s.finished = true
			}
		}
	}
	return true, nil
}

// RestoreTiles restores every tile of src (an observed stream described by
// in) and writes the restored tiles to dst in input order. Each tile is
// independent (stateless); at most 2 x workers + 2 tiles are in memory; the
// result does not depend on cfg.Workers (random streams come from
// Problem.Key). The first error (in stream order) stops the run; nothing is
// written to dst after it is known.
func RestoreTiles(ctx context.Context, in *arrowio.Header, backgrounds []float64, src TileSource, dst TileSink, cfg step.Config) error {
	if in.Kind != arrowio.KindObserved {
		return &arrowio.StreamError{Row: -1, Err: fmt.Errorf("metadata %s is %q: restore needs an observed stream (limpid tiles pack)", arrowio.KeyKind, in.Kind)}
	}
	cfg.SetTiling(in.Tile, in.Overlap)
	if err := cfg.Resolve(); err != nil {
		return err
	}
	plan, err := step.NewPlan(in.Width, in.Height, in.Tile, in.Overlap)
	if err != nil {
		return fmt.Errorf("%w: %v", step.ErrConfig, err)
	}
	solver := cfg.NewSolver()
	if cfg.Decided != nil {
		// A scene plan's decisions (limpid plan): the raster route's solvers.
		if solver, err = cfg.DecidedSolver(plan); err != nil {
			return err
		}
	}
	st := &streamRun{plan: plan, solver: solver, backgrounds: backgrounds, src: src, dst: dst, progress: cfg.Progress}
	for _, b := range in.Bands {
		st.valid = append(st.valid, step.NewValid(b.NoData, b.HasNoData, cfg.Saturated, cfg.HasSaturated))
	}
	nbuf := 2*cfg.Workers + 2
	st.free = make(chan *arrowio.Tile, nbuf)
	for i := 0; i < nbuf; i++ {
		st.free <- &arrowio.Tile{}
	}
	return step.RunOrdered(ctx, cfg.Workers, nbuf, st.produce, st.solve, st.finish)
}

// streamRun is RestoreTiles' side of the tile pipeline.
type streamRun struct {
	plan        step.Plan
	solver      step.Solver
	valid       []step.ValidFunc
	backgrounds []float64
	src         TileSource
	dst         TileSink
	progress    func(done, total int)
	free        chan *arrowio.Tile // tile buffers, at most in flight
	n           int
}

// MaxEngineValue bounds the data values the engine restores (2^40, about
// 1.1e12): their squares (1.2e24) and sums of squares over a scene of 10^9
// pixels stay far inside float32's range (3.4e38; IEEE 754), where values
// near 3e38 overflowed to zeros. The raster route scales larger data by a
// power of two (cmd/limpid); a tile stream above it is refused.
const MaxEngineValue float64 = 1 << 40

// checkRange refuses a tile whose valid values EMS cannot restore as they
// are: below 0 (EMS models non-negative counts; the raster route offsets
// such a scene, a stream cannot be scanned first) or above MaxEngineValue.
func checkRange(t *arrowio.Tile, valid step.ValidFunc) error {
	lo, hi := float32(0), float32(MaxEngineValue)
	for _, v := range t.Pix[:t.W*t.H] {
		if valid(v) && (v < lo || v > hi) {
			return arrowio.TileErrorf(t, arrowio.ColPixels, "holds %g: EMS restores values from 0 to %g only (limpid restore on the raster offsets or scales such a scene; or rescale it before packing)", v, MaxEngineValue)
		}
	}
	return nil
}

// produce reads the next tile into a free buffer and checks it against the
// tiling.
func (st *streamRun) produce(ctx context.Context) (*arrowio.Tile, bool, error) {
	t := <-st.free // runOrdered keeps fewer tiles in flight than buffers
	ok, err := st.src.Next(t)
	if err == nil && ok {
		err = CheckPlan(st.plan, t)
	}
	if err == nil && ok {
		err = checkRange(t, st.valid[t.Band])
	}
	if err != nil || !ok {
		st.free <- t
		return nil, false, err
	}
	st.n++
	if st.progress != nil {
		st.progress(st.n, 0)
	}
	return t, true, nil
}

func (st *streamRun) solve(ctx context.Context, wk *step.TileWork, t *arrowio.Tile) error {
	if err := restoreTile(ctx, st.solver, st.plan, wk, t, st.valid[t.Band], float32(st.backgrounds[t.Band])); err != nil {
		return &step.TileError{Band: t.Band, Col: t.Col, Row: t.TileRow, Err: err}
	}
	return nil
}

// finish writes a restored tile in stream order and frees its buffer.
func (st *streamRun) finish(t *arrowio.Tile, failed bool) error {
	var err error
	if !failed {
		err = st.dst.Write(t)
	}
	st.free <- t
	return err
}

// restoreTile solves the tile's Problem (the tile pipeline's: its input
// window with the mirrored positions outside the scene) and overwrites t's
// pixels with the restored object plus background (NaN where the input is
// invalid), and its uncertainty with the standard error when the solver
// reports one.
func restoreTile(ctx context.Context, solver step.Solver, p step.Plan, wk *step.TileWork, t *arrowio.Tile, valid step.ValidFunc, bg float32) error {
	key := step.TileKey{Band: t.Band, Col: t.Col, Row: t.TileRow}
	s, err := p.SolveTile(ctx, solver, wk, key, step.Window{Pix: t.Pix, X: t.X, Y: t.Y, W: t.W}, valid, bg, false, true, nil)
	if err != nil {
		return err
	}
	if s.HasSE {
		t.Uncertainty = make([]float32, t.W*t.H)
	} else {
		t.Uncertainty = nil
	}
	for by := 0; by < t.H; by++ {
		o := (t.Y+by-s.F.Y)*s.F.W + t.X - s.F.X
		frow, mrow := s.F.Pix[o:o+t.W], s.Mask.Pix[o:o+t.W]
		orow := t.Pix[by*t.W : (by+1)*t.W]
		for x := range orow {
			if mrow[x] != 0 {
				orow[x] = frow[x] + bg
			} else {
				orow[x] = nan
			}
		}
		if s.HasSE {
			srow, urow := s.SE.Pix[o:o+t.W], t.Uncertainty[by*t.W:(by+1)*t.W]
			for x := range urow {
				if mrow[x] != 0 {
					urow[x] = srow[x]
				} else {
					urow[x] = nan
				}
			}
		}
	}
	t.Iterations, t.Change = s.Iterations, s.Change
	return nil
}

// nan is the value invalid pixels take in streams.
var nan = float32(math.NaN())

// grow returns b resized to n, reallocated only when too small.
func grow(b []float32, n int) []float32 {
	if cap(b) < n {
		return make([]float32, n)
	}
	return b[:n]
}

// Assembler writes the scene a stream describes to a raster.Writer. For a
// restored stream it weights the tiles' output windows (step.Plan.Weigh) and
// blends them with the tile pipeline's blender in Restore's order (tile row,
// band, column), so the result equals Restore's bit for bit; for an observed
// stream it copies the tile cores. Tiles may arrive in any order: a tile that
// comes in that order is added at once, others wait in memory until their
// turn; a tile row is written once all its tiles are added. Its memory is
// the blender's strips and one tile window for a stream in order, whatever
// the scene's height.
type Assembler struct {
	hdr      *arrowio.Header
	plan     step.Plan
	dst      raster.Writer
	restored bool
	nb       int
	rows     map[int][]*asmTile // tiles that came before their turn
	nextRow  int                // the tile row being added
	added    int                // tiles of nextRow added, in (band, column) order
	blend    *step.Blender
	out      []float32     // the window of a tile added at once
	rowsOut  [][]float32   // the blender's finished rows, per band
	wk       step.TileWork // blend weights
	// Report, when set (restored streams), receives per-tile records and the
	// per-band maximum iteration count.
	Report *step.Report
}

// maxAssemblerBytes bounds the strips an Assembler allocates (16 GiB: a
// 100000-pixel-wide, 16-band scene in 576-row strips needs 7 GiB).
const maxAssemblerBytes = 16 << 30

type asmTile struct {
	out    []float32
	ox, oy step.Span
	iters  int
	change float64
}

// NewAssembler prepares writing h's scene to dst (bands in stream order).
func NewAssembler(h *arrowio.Header, dst raster.Writer) (*Assembler, error) {
	p, err := step.NewPlan(h.Width, h.Height, h.Tile, h.Overlap)
	if err != nil {
		return nil, fmt.Errorf("%w: %v", step.ErrConfig, err)
	}
	a := &Assembler{hdr: h, plan: p, dst: dst, restored: h.Kind == arrowio.KindRestored, nb: len(h.Bands),
		rows: map[int][]*asmTile{}}
	// Refuse what a stream's header cannot honestly need on one machine: the
	// accumulator strips, counted twice (the rule from when rows were copied
	// out of them to be written; kept so that the same headers pass).
	maxOut := step.NewBlender(p, 0, !a.restored).StripRows()
	if need := 2 * int64(a.nb) * int64(p.W) * int64(maxOut) * 4; need > maxAssemblerBytes {
		return nil, &arrowio.StreamError{Row: -1, Err: fmt.Errorf("%d bands of a %d-pixel-wide scene in strips of %d rows need %d GiB: more than the %d GiB limit", a.nb, p.W, maxOut, need>>30, maxAssemblerBytes>>30)}
	}
	a.blend = step.NewBlender(p, a.nb, !a.restored)
	a.rowsOut = make([][]float32, a.nb)
	return a, nil
}

// window is tile t's contribution in buf (grown as needed): its weighted
// output window for a restored stream, its core for an observed one.
func (a *Assembler) window(buf []float32, t *arrowio.Tile) ([]float32, step.Span, step.Span) {
	p := a.plan
	if a.restored {
		// The stream carries f + bg: weigh it with a zero background.
		pix := step.Window{Pix: t.Pix, X: t.X, Y: t.Y, W: t.W}
		return p.Weigh(buf, &a.wk, step.TileKey{Band: t.Band, Col: t.Col, Row: t.TileRow}, pix, 0)
	}
	ox, oy := p.Cols[t.Col], p.Rows[t.TileRow]
	ow, oh := ox.Len(), oy.Len()
	buf = grow(buf, ow*oh)
	for y := 0; y < oh; y++ {
		copy(buf[y*ow:(y+1)*ow], t.Pix[(oy.Start+y-t.Y)*t.W+ox.Start-t.X:])
	}
	return buf, ox, oy
}

// Write implements TileSink.
func (a *Assembler) Write(t *arrowio.Tile) error {
	p := a.plan
	if err := CheckPlan(p, t); err != nil {
		return err
	}
	nt := a.nb * len(p.Cols)
	i := t.Band*len(p.Cols) + t.Col
	slots := a.rows[t.TileRow]
	if t.TileRow < a.nextRow || (t.TileRow == a.nextRow && i < a.added) || (slots != nil && slots[i] != nil) {
		return arrowio.TileErrorf(t, arrowio.ColTileColumn, "tile (%d,%d) of band %d appears twice", t.Col, t.TileRow, t.Band+1)
	}
	if t.TileRow != a.nextRow || i != a.added {
		if slots == nil {
			slots = make([]*asmTile, nt)
			a.rows[t.TileRow] = slots
		}
		at := &asmTile{iters: t.Iterations, change: t.Change}
		at.out, at.ox, at.oy = a.window(nil, t)
		slots[i] = at
		return nil
	}
	var ox, oy step.Span
	a.out, ox, oy = a.window(a.out, t)
	a.add(&asmTile{out: a.out, ox: ox, oy: oy, iters: t.Iterations, change: t.Change})
	// The tiles that waited for this one, then the rows they complete.
	for a.nextRow < len(p.Rows) {
		slots := a.rows[a.nextRow]
		for a.added < nt && slots != nil && slots[a.added] != nil {
			s := slots[a.added]
			slots[a.added] = nil
			a.add(s)
		}
		if a.added < nt {
			return nil
		}
		if err := a.flushRow(a.nextRow); err != nil {
			return err
		}
		delete(a.rows, a.nextRow)
		a.nextRow++
		a.added = 0
	}
	return nil
}

// add blends the next tile of the row being added (band, column order).
func (a *Assembler) add(s *asmTile) {
	nc := len(a.plan.Cols)
	b, col := a.added/nc, a.added%nc
	a.blend.Add(b, s.ox, s.oy, s.out)
	if a.Report != nil {
		br := &a.Report.Bands[b]
		br.Tiles = append(br.Tiles, step.TileReport{Col: col, Row: a.nextRow, Iterations: s.iters, Change: s.change})
		br.MaxIterations = max(br.MaxIterations, s.iters)
	}
	a.added++
}

// flushRow writes the rows that no later tile row touches once tile row
// `row` is added, straight from the blender's strips.
func (a *Assembler) flushRow(row int) error {
	end := a.blend.RowEnd(row)
	n := end - a.blend.Y()
	for b := range a.rowsOut {
		a.rowsOut[b] = a.blend.Rows(b, n)
	}
	if err := a.dst.WriteRows(a.blend.Y(), end, a.rowsOut); err != nil {
		return err
	}
	a.blend.Shift(n)
	return nil
}

// Finish checks that every tile arrived.
func (a *Assembler) Finish() error {
	p := a.plan
	if a.nextRow == len(p.Rows) {
		return nil
	}
	// Tiles before a.added are in; a.added is the first one missing.
	nc := len(p.Cols)
	return &arrowio.StreamError{Batch: -1, Row: -1, Err: fmt.Errorf("tile (%d,%d) of band %d is missing (%d of %d tile rows complete)", a.added%nc, a.nextRow, a.added/nc+1, a.nextRow, len(p.Rows))}
}

// planReport is the report of a stream restored with a scene plan
// (arrowio.KeyPlan): the plan's, as the raster route writes it.
func planReport(h *arrowio.Header) (*step.Report, error) {
	var p plan.File
	if err := json.Unmarshal([]byte(h.Plan), &p); err != nil || p.Report == nil || len(p.Report.Bands) != len(h.Bands) {
		return nil, &arrowio.StreamError{Row: -1, Err: fmt.Errorf("metadata %s: not a plan for this stream's %d bands", arrowio.KeyPlan, len(h.Bands))}
	}
	rep := *p.Report
	rep.Bands = append([]step.BandReport(nil), p.Report.Bands...)
	return &rep, nil
}
