package conv

import "math"

// A float32 complex FFT of our own for the large-kernel convolution path.
//
// Algorithm: the Stockham autosort FFT, decimation in frequency, mixed radix
// 4, 2, 3, 5 (Stockham, "High-speed convolution and correlation", AFIPS
// 1966; the formulation follows Van Loan, "Computational Frameworks for the
// Fast Fourier Transform", SIAM 1992, the Stockham autosort framework;
// references recalled from memory). A stage of radix r on a
// sub-length L = r m with stride s maps
//
//	y[q + s (r p + k)] = w_L^(p k) sum_j x[q + s (p + j m)] w_r^(j k)
//
// for p < m, q < s, k < r, with w_L = exp(-2 pi i / L) (forward); the next
// stage has L = m and stride r s. No bit reversal is needed.
//
// Every transform here is batched: nb interleaved vectors, element i of
// vector b at x[i nb + b], so the innermost loop of a stage runs over s nb
// contiguous values. The 2-D convolution gathers blocks of nb rows
// (transposed) or nb columns into such a batch that stays in cache.

// plan32 is a complex64 DFT plan for one length n = 2^a 3^b 5^c.
type plan32 struct {
	n      int
	stages []stage32
}

type stage32 struct {
	r, m, s int
	// tw[p (r-1) + k-1] = w_L^(p k), forward (twi: inverse, conjugate).
	tw, twi []complex64
}

// Smooth235 reports whether n's only prime factors are 2, 3 and 5: the
// lengths the FFT here transforms (and the DCT's fast route takes).
func Smooth235(n int) bool {
	if n < 1 {
		return false
	}
	for _, f := range []int{2, 3, 5} {
		for n%f == 0 {
			n /= f
		}
	}
	return n == 1
}

// newPlan32 builds the plan for n (n must be 2^a 3^b 5^c, n >= 1).
func newPlan32(n int) *plan32 {
	if !Smooth235(n) {
		panic("conv: FFT length not 2,3,5-smooth")
	}
	p := &plan32{n: n}
	L, s := n, 1
	for L > 1 {
		var r int
		switch {
		case L%4 == 0:
			r = 4
		case L%2 == 0:
			r = 2
		case L%3 == 0:
			r = 3
		default:
			r = 5
		}
		m := L / r
		st := stage32{r: r, m: m, s: s, tw: make([]complex64, m*(r-1)), twi: make([]complex64, m*(r-1))}
		for q := 0; q < m; q++ {
			for k := 1; k < r; k++ {
				// Twiddles in float64, rounded once to float32.
				a := -2 * math.Pi * float64(q*k) / float64(L)
				c, sn := math.Cos(a), math.Sin(a)
				st.tw[q*(r-1)+k-1] = complex(float32(c), float32(sn))
				st.twi[q*(r-1)+k-1] = complex(float32(c), float32(-sn))
			}
		}
		p.stages = append(p.stages, st)
		L, s = m, s*r
	}
	return p
}

// transform applies the unnormalised DFT (inverse: conjugate exponent) to
// nb interleaved vectors held in x (len n nb); y is scratch of the same
// length. It returns the slice (x or y) that holds the result.
func (p *plan32) transform(x, y []complex64, nb int, inverse bool) []complex64 {
	x, y = x[:p.n*nb], y[:p.n*nb]
	for i := range p.stages {
		st := &p.stages[i]
		tw := st.tw
		if inverse {
			tw = st.twi
		}
		switch st.r {
		case 4:
			stage4(x, y, st.m, st.s*nb, tw, inverse)
		case 2:
			stage2(x, y, st.m, st.s*nb, tw)
		case 3:
			stage3(x, y, st.m, st.s*nb, tw, inverse)
		default:
			stage5(x, y, st.m, st.s*nb, tw, inverse)
		}
		x, y = y, x
	}
	return x
}

// stage2: radix 2, sb = s nb contiguous values per element.
func stage2(x, y []complex64, m, sb int, tw []complex64) {
	if useAVX && sb%4 == 0 {
		_, _ = x[2*m*sb-1], y[2*m*sb-1] // the assembly's extent
		for p := 0; p < m; p++ {
			stage2AVX(&x[p*sb], m*sb*8, &y[2*p*sb], sb, &tw[p])
		}
		return
	}
	for p := 0; p < m; p++ {
		a0 := x[p*sb : p*sb+sb]
		a1 := x[(p+m)*sb : (p+m)*sb+sb]
		b0 := y[2*p*sb : 2*p*sb+sb]
		b1 := y[(2*p+1)*sb : (2*p+1)*sb+sb]
		w := tw[p]
		if p == 0 {
			for i := range b0 {
				u, v := a0[i], a1[i]
				b0[i] = u + v
				b1[i] = u - v
			}
			continue
		}
		for i := range b0 {
			u, v := a0[i], a1[i]
			b0[i] = u + v
			b1[i] = cmul(u-v, w)
		}
	}
}

