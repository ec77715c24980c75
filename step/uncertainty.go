package step

import (
	"math"

	"limpid/step/rowio"
)

// The blended Monte Carlo standard error. Tiles are restored with
// independent random streams, so their Monte Carlo errors are independent
// and the blended image sum_t w_t f_t has standard error
// sqrt(sum_t w_t^2 se_t^2) (variance of a weighted sum of independent
// estimates). Inside a tile core (w = 1) it is the tile's own SE; across a
// blending ramp it dips below either tile's SE, as averaging two independent
// estimates does. The noise error map blends linearly (sum w se): overlapping tiles
// restore the same data, so their data-noise errors are fully correlated.
// The particle method's error map (noisePart) blends each part by its own
// rule and then adds them in quadrature per pixel, sqrt(mc^2 + noise^2):
// the Monte Carlo error comes from the random streams and the noise part
// from the data, independent sources, so their variances add.

// weighSE returns w^2 se^2 (linear: w se) over a tile's output window ox x
// oy (ow x oh), grown into out, with se read from the window it covers and
// the weights Plan.Weigh left in wk; zeros when the solver reported no
// standard error (!has).
func weighSE(out []float32, wk *TileWork, has bool, ow, oh int, se Window, ox, oy Span, linear bool) []float32 {
	out = grow(out, ow*oh)
	for y := 0; y < oh; y++ {
		orow := out[y*ow : (y+1)*ow]
		if !has {
			clear(orow)
			continue
		}
		serow := se.Pix[(oy.Start+y-se.Y)*se.W+ox.Start-se.X:]
		wy := wk.wy[y]
		for x := range orow {
			w := wy * wk.wx[x]
			if linear {
				orow[x] = w * serow[x]
			} else {
				orow[x] = w * w * serow[x] * serow[x]
			}
		}
	}
	return out
}

// outputSE turns the first n accumulated rows into standard errors (NaN on
// invalid pixels of strip st) and adds them to the report's sums.
func (sc *scan) outputSE(n int, st *rowio.Strip) [][]float32 {
	W := sc.plan.W
	bufs := sc.out.BufferSE()
	for b := range bufs {
		acc, img := sc.blendSE.Rows(b, n), sc.blend.Rows(b, n)
		out := bufs[b][:n*W]
		bg := sc.rep.Bands[b].Background
		var accN []float32
		if sc.noisePart {
			accN = sc.blendN.Rows(b, n)
		}
		for y := 0; y < n; y++ {
			sy := sc.blend.Y() + y - st.Y
			srow := st.Rows[b][sy*W : (sy+1)*W]
			for x, v := range srow {
				i := y*W + x
				if sc.valid[b](v) {
					se := acc[i]
					if !sc.dataSE {
						se = float32(math.Sqrt(float64(max(acc[i], 0))))
					}
					sc.seSum[b] += float64(se)
					sc.seFlux[b] += float64(img[i]) - bg
					if sc.noisePart {
						d := float64(accN[i])
						se = float32(math.Sqrt(float64(max(acc[i], 0)) + d*d))
						sc.noiseSum[b] += d
						sc.totalSum[b] += float64(se)
					}
					out[i] = se
				} else {
					out[i] = nan
				}
			}
		}
		if sc.seParts != nil && sc.noisePart {
			sc.showParts(b, out, acc, accN)
		}
	}
	return bufs
}

// showParts hands band b's finished rows of the two parts and their total
// to the test hook Config.seParts (NaN where the total is).
func (sc *scan) showParts(b int, total, mc2, data []float32) {
	mc, d := make([]float32, len(total)), make([]float32, len(total))
	for i, t := range total {
		mc[i], d[i] = nan, nan
		if t == t {
			mc[i], d[i] = float32(math.Sqrt(float64(max(mc2[i], 0)))), data[i]
		}
	}
	sc.seParts(b, sc.blend.Y(), mc, d, total)
}

// finishSE fills the report's per-band standard-error summary.
func (r *runner) finishSE() {
	if r.dataSE {
		for b := range r.seSum {
			if nv := r.rep.Bands[b].ValidPixels; nv > 0 {
				r.rep.Bands[b].NoiseSE = r.seSum[b] / float64(nv)
			}
		}
		return
	}
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
		if nv := r.rep.Bands[b].ValidPixels; nv > 0 && r.noisePart {
			br.MeanNoiseSE, br.MeanTotalSE = r.noiseSum[b]/float64(nv), r.totalSum[b]/float64(nv)
		}
		r.rep.Particle.Bands = append(r.rep.Particle.Bands, br)
	}
}
