package plan

import (
	"context"
	"fmt"

	"limpid/raster"
	"limpid/step"
)

// TileSource reads tile (col, row) of a shard's output: every band's
// weighted window into out[b] (the window's pixels, rows first) and the
// band's tile report.
type TileSource func(col, row int, out [][]float32) ([]step.TileReport, error)

// Window is the output window of tile (col, row) (step.Plan.OutSpan).
func Window(tp step.Plan, col, row int) (ox, oy step.Span) {
	return tp.OutSpan(tp.Cols, col), tp.OutSpan(tp.Rows, row)
}

// Merge blends every tile of the plan from src into dst in the single
// run's order (tile row, then column, per band) and writes the finished
// rows as the single run does, so that dst receives the same rows; NaN
// (invalid input) is carried by the tiles. It returns the report of the
// plan completed with the tiles. Memory: the blend strips of the single
// run and one tile.
func (p *File) Merge(ctx context.Context, src TileSource, dst raster.Writer) (*step.Report, error) {
	tp, err := p.Tiling()
	if err != nil {
		return nil, fmt.Errorf("%w: %v", ErrPlan, err)
	}
	nb := len(p.Bands)
	if p.Report == nil || len(p.Report.Bands) != nb {
		return nil, fmt.Errorf("%w: the plan's report does not list its %d bands", ErrPlan, nb)
	}
	rep := *p.Report
	rep.Bands = append([]step.BandReport(nil), p.Report.Bands...)
	bl := step.NewBlender(tp, nb, false)
	out := make([][]float32, nb)
	rows := make([][]float32, nb)
	for row := range tp.Rows {
		for col := range tp.Cols {
			if err := ctx.Err(); err != nil {
				return nil, err
			}
			ox, oy := Window(tp, col, row)
			for b := range out {
				if n := ox.Len() * oy.Len(); cap(out[b]) < n {
					out[b] = make([]float32, n)
				} else {
					out[b] = out[b][:n]
				}
			}
			reps, err := src(col, row, out)
			if err != nil {
				return nil, err
			}
			for b := 0; b < nb; b++ {
				bl.Add(b, ox, oy, out[b])
				rep.Bands[b].Tiles = append(rep.Bands[b].Tiles, reps[b])
				rep.Bands[b].MaxIterations = max(rep.Bands[b].MaxIterations, reps[b].Iterations)
			}
		}
		end := bl.RowEnd(row)
		n := end - bl.Y()
		for b := range rows {
			rows[b] = bl.Rows(b, n)
			br := &rep.Bands[b]
			for _, v := range rows[b] {
				if v == v {
					br.FluxAfter += float64(v)
				}
			}
		}
		if err := dst.WriteRows(bl.Y(), end, rows); err != nil {
			return nil, err
		}
		bl.Shift(n)
	}
	for b := range rep.Bands {
		if b < len(p.FluxBefore) && b < len(p.ValidPixels) {
			rep.Bands[b].FluxBefore, rep.Bands[b].ValidPixels = p.FluxBefore[b], p.ValidPixels[b]
		}
	}
	return &rep, nil
}

// Count reads the scene once for the plan's tile balance and flux: each
// tile's valid pixels over all bands, and per band the sum of the valid
// samples in the single run's order (rows, then columns) and their count.
// valid(b, v) tells a valid sample of output band b. Memory: strip rows of
// every band at a time.
func (p *File) Count(src raster.Reader, valid func(band int, v float32) bool) error {
	tp, err := p.Tiling()
	if err != nil {
		return fmt.Errorf("%w: %v", ErrPlan, err)
	}
	nb := len(p.Bands)
	W := tp.W
	p.FluxBefore, p.ValidPixels = make([]float64, nb), make([]int64, nb)
	p.Tiles = p.Tiles[:0]
	for row := range tp.Rows {
		for col := range tp.Cols {
			p.Tiles = append(p.Tiles, Tile{Col: col, Row: row})
		}
	}
	const strip = 64
	buf := make([][]float32, nb)
	for b := range buf {
		buf[b] = make([]float32, W*strip)
	}
	colOf := make([]int, W)
	for c, s := range tp.Cols {
		for x := s.Start; x < s.End; x++ {
			colOf[x] = c
		}
	}
	tr := 0
	for y0 := 0; y0 < tp.H; y0 += strip {
		y1 := min(y0+strip, tp.H)
		if err := src.ReadRows(y0, y1, p.Bands, buf); err != nil {
			return err
		}
		for y := y0; y < y1; y++ {
			for tp.Rows[tr].End <= y {
				tr++
			}
			base := tr * len(tp.Cols)
			for b := 0; b < nb; b++ {
				r := buf[b][(y-y0)*W : (y-y0+1)*W]
				for x, v := range r {
					if valid(b, v) {
						p.FluxBefore[b] += float64(v)
						p.ValidPixels[b]++
						p.Tiles[base+colOf[x]].Valid++
					}
				}
			}
		}
	}
	return nil
}
