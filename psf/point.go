package psf

import (
	"fmt"
	"math"
)

// PointResult is a 2-D Gaussian fit to a point-like target. Positions are
// window coordinates (pixel centres at integers). SigmaX and SigmaY are
// restoration sigmas (aperture removed): the model integrates the Gaussian
// over each pixel.
type PointResult struct {
	X, Y       float64 `json:"-"`
	SigmaX     float64 `json:"sigma_x"`
	SigmaY     float64 `json:"sigma_y"`
	Sigma      float64 `json:"sigma"`
	Amplitude  float64 `json:"flux"`
	Background float64 `json:"background"`
	// RMS is the fit's root-mean-square residual and Noise the window's
	// noise estimate (DN); RMS near Noise means a good fit.
	RMS      float64  `json:"fit_rms"`
	Noise    float64  `json:"noise"`
	Peak     float64  `json:"peak_snr"`
	Warnings []string `json:"warnings,omitempty"`
}

// pointModel is B + A Px(x) Py(y), Px(x) = Phi((x + 1/2 - x0)/sx) -
// Phi((x - 1/2 - x0)/sx): a Gaussian point image integrated over the pixel.
// p holds B, A, x0, y0, sx, sy.
func pointModel(p [6]float64, x, y float64) float64 {
	px := normalCDF((x+0.5-p[2])/p[4]) - normalCDF((x-0.5-p[2])/p[4])
	py := normalCDF((y+0.5-p[3])/p[5]) - normalCDF((y-0.5-p[3])/p[5])
	return p[0] + p[1]*px*py
}

// MeasurePoint fits B + A Px(x) Py(y) (a pixel-integrated Gaussian with
// separate sigmas along x and y, plus a flat background) to a window holding
// one isolated point-like target, by Levenberg-Marquardt least squares
// (Marquardt, J. SIAM 11:431, 1963) with a forward-difference Jacobian.
// The fit starts from the window's border median (background), its
// strongest pixel (amplitude) and the centroid near that pixel.
func MeasurePoint(win []float32, w, h int) (*PointResult, error) {
	if w*h != len(win) || w < 7 || h < 7 {
		return nil, fmt.Errorf("%w: the window is %dx%d; a point fit needs at least 7x7 pixels", ErrMeasure, w, h)
	}
	img, border, err := pointPixels(win, w, h)
	if err != nil {
		return nil, err
	}
	noise := pixelNoise(img, w, h)
	b0 := median(border)
	ip := 0
	for i, v := range img {
		if math.Abs(v-b0) > math.Abs(img[ip]-b0) {
			ip = i
		}
	}
	peak := img[ip] - b0
	if math.Abs(peak) < 5*math.Max(noise, 1e-30) {
		return nil, fmt.Errorf("%w: no point target in the window: the strongest pixel is %.3g DN from the background against a noise of %.3g DN (flat window?)", ErrMeasure, math.Abs(peak), noise)
	}
	f := pointFit{img: img, w: w, h: h}
	p, cur := f.run(pointStart(img, w, h, b0, peak, ip))
	r := &PointResult{X: p[2], Y: p[3], SigmaX: p[4], SigmaY: p[5], Sigma: math.Sqrt(p[4] * p[5]),
		Amplitude: p[1], Background: p[0], RMS: math.Sqrt(cur / float64(w*h)), Noise: noise, Peak: math.Abs(peak) / math.Max(noise, 1e-30)}
	if r.X < 1 || r.Y < 1 || r.X > float64(w-2) || r.Y > float64(h-2) {
		return nil, fmt.Errorf("%w: the point target's fitted centre (%.1f, %.1f) is at the window border; centre the window on the target", ErrMeasure, r.X, r.Y)
	}
	r.Warnings = pointWarnings(r, w, h)
	return r, nil
}

// pointPixels converts the window to float64 and collects its border
// pixels; NaN and infinite pixels are refused.
func pointPixels(win []float32, w, h int) (img, border []float64, err error) {
	img = make([]float64, len(win))
	for i, v := range win {
		if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
			return nil, nil, fmt.Errorf("%w: the window has an invalid pixel at column %d, row %d (nodata?)", ErrMeasure, i%w, i/w)
		}
		img[i] = float64(v)
		if x, y := i%w, i/w; x == 0 || y == 0 || x == w-1 || y == h-1 {
			border = append(border, img[i])
		}
	}
	return img, border, nil
}

// pointStart is the fit's starting point: background b0, the amplitude of
// a unit-sigma Gaussian of the given peak, the centroid of the
// background-subtracted window within 3 pixels of the peak pixel ip, and
// unit sigmas.
func pointStart(img []float64, w, h int, b0, peak float64, ip int) [6]float64 {
	var s0, sx, sy float64
	px, py := ip%w, ip/w
	for y := max(0, py-3); y <= min(h-1, py+3); y++ {
		for x := max(0, px-3); x <= min(w-1, px+3); x++ {
			v := (img[y*w+x] - b0) / peak
			if v > 0 {
				s0 += v
				sx += v * float64(x)
				sy += v * float64(y)
			}
		}
	}
	return [6]float64{b0, peak * 2 * math.Pi, sx / s0, sy / s0, 1, 1}
}

