package step

import (
	"context"
	"math"

	"limpid/raster"
	"limpid/step/internal/ordered"
	"limpid/step/internal/plane"
	"limpid/step/noise"
)

// The one tile pipeline. Both routes, the raster route (Restore and its
// noise and choice passes) and the tile-stream route (RestoreTiles, then
// Assembler), cut the same Problems with Plan.problem, run them through
// RunOrdered's worker pool under one first-error rule, and blend the
// weighted output windows (Plan.weigh) with one Blender in one order: tile
// row, band, column. Their outputs are therefore equal bit for bit by
// construction.

// Window is a block of one band's scene pixels: Pix holds rows Y, Y+1, ...
// of columns [X, X+W) (row stride W).
type Window struct {
	Pix     []float32
	X, Y, W int
}

// TileWork is one worker's reusable memory: the solver's workspace and the
// tile buffers. It grows to the largest tile and is never shared.
type TileWork struct {
	ws             Workspace
	d, mask, f, se []float32
	nse            []float32 // the data-noise part beside a Monte Carlo se
	wx, wy         []float32
}

// problem copies tile key's input window (Plan.InSpan, mirrored at the scene
// edges) out of src into wk.d and wk.mask and returns the tile's Problem.
// valid decides the mask; bg is the band's background.
func (p Plan) problem(wk *TileWork, key TileKey, src Window, valid ValidFunc, bg float32) *Problem {
	ix, iy := p.InSpan(p.Cols, key.Col), p.InSpan(p.Rows, key.Row)
	tw, th := ix.Len(), iy.Len()
	n := tw * th
	wk.d = grow(wk.d, n)
	wk.mask = grow(wk.mask, n)
	wk.f = grow(wk.f, n)
	for y := 0; y < th; y++ {
		sy := raster.Mirror(iy.Start+y, p.H) - src.Y
		srow := src.Pix[sy*src.W : (sy+1)*src.W]
		drow := wk.d[y*tw : (y+1)*tw]
		mrow := wk.mask[y*tw : (y+1)*tw]
		for x := 0; x < tw; x++ {
			v := srow[raster.Mirror(ix.Start+x, p.W)-src.X]
			drow[x] = v
			if valid(v) {
				mrow[x] = 1
			} else {
				mrow[x] = 0
			}
		}
	}
	return &Problem{D: wk.d, Mask: wk.mask, W: tw, H: th, Background: bg, Key: key}
}

// Solved is a tile's solution in a worker's memory, each plane on the tile's
// input window: the object F (background excluded), the validity Mask (1
// valid, 0 invalid) and, when the solver reports one, the Monte Carlo
// standard error SE (and NoiseSE, Problem.NoiseSE). It is valid until the
// worker's next tile.
type Solved struct {
	F, Mask, SE, NoiseSE Window
	Result
}

// SolveTile cuts tile key's Problem out of src (Plan.problem's rule: the
// input window, mirrored at the scene's edges), solves it with solver in
// wk's memory and returns the solution. record asks the solver for its
// per-iteration history; withSE hands it a standard-error plane, and
// seNoise (nil: none) the noise model whose propagated error deterministic
// solvers write there (Problem.SENoise).
func (p Plan) SolveTile(ctx context.Context, solver Solver, wk *TileWork, key TileKey, src Window, valid ValidFunc, bg float32, record, withSE bool, seNoise *noise.Model) (Solved, error) {
	prob := p.problem(wk, key, src, valid, bg)
	prob.Record = record
	if withSE {
		wk.se = grow(wk.se, prob.W*prob.H)
		prob.SE = wk.se
		prob.SENoise = seNoise
		if seNoise != nil {
			wk.nse = grow(wk.nse, prob.W*prob.H)
			prob.NoiseSE = wk.nse
		}
	}
	res, err := solver.Solve(ctx, &wk.ws, prob, wk.f)
	if err != nil {
		return Solved{}, err
	}
	ix, iy := p.InSpan(p.Cols, key.Col), p.InSpan(p.Rows, key.Row)
	at := func(pix []float32) Window { return Window{Pix: pix, X: ix.Start, Y: iy.Start, W: ix.Len()} }
	return Solved{F: at(wk.f), Mask: at(wk.mask), SE: at(wk.se), NoiseSE: at(wk.nse), Result: res}, nil
}

