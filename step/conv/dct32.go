package conv

import "math"

// dct32 is the orthonormal 2-D DCT-II of a w x h float32 plane through the
// batched float32 FFT (plan32), for 2,3,5-smooth w and h: the risk
// estimate's per-iteration transform (DCT2.Energy).
//
// One axis at a time, every line of the plane at once (Makhoul, "A fast
// cosine transform in one and two dimensions", IEEE TASSP 28(1):27-34,
// 1980): reorder each line as v[n] = x[2n], v[N-1-n] = x[2n+1]; then the
// unnormalised DCT-II is X[k] = Re(exp(-i pi k / 2N) V[k]) with V the
// N-point DFT of v. Two real lines go through one complex transform (line
// b as the real part, line b + nb as the imaginary part) and are separated
// by V1[k] = (Z[k] + conj Z[N-k]) / 2, V2[k] = (Z[k] - conj Z[N-k]) / 2i
// (the two-for-one real FFT; Press et al., Numerical Recipes, 3rd ed.,
// section 12.3). The y axis runs on the plane as it is (element n of line
// b at n w + b, the batch layout of plan32), the x axis on its transpose.
type dct32 struct {
	w, h   int
	px, py *plan32
	// cx[k] = a_k cos(pi k / 2N), sx[k] = a_k sin(pi k / 2N) per axis,
	// with the orthonormal scales a_k folded in.
	cx, sx, cy, sy []float32
	z, zs          []complex64 // transform buffer and scratch
	t              []float32   // the transposed plane
}

func newDCT32(w, h int) *dct32 {
	d := &dct32{w: w, h: h, px: newPlan32(w), py: newPlan32(h)}
	d.cx, d.sx = makhoulTwiddles(w)
	d.cy, d.sy = makhoulTwiddles(h)
	n := max(w, h) * (max(w, h)/2 + 1)
	d.z, d.zs = make([]complex64, n), make([]complex64, n)
	d.t = make([]float32, w*h)
	return d
}

// makhoulTwiddles returns a_k cos(pi k / 2n) and a_k sin(pi k / 2n), a_k
// the orthonormal DCT-II scale (sqrt(1/n) for k = 0, sqrt(2/n) otherwise),
// computed in float64 and rounded once.
func makhoulTwiddles(n int) (c, s []float32) {
	c, s = make([]float32, n), make([]float32, n)
	for k := range c {
		a := math.Sqrt(2 / float64(n))
		if k == 0 {
			a = math.Sqrt(1 / float64(n))
		}
		th := math.Pi * float64(k) / float64(2*n)
		c[k], s[k] = float32(a*math.Cos(th)), float32(a*math.Sin(th))
	}
	return c, s
}

// forward sets dst (w x h, row-major) to the orthonormal DCT-II of src.
// dst may be src.
func (d *dct32) forward(dst, src []float32) {
	w, h := d.w, d.h
	// Along y on the plane, then along x on the transpose, then back.
	d.lines(d.t, src, w, h, d.py, d.cy, d.sy)
	transpose32(dst, d.t, w, h)
	d.lines(d.t, dst, h, w, d.px, d.cx, d.sx)
	transpose32(dst, d.t, h, w)
}

// lines sets dst to the DCT-II along the n-point axis of the lines of src:
// element j of line b at src[j nl + b], nl lines (dst may not be src).
func (d *dct32) lines(dst, src []float32, nl, n int, p *plan32, c, s []float32) {
	nb := (nl + 1) / 2 // complex lines: b and b + nb packed
	z := d.z[:n*nb]
	for j := 0; j < n; j++ {
		// Makhoul's reordering: x[j] goes to v[j/2] (j even) or
		// v[n-1-(j-1)/2] (j odd).
		m := j / 2
		if j%2 == 1 {
			m = n - 1 - (j-1)/2
		}
		row := src[j*nl : (j+1)*nl]
		zr := z[m*nb : (m+1)*nb]
		for b := range zr {
			var im float32
			if b+nb < nl {
				im = row[b+nb]
			}
			zr[b] = complex(row[b], im)
		}
	}
	z = p.transform(z, d.zs[:n*nb], nb, false)
	for k := 0; k < n; k++ {
		zk := z[k*nb : (k+1)*nb]
		zm := z[((n-k)%n)*nb : ((n-k)%n+1)*nb]
		out := dst[k*nl : (k+1)*nl]
		ck, sk := c[k], s[k]
		for b := range zk {
			a, r := zk[b], zm[b]
			// V1 = (Z[k] + conj Z[n-k]) / 2; X1 = Re(exp(-i th) V1) scaled.
			v1r, v1i := (real(a)+real(r))/2, (imag(a)-imag(r))/2
			out[b] = ck*v1r + sk*v1i
			if b+nb < nl {
				// V2 = (Z[k] - conj Z[n-k]) / 2i.
				v2r, v2i := (imag(a)+imag(r))/2, (real(r)-real(a))/2
				out[b+nb] = ck*v2r + sk*v2i
			}
		}
	}
}

// transpose32 sets dst (h x w becomes w x h: dst[x h + y] = src[y w + x])
// in cache blocks.
func transpose32(dst, src []float32, w, h int) {
	const blk = 32
	for y0 := 0; y0 < h; y0 += blk {
		y1 := min(y0+blk, h)
		for x0 := 0; x0 < w; x0 += blk {
			x1 := min(x0+blk, w)
			for y := y0; y < y1; y++ {
				row := src[y*w : y*w+x1]
				for x := x0; x < x1; x++ {
					dst[x*h+y] = row[x]
				}
			}
		}
	}
}