// pointWarnings flags a window narrow for the fitted sigma, a weak target
// and a residual well above the noise.
func pointWarnings(r *PointResult, w, h int) []string {
	var out []string
	if 3*math.Max(r.SigmaX, r.SigmaY) > float64(min(w, h))/2 {
		out = append(out, fmt.Sprintf("fitted sigma %.2f px is large for a %dx%d window: use a window at least 6 sigma wide", math.Max(r.SigmaX, r.SigmaY), w, h))
	}
	if r.Peak < 20 {
		out = append(out, fmt.Sprintf("the target's peak is only %.1f times the noise; at least 20 is advisable (common practice, no source)", r.Peak))
	}
	if r.RMS > 2*math.Max(r.Noise, 1e-30) {
		out = append(out, fmt.Sprintf("fit residual %.3g DN is %.1f times the noise: the target may not be point-like or isolated", r.RMS, r.RMS/r.Noise))
	}
	return out
}

// pointFit is the Levenberg-Marquardt fit of pointModel to a w x h window,
// with its Jacobian and residual workspace.
type pointFit struct {
	img  []float64
	w, h int
	jac  [][6]float64
	res  []float64
}

// cost is the sum of squared residuals of the model p.
func (f *pointFit) cost(p [6]float64) float64 {
	var c float64
	for y := 0; y < f.h; y++ {
		for x := 0; x < f.w; x++ {
			e := f.img[y*f.w+x] - pointModel(p, float64(x), float64(y))
			c += e * e
		}
	}
	return c
}

// run iterates from p (at most 200 iterations) until no damping gives a
// lower cost or the relative decrease falls below 1e-12; it returns the
// parameters and their cost.
func (f *pointFit) run(p [6]float64) ([6]float64, float64) {
	lambda := 1e-3
	cur := f.cost(p)
	n := f.w * f.h
	f.jac = make([][6]float64, n)
	f.res = make([]float64, n)
	for it := 0; it < 200; it++ {
		jtj, jtr := f.normal(p)
		q, c, improved, done := f.step(p, cur, jtj, jtr, &lambda)
		if !improved {
			break
		}
		p, cur = q, c
		if done {
			break
		}
	}
	return p, cur
}

// normal fills the residuals and the forward-difference Jacobian at p and
// returns the normal equations J^T J and J^T r.
func (f *pointFit) normal(p [6]float64) (jtj [6][6]float64, jtr [6]float64) {
	for y := 0; y < f.h; y++ {
		for x := 0; x < f.w; x++ {
			i := y*f.w + x
			m := pointModel(p, float64(x), float64(y))
			f.res[i] = f.img[i] - m
			for k := 0; k < 6; k++ {
				q := p
				step := 1e-6 * math.Max(1, math.Abs(q[k]))
				q[k] += step
				f.jac[i][k] = (pointModel(q, float64(x), float64(y)) - m) / step
			}
		}
	}
	for i := range f.res {
		for a := 0; a < 6; a++ {
			jtr[a] += f.jac[i][a] * f.res[i]
			for b := 0; b < 6; b++ {
				jtj[a][b] += f.jac[i][a] * f.jac[i][b]
			}
		}
	}
	return jtj, jtr
}

// step tries up to 20 damping factors (Marquardt's diagonal scaling,
// lambda times ten after each failure, a tenth after a success, at least
// 1e-9) for a step that lowers the cost cur and keeps both sigmas above
// 0.05 pixel. done reports a relative decrease below 1e-12.
func (f *pointFit) step(p [6]float64, cur float64, jtj [6][6]float64, jtr [6]float64, lambda *float64) (q [6]float64, c float64, improved, done bool) {
	for try := 0; try < 20; try++ {
		m := augmented(6)
		for a := 0; a < 6; a++ {
			for b := 0; b < 6; b++ {
				m[a][b] = jtj[a][b]
			}
			m[a][a] += *lambda * jtj[a][a]
			m[a][6] = jtr[a]
		}
		d, ok := solveLinear(m, 1e-300)
		if !ok {
			*lambda *= 10
			continue
		}
		q = p
		for k := range q {
			q[k] += d[k]
		}
		if q[4] <= 0.05 || q[5] <= 0.05 {
			*lambda *= 10
			continue
		}
		if c = f.cost(q); c < cur {
			rel := (cur - c) / math.Max(cur, 1e-300)
			*lambda = math.Max(*lambda/10, 1e-9)
			return q, c, true, rel < 1e-12
		}
		*lambda *= 10
	}
	return p, cur, false, false
}