// Weigh writes tile key's blend-weighted output window (OutSpan x OutSpan,
// row-major) into out, grown as needed: w_y w_x (f + bg), with f read from
// the window f covers. wk holds the weights afterwards (the standard error's
// weighting reuses them).
func (p Plan) Weigh(out []float32, wk *TileWork, key TileKey, f Window, bg float32) (_ []float32, ox, oy Span) {
	ox, oy = p.OutSpan(p.Cols, key.Col), p.OutSpan(p.Rows, key.Row)
	ow, oh := ox.Len(), oy.Len()
	out = grow(out, ow*oh)
	wk.wx = grow(wk.wx, ow)
	wk.wy = grow(wk.wy, oh)
	p.Weights(wk.wx, p.Cols, key.Col)
	p.Weights(wk.wy, p.Rows, key.Row)
	for y := 0; y < oh; y++ {
		frow := f.Pix[(oy.Start+y-f.Y)*f.W+ox.Start-f.X:]
		orow := out[y*ow : (y+1)*ow]
		wy := wk.wy[y]
		for x := range orow {
			orow[x] = wy * wk.wx[x] * (frow[x] + bg)
		}
	}
	return out, ox, oy
}

// Blender adds the output windows of one tile row after another into
// per-band accumulator strips and releases the scene rows that no later
// tile row touches. Windows must be added in (tile row, band, column) order
// for the sums to be the same bits on every route.
type Blender struct {
	plan  Plan
	cores bool        // observed streams: tiles give their cores, copied
	acc   [][]float32 // per band, scene rows [y, y + len/W)
	y     int
}

// Y is the first scene row the Blender still holds.
func (b *Blender) Y() int { return b.y }

// Rows is band's first n accumulated rows (W x n, starting at scene row Y).
func (b *Blender) Rows(band, n int) []float32 { return b.acc[band][:n*b.plan.W] }

// NewBlender allocates nb accumulator strips for plan. With cores, each
// tile contributes its core (no blending).
func NewBlender(plan Plan, nb int, cores bool) *Blender {
	b := &Blender{plan: plan, cores: cores, acc: make([][]float32, nb)}
	rows := b.StripRows()
	for i := range b.acc {
		b.acc[i] = make([]float32, plan.W*rows)
	}
	return b
}

// StripRows is the height of the accumulator strips: the tallest output
// window.
func (b *Blender) StripRows() int {
	n := 0
	for i := range b.plan.Rows {
		n = max(n, b.span(b.plan.Rows, i).Len())
	}
	return n
}

// span is the window tile i contributes along one axis.
func (b *Blender) span(spans []Span, i int) Span {
	if b.cores {
		return spans[i]
	}
	return b.plan.OutSpan(spans, i)
}

// Add adds (or, for cores, copies) a tile's window out (ox x oy) into band's
// accumulator.
func (b *Blender) Add(band int, ox, oy Span, out []float32) {
	acc := b.acc[band]
	W := b.plan.W
	ow := ox.Len()
	for y := 0; y < oy.Len(); y++ {
		arow := acc[(oy.Start+y-b.y)*W+ox.Start:]
		orow := out[y*ow : (y+1)*ow]
		if b.cores {
			copy(arow[:ow], orow)
			continue
		}
		for x, v := range orow {
			arow[x] += v
		}
	}
}

// RowEnd is the end of the scene rows complete once tile row `row` is
// added: the row's core end, less the blend ramp that the next tile row
// still adds to.
func (b *Blender) RowEnd(row int) int {
	end := b.plan.Rows[row].End
	if row < len(b.plan.Rows)-1 && !b.cores {
		end -= b.plan.Blend
	}
	return end
}

// Shift drops the first n accumulated rows (written by the caller) and
// carries the rest to the top of the strips.
func (b *Blender) Shift(n int) {
	W := b.plan.W
	for _, acc := range b.acc {
		rest := len(acc)/W - n
		copy(acc[:rest*W], acc[n*W:])
		clear(acc[rest*W:])
	}
	b.y += n
}

// RunOrdered is the tile pipeline's one worker pool (ordered.Run, which
// documents the ordering and error rules), each worker with its own
// TileWork.
func RunOrdered[J any](ctx context.Context, workers, inflight int,
	produce func(ctx context.Context) (J, bool, error),
	solve func(ctx context.Context, wk *TileWork, j J) error,
	finish func(j J, failed bool) error) error {
	return ordered.Run(ctx, workers, inflight, func() *TileWork { return &TileWork{} }, produce, solve, finish)
}

func isCancel(err error) bool { return ordered.IsCancel(err) }

// nan is the value invalid pixels take in restored outputs.
var nan = float32(math.NaN())

// IsCancel reports whether err is a cancellation (of a context).
func IsCancel(err error) bool { return isCancel(err) }

// grow and its kin resize a buffer, reallocating only when too small.
var (
	grow    = plane.Grow[float32]
	grow64  = plane.Grow[float64]
	growU32 = plane.Grow[uint32]
)