// cmul multiplies without the special cases of Go's complex product (none
// are needed for finite values). The float32 conversions round each product
// (the Go spec lets a compiler fuse x*y+z otherwise, as arm64's does), so
// the portable butterflies give the same bits as the AVX ones.
func cmul(a, b complex64) complex64 {
	ar, ai, br, bi := real(a), imag(a), real(b), imag(b)
	return complex(float32(ar*br)-float32(ai*bi), float32(ar*bi)+float32(ai*br))
}

// scale multiplies by a real factor, each product rounded (see cmul).
func scale(a complex64, f float32) complex64 {
	return complex(float32(f*real(a)), float32(f*imag(a)))
}

var (
	signNone = [8]uint32{}
	signAll  = [8]uint32{1 << 31, 1 << 31, 1 << 31, 1 << 31, 1 << 31, 1 << 31, 1 << 31, 1 << 31}
)

// cmulSlice sets b[i] *= k[i], or *= conj(k[i]) with conj (len(k) >= len(b)).
func cmulSlice(b, k []complex64, conj bool) {
	k = k[:len(b)]
	n := 0
	if useAVX {
		n = len(b) &^ 3
		if n > 0 {
			neg := &signNone
			if conj {
				neg = &signAll
			}
			cmulAVX(&b[0], &k[0], n, neg)
		}
	}
	for i := n; i < len(b); i++ {
		kv := k[i]
		if conj {
			kv = complex(real(kv), -imag(kv))
		}
		b[i] = cmul(b[i], kv)
	}
}

// mulI returns i a (inverse) or -i a (forward).
func mulI(a complex64, inverse bool) complex64 {
	if inverse {
		return complex(-imag(a), real(a))
	}
	return complex(imag(a), -real(a))
}

// Sign masks of stage4AVX: after swapping (re, im), negate the imaginary
// lanes (forward: -i a) or the real lanes (inverse: +i a).
var (
	maskFwd = [8]uint32{0, 1 << 31, 0, 1 << 31, 0, 1 << 31, 0, 1 << 31}
	maskInv = [8]uint32{1 << 31, 0, 1 << 31, 0, 1 << 31, 0, 1 << 31, 0}
)

func stage4(x, y []complex64, m, sb int, tw []complex64, inverse bool) {
	if useAVX && sb%4 == 0 {
		_, _ = x[4*m*sb-1], y[4*m*sb-1] // the assembly's extent
		mask := &maskFwd
		if inverse {
			mask = &maskInv
		}
		for p := 0; p < m; p++ {
			stage4AVX(&x[p*sb], m*sb*8, &y[4*p*sb], sb, &tw[3*p], mask)
		}
		return
	}
	for p := 0; p < m; p++ {
		a0 := x[p*sb : p*sb+sb]
		a1 := x[(p+m)*sb : (p+m)*sb+sb]
		a2 := x[(p+2*m)*sb : (p+2*m)*sb+sb]
		a3 := x[(p+3*m)*sb : (p+3*m)*sb+sb]
		o := 4 * p * sb
		b0 := y[o : o+sb]
		b1 := y[o+sb : o+2*sb]
		b2 := y[o+2*sb : o+3*sb]
		b3 := y[o+3*sb : o+4*sb]
		w1, w2, w3 := tw[3*p], tw[3*p+1], tw[3*p+2]
		if p == 0 {
			for i := range b0 {
				t0, t1 := a0[i]+a2[i], a0[i]-a2[i]
				t2, t3 := a1[i]+a3[i], mulI(a1[i]-a3[i], inverse)
				b0[i] = t0 + t2
				b1[i] = t1 + t3
				b2[i] = t0 - t2
				b3[i] = t1 - t3
			}
			continue
		}
		for i := range b0 {
			t0, t1 := a0[i]+a2[i], a0[i]-a2[i]
			t2, t3 := a1[i]+a3[i], mulI(a1[i]-a3[i], inverse)
			b0[i] = t0 + t2
			b1[i] = cmul(t1+t3, w1)
			b2[i] = cmul(t0-t2, w2)
			b3[i] = cmul(t1-t3, w3)
		}
	}
}

