package psf

import (
	"math"
	"sort"
)

// median is the median of v (the mean of the two middle values for an even
// count; NaN for none). v is not modified.
func median(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return 0.5 * (s[n/2-1] + s[n/2])
}

// lineFit is the least-squares line x = a + b y through (ys[i], xs[i]).
func lineFit(ys, xs []float64) (a, b, rms float64) {
	n := float64(len(xs))
	var sy, sx, syy, sxy float64
	for i := range xs {
		sy += ys[i]
		sx += xs[i]
		syy += ys[i] * ys[i]
		sxy += ys[i] * xs[i]
	}
	den := n*syy - sy*sy
	b = (n*sxy - sy*sx) / den
	a = (sx - b*sy) / n
	for i := range xs {
		e := xs[i] - a - b*ys[i]
		rms += e * e
	}
	return a, b, math.Sqrt(rms / n)
}

// solveLinear solves the n x n system whose augmented n x (n+1) matrix is m
// (rows m[i], right-hand side in column n; m is modified) by Gaussian
// elimination with partial pivoting and back substitution (Golub & Van
// Loan, Matrix Computations, 4th ed., 2013, sec. 3.2-3.4). It reports false,
// and no solution, when a pivot is below tiny in magnitude. It serves the
// small normal equations of the background-tilt fit (removeTilt, 4 x 4) and
// of the point fit's Levenberg-Marquardt steps (pointFit.step, 6 x 6).
//
// Why not gonum: gonum v0.17 mat (LU with Dense.Solve or LU.SolveVecTo, and
// Cholesky on the symmetric normal equations) was measured in its place.
// Its factorisations scale by the pivot's reciprocal and sum in another
// order, so the tilt coefficients change in the last bits; the e-SFR then
// moves by up to 7e-14 relative and the golden-section fit amplifies that
// to 2e-9 - 2e-8 relative in the sigmas limpid writes to its JSON summary
// (psf measure --auto on testdata/valley256, band 1: sigma
// 1.404352127876175 became 1.4043521305998659 with LU); with Cholesky one
// e-SFR value of an edge CSV changed in its 6th decimal. The point fit's
// sigmas moved by up to 6e-9 relative. Outputs must stay bit-identical, so
// the elimination stays written out here.
func solveLinear(m [][]float64, tiny float64) ([]float64, bool) {
	n := len(m)
	for col := 0; col < n; col++ {
		p := col
		for r := col + 1; r < n; r++ {
			if math.Abs(m[r][col]) > math.Abs(m[p][col]) {
				p = r
			}
		}
		if math.Abs(m[p][col]) < tiny {
			return nil, false
		}
		m[col], m[p] = m[p], m[col]
		for r := col + 1; r < n; r++ {
			f := m[r][col] / m[col][col]
			for k := col; k <= n; k++ {
				m[r][k] -= f * m[col][k]
			}
		}
	}
	x := make([]float64, n)
	for r := n - 1; r >= 0; r-- {
		s := m[r][n]
		for k := r + 1; k < n; k++ {
			s -= m[r][k] * x[k]
		}
		x[r] = s / m[r][r]
	}
	return x, true
}

// augmented returns an n x (n+1) zero matrix for solveLinear.
func augmented(n int) [][]float64 {
	m := make([][]float64, n)
	for i := range m {
		m[i] = make([]float64, n+1)
	}
	return m
}

// golden minimises a unimodal function on [a, b] (golden-section search,
// Kiefer, "Sequential minimax search for a maximum", Proc. AMS 4:502, 1953),
// after a coarse logarithmic scan of 60 steps that brackets the minimum.
//
// Why not gonum: gonum v0.17 optimize has no bounded one-dimensional
// minimiser (its line searches need a gradient); Nelder-Mead started from
// the scan's best point was measured in its place and moved the fitted
// sigmas by up to 1e-8 relative (JSON summaries of psf measure --auto), so
// the search stays written out here.
func golden(f func(float64) float64, a, b float64) float64 {
	// coarse logarithmic scan
	best, bx := math.Inf(1), a
	const steps = 60
	for i := 0; i <= steps; i++ {
		x := a * math.Pow(b/a, float64(i)/steps)
		if v := f(x); v < best {
			best, bx = v, x
		}
	}
	r := math.Pow(b/a, 1.0/steps)
	lo, hi := math.Max(a, bx/r), math.Min(b, bx*r)
	g := (math.Sqrt(5) - 1) / 2
	x1, x2 := hi-g*(hi-lo), lo+g*(hi-lo)
	f1, f2 := f(x1), f(x2)
	for i := 0; i < 100 && hi-lo > 1e-10*hi; i++ {
		if f1 < f2 {
			hi, x2, f2 = x2, x1, f1
			x1 = hi - g*(hi-lo)
			f1 = f(x1)
		} else {
			lo, x1, f1 = x1, x2, f2
			x2 = lo + g*(hi-lo)
			f2 = f(x2)
		}
	}
	return 0.5 * (lo + hi)
}
