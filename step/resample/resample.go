package resample

import (
	"fmt"
	"math"
	"math/rand/v2"
)

// Scheme is a resampling scheme of a particle method. Each draws N
// offspring from N weighted particles so that the expected number of copies
// of particle i is N W_i / sum(W) (unbiased); they differ in variance:
//
//   - Multinomial: N independent draws from the weights (the reference
//     scheme; highest variance).
//   - Stratified (Kitagawa, JCGS 5:1, 1996): one uniform in each of the N
//     strata [j/N, (j+1)/N); provably consistent.
//   - Systematic: one uniform shared by all strata, u_j = (j + U)/N; the
//     lowest cost, but it can fail to be consistent for adversarial particle
//     orders (Douc, Cappé & Moulines, ISPA 2005).
//   - Residual (Liu & Chen, JASA 93:1032, 1998): floor(N W_i) copies kept,
//     the remainder drawn multinomially from the residual weights.
type Scheme int

const (
	Stratified Scheme = iota
	Systematic
	Residual
	Multinomial
)

var schemeNames = [...]string{"stratified", "systematic", "residual", "multinomial"}

func (r Scheme) String() string {
	if r < 0 || int(r) >= len(schemeNames) {
		return fmt.Sprintf("Scheme(%d)", int(r))
	}
	return schemeNames[r]
}

// Parse maps a name to a scheme.
func Parse(s string) (Scheme, error) {
	for i, n := range schemeNames {
		if s == n {
			return Scheme(i), nil
		}
	}
	return 0, fmt.Errorf("%q: use stratified, systematic, residual or multinomial", s)
}

// ESS is the effective sample size (sum w)^2 / sum w^2 of unnormalised
// weights (Kong, Liu & Wong, JASA 89:278, 1994).
func ESS(w []float32) float64 {
	var s, s2 float64
	for _, v := range w {
		s += float64(v)
		s2 += float64(v) * float64(v)
	}
	if s2 == 0 {
		return 0
	}
	return s * s / s2
}

// Uniform is a uniform float64 in [0, 1) from 53 random bits.
func Uniform(r *rand.PCG) float64 { return float64(r.Uint64()>>11) * 0x1p-53 }

// exp1 is a standard exponential variate (inversion; 1 - U avoids log 0).
func exp1(r *rand.PCG) float64 { return -math.Log(1 - Uniform(r)) }

// Counts fills cnt[i] (len(w)) with the number of offspring of particle i
// under scheme s for n offspring in total and unnormalised weights w with
// sum wsum > 0. scratch (len >= len(w)) is used by Residual. It allocates
// nothing.
func (s Scheme) Counts(cnt []uint32, w []float32, wsum float64, n int, scratch []float32, r *rand.PCG) {
	cnt = cnt[:len(w)]
	switch s {
	case Stratified, Systematic:
		// Merge the sorted points u_j = (j + U_j)/n with the running CDF.
		step := wsum / float64(n)
		u0 := Uniform(r)
		j := 0
		next := u0 * step
		var cum float64
		for i, v := range w {
			cum += float64(v)
			c := uint32(0)
			for j < n && next < cum {
				c++
				j++
				if s == Stratified {
					next = (float64(j) + Uniform(r)) * step
				} else {
					next = (float64(j) + u0) * step
				}
			}
			cnt[i] = c
		}
		// Rounding in cum can leave the last points unassigned: give them to
		// the last particle with positive weight.
		if j < n {
			for i := len(w) - 1; i >= 0; i-- {
				if w[i] > 0 {
					cnt[i] += uint32(n - j)
					break
				}
			}
		}
	case Multinomial:
		sortedUniformCounts(cnt, w, wsum, n, r)
	case Residual:
		scale := float64(n) / wsum
		res := scratch[:len(w)]
		kept := 0
		var rsum float64
		for i, v := range w {
			x := float64(v) * scale
			f := math.Floor(x)
			cnt[i] = uint32(f)
			kept += int(f)
			res[i] = float32(x - f)
			rsum += float64(res[i])
		}
		rest := n - kept
		if rest <= 0 || rsum <= 0 {
			// Rounding: fix the total on the largest particle.
			fixTotal(cnt, w, n)
			return
		}
		// Multinomial on the residuals, added to the kept copies.
		addSortedUniformCounts(cnt, res, rsum, rest, r)
	}
}

// fixTotal makes sum(cnt) == n by adjusting the heaviest particle (only
// float rounding can make it necessary).
func fixTotal(cnt []uint32, w []float32, n int) {
	total := 0
	best := 0
	for i, c := range cnt {
		total += int(c)
		if w[i] > w[best] {
			best = i
		}
	}
	d := n - total
	if d > 0 || int(cnt[best]) >= -d {
		cnt[best] = uint32(int(cnt[best]) + d)
	}
}

func sortedUniformCounts(cnt []uint32, w []float32, wsum float64, n int, r *rand.PCG) {
	for i := range cnt {
		cnt[i] = 0
	}
	addSortedUniformCounts(cnt, w, wsum, n, r)
}

// addSortedUniformCounts adds n multinomial draws from w to cnt in O(len(w)
// + n): the sorted uniforms are the normalised partial sums of n+1
// exponentials (Devroye, Non-Uniform Random Variate Generation, 1986,
// ch. V.3). The total is needed first, so the exponentials are drawn twice
// from a copy of the generator state.
func addSortedUniformCounts(cnt []uint32, w []float32, wsum float64, n int, r *rand.PCG) {
	saved := *r
	var total float64
	for j := 0; j <= n; j++ {
		total += exp1(r)
	}
	after := *r
	*r = saved
	scale := wsum / total
	j := 0
	var acc float64
	acc = exp1(r) * scale
	var cum float64
	for i, v := range w {
		cum += float64(v)
		for j < n && acc < cum {
			cnt[i]++
			j++
			if j < n {
				acc += exp1(r) * scale
			}
		}
	}
	if j < n {
		for i := len(w) - 1; i >= 0; i-- {
			if w[i] > 0 {
				cnt[i] += uint32(n - j)
				break
			}
		}
	}
	*r = after
}

// Merge writes the stratified (or systematic) offspring of (x, y, w)
// into (x2, y2) in one pass: the same points, the same random numbers and
// the same offspring as Counts followed by copying, without the counts.
func Merge(x2, y2, x, y, w []float32, wsum float64, stratified bool, r *rand.PCG) {
	n := len(x2)
	step := wsum / float64(n)
	u0 := Uniform(r)
	j := 0
	next := u0 * step
	var cum float64
	y, w = y[:len(x)], w[:len(x)]
	for i, xi := range x {
		cum += float64(w[i])
		if next >= cum {
			continue
		}
		yi := y[i]
		for j < n && next < cum {
			x2[j], y2[j] = xi, yi
			j++
			if stratified {
				next = (float64(j) + Uniform(r)) * step
			} else {
				next = (float64(j) + u0) * step
			}
		}
	}
	if j < n {
		for i := len(w) - 1; i >= 0; i-- {
			if w[i] > 0 {
				for ; j < n; j++ {
					x2[j], y2[j] = x[i], y[i]
				}
				break
			}
		}
	}
}

// Valid reports whether s is one of the schemes.
func (s Scheme) Valid() bool { return s >= 0 && int(s) < len(schemeNames) }