func stage3(x, y []complex64, m, sb int, tw []complex64, inverse bool) {
	const h = 0.86602540378443864676 // sqrt(3)/2
	if useAVX && sb%4 == 0 {
		_, _ = x[3*m*sb-1], y[3*m*sb-1] // the assembly's extent
		mask, c := &maskFwd, &[4]float32{0.5, h}
		if inverse {
			mask = &maskInv
		}
		for p := 0; p < m; p++ {
			stage3AVX(&x[p*sb], m*sb*8, &y[3*p*sb], sb, &tw[2*p], mask, c)
		}
		return
	}
	for p := 0; p < m; p++ {
		a0 := x[p*sb : p*sb+sb]
		a1 := x[(p+m)*sb : (p+m)*sb+sb]
		a2 := x[(p+2*m)*sb : (p+2*m)*sb+sb]
		o := 3 * p * sb
		b0 := y[o : o+sb]
		b1 := y[o+sb : o+2*sb]
		b2 := y[o+2*sb : o+3*sb]
		w1, w2 := tw[2*p], tw[2*p+1]
		for i := range b0 {
			t := a1[i] + a2[i]
			c := a0[i] - scale(t, 0.5)
			d := a1[i] - a2[i]
			u := mulI(scale(d, h), inverse)
			b0[i] = a0[i] + t
			b1[i] = cmul(c+u, w1)
			b2[i] = cmul(c-u, w2)
		}
	}
}

func stage5(x, y []complex64, m, sb int, tw []complex64, inverse bool) {
	// w_5^k for k = 1, 2 (cos and sin in float64, rounded once).
	c1, c2 := float32(math.Cos(2*math.Pi/5)), float32(math.Cos(4*math.Pi/5))
	s1, s2 := float32(math.Sin(2*math.Pi/5)), float32(math.Sin(4*math.Pi/5))
	if useAVX && sb%4 == 0 {
		_, _ = x[5*m*sb-1], y[5*m*sb-1] // the assembly's extent
		mask, c := &maskFwd, &[4]float32{c1, c2, s1, s2}
		if inverse {
			mask = &maskInv
		}
		for p := 0; p < m; p++ {
			stage5AVX(&x[p*sb], m*sb*8, &y[5*p*sb], sb, &tw[4*p], mask, c)
		}
		return
	}
	for p := 0; p < m; p++ {
		a0 := x[p*sb : p*sb+sb]
		a1 := x[(p+m)*sb : (p+m)*sb+sb]
		a2 := x[(p+2*m)*sb : (p+2*m)*sb+sb]
		a3 := x[(p+3*m)*sb : (p+3*m)*sb+sb]
		a4 := x[(p+4*m)*sb : (p+4*m)*sb+sb]
		o := 5 * p * sb
		b0 := y[o : o+sb]
		b1 := y[o+sb : o+2*sb]
		b2 := y[o+2*sb : o+3*sb]
		b3 := y[o+3*sb : o+4*sb]
		b4 := y[o+4*sb : o+5*sb]
		w1, w2, w3, w4 := tw[4*p], tw[4*p+1], tw[4*p+2], tw[4*p+3]
		for i := range b0 {
			// b_k = a0 + (a1 + a4) cos(2 pi k/5) + (a2 + a3) cos(4 pi k/5)
			//       -/+ i [(a1 - a4) sin(2 pi k/5) + (a2 - a3) sin(4 pi k/5)]
			s14, d14 := a1[i]+a4[i], a1[i]-a4[i]
			s23, d23 := a2[i]+a3[i], a2[i]-a3[i]
			// Same operations and order as stage5AVX: products rounded
			// (see cmul), then summed left to right.
			r1 := (scale(s14, c1) + scale(s23, c2)) + a0[i]
			r2 := (scale(s14, c2) + scale(s23, c1)) + a0[i]
			// k = 2: sin(8 pi/5) = -sin(2 pi/5), sin(6 pi/5) = -sin(4 pi/5).
			i1 := mulI(scale(d14, s1)+scale(d23, s2), inverse)
			i2 := mulI(scale(d14, s2)-scale(d23, s1), inverse)
			b0[i] = a0[i] + s14 + s23
			b1[i] = cmul(r1+i1, w1)
			b4[i] = cmul(r1-i1, w4)
			b2[i] = cmul(r2+i2, w2)
			b3[i] = cmul(r2-i2, w3)
		}
	}
}

// transposeC sets dst[c*ds + r] = src[r*ss + c] for r < rows, c < cols.
func transposeC(dst []complex64, ds int, src []complex64, ss int, rows, cols int) {
	if rows == 0 || cols == 0 {
		return
	}
	_, _ = dst[(cols-1)*ds+rows-1], src[(rows-1)*ss+cols-1] // the extent
	if useAVX && rows%4 == 0 && cols%4 == 0 {
		transposeAVX(&dst[0], ds, &src[0], ss, rows, cols)
		return
	}
	for r := 0; r < rows; r++ {
		row := src[r*ss : r*ss+cols]
		for c, v := range row {
			dst[c*ds+r] = v
		}
	}
}
