package step

import "math"

// The blended Monte Carlo standard error. Tiles are restored with
// independent random streams, so their Monte Carlo errors are independent
// and the blended image sum_t w_t f_t has standard error
// sqrt(sum_t w_t^2 se_t^2) (variance of a weighted sum of independent
// estimates). Inside a tile core (w = 1) it is the tile's own SE; across a
// blending ramp it dips below either tile's SE, as averaging two independent
// estimates does.

// weightSE stores w^2 se^2 of the tile's output window in the slot.
func (r *runner) weightSE(wk *worker, s *slot, res Result, tw, x0, y0 int) {
	ow, oh := s.ox.Len(), s.oy.Len()
	s.seOut = grow(s.seOut, ow*oh)
	for y := 0; y < oh; y++ {
		orow := s.seOut[y*ow : (y+1)*ow]
		if !res.HasSE {
			clear(orow)
			continue
		}
		serow := wk.se[(y0+y)*tw+x0:]
		wy := wk.wy[y]
		for x := range orow {
			w := wy * wk.wx[x]
			orow[x] = w * w * serow[x] * serow[x]
		}
	}
}

// blendSE adds a slot's w^2 se^2 into the standard-error accumulator.
func (r *runner) blendSE(s *slot) {
	acc := r.accSE[s.key.Band]
	W := r.plan.W
	ow := s.ox.Len()
	for y := 0; y < s.oy.Len(); y++ {
		arow := acc[(s.oy.Start+y-r.accY)*W+s.ox.Start:]
		orow := s.seOut[y*ow : (y+1)*ow]
		for x, v := range orow {
			arow[x] += v
		}
	}
}

// outputSE turns the first n accumulated rows into standard errors (NaN on
// invalid pixels) and adds them to the report's sums.
func (r *runner) outputSE(n, cur int) [][]float32 {
	W := r.plan.W
	bufs := <-r.freeSE
	for b := range bufs {
		acc, img := r.accSE[b][:n*W], r.acc[b][:n*W]
		out := bufs[b][:n*W]
		bg := r.rep.Bands[b].Background
		for y := 0; y < n; y++ {
			sy := r.accY + y - r.stripYs[cur]
			srow := r.strips[cur][b][sy*W : (sy+1)*W]
			for x, v := range srow {
				i := y*W + x
				if r.valid[b](v) {
					se := float32(math.Sqrt(float64(max(acc[i], 0))))
					out[i] = se
					r.seSum[b] += float64(se)
					r.seFlux[b] += float64(img[i]) - bg
				} else {
					out[i] = float32(math.NaN())
				}
			}
		}
		bufs[b] = bufs[b][:cap(bufs[b])]
	}
	return bufs
}

// finishSE fills the report's per-band standard-error summary.
func (r *runner) finishSE() {
	if r.rep.Particle == nil {
		return
	}
	for b := range r.seSum {
		br := ParticleBandReport{Band: b + 1}
		if nv := r.rep.Bands[b].ValidPixels; nv > 0 {
			br.MeanSE = r.seSum[b] / float64(nv)
		}
		if r.seFlux[b] > 0 {
			br.RelativeSE = r.seSum[b] / r.seFlux[b]
		}
		r.rep.Particle.Bands = append(r.rep.Particle.Bands, br)
	}
}
