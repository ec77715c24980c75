package vec

import (
	"math"
	"math/rand/v2"
	"testing"
)

// corrTol bounds |vector - portable| relative to sum_t |k_t x_t|: the vector
// path rounds once per fused multiply-add where the portable one rounds
// the product and the sum, so each of the n terms may differ by about one
// float32 ulp (2^-24 relative) of the running sum (Higham, Accuracy and
// Stability of Numerical Algorithms, 2nd ed., 2002, section 3.1: recursive
// summation error <= n u sum|x_i|). 4 ulps per tap leaves a margin for the
// final add into dst.
func corrTol(taps int) float64 { return 4 * float64(taps+1) * 0x1p-24 }

// corrRef is the definition in float64, and the magnitude sum|k x| that
// scales the tolerance.
func corrRef(dst, src []float32, offs []int, k []float32, add bool) (want, mag []float64) {
	kw := len(k) / max(len(offs), 1)
	want, mag = make([]float64, len(dst)), make([]float64, len(dst))
	for i := range dst {
		var s, a float64
		for r, o := range offs {
			for c := 0; c < kw; c++ {
				p := float64(k[r*kw+c]) * float64(src[o+i+c])
				s += p
				a += math.Abs(p)
			}
		}
		if add {
			a += math.Abs(float64(dst[i]))
			s += float64(dst[i])
		}
		want[i], mag[i] = s, a
	}
	return want, mag
}

// corrLengths: 0..70, then lengths mixing the 64-, 32- and 8-lane blocks
// (96 = 64+32, 103 = 64+32+7, 171 = 2*64+32+8+3).
func corrLengths() []int {
	var ns []int
	for n := 0; n <= 70; n++ {
		ns = append(ns, n)
	}
	return append(ns, 96, 103, 171)
}

func randSlice(r *rand.Rand, n int) []float32 {
	s := make([]float32, n)
	for i := range s {
		s[i] = 2*r.Float32() - 1
	}
	return s
}

// bothPaths runs fn with the portable path forced and, when the CPU has the
// vector kernels, with them.
func bothPaths(t *testing.T, fn func(t *testing.T)) {
	t.Helper()
	t.Cleanup(func() { SetPortable(false) })
	SetPortable(true)
	t.Run("portable", fn)
	SetPortable(false)
	if !Accelerated() {
		t.Log("no AVX2+FMA: vector path not tested")
		return
	}
	t.Run("vector", fn)
}

// Source: definition of correlation (the sum in the doc comment of Corr),
// evaluated in float64; lengths 0..70 and 96, 103, 171 cover the 64-, 32-
// and 8-lane blocks in every combination and every tail, slices start at odd offsets (unaligned), shapes cover one row
// (row pass), one tap per row (column pass) and 2-D kernels.
func TestCorrMatchesDefinition(t *testing.T) {
	bothPaths(t, func(t *testing.T) {
		r := rand.New(rand.NewPCG(7, 8))
		shapes := [][2]int{{1, 1}, {1, 3}, {1, 13}, {1, 81}, {3, 1}, {13, 1}, {5, 3}, {9, 9}, {40, 1}}
		for _, sh := range shapes {
			rows, kw := sh[0], sh[1]
			k := randSlice(r, rows*kw)
			for _, n := range corrLengths() {
				for _, add := range []bool{false, true} {
					rowLen := n + kw - 1 + 3
					buf := randSlice(r, rows*rowLen+5)
					src := buf[1:] // unaligned start
					offs := make([]int, rows)
					for i := range offs {
						offs[i] = r.IntN(len(src) - (n + kw - 1) + 1)
					}
					dbuf := randSlice(r, n+3)
					dst := dbuf[3 : 3+n]
					want, mag := corrRef(dst, src, offs, k, add)
					Corr(dst, src, offs, k, add)
					tol := corrTol(rows * kw)
					for i := range dst {
						if d := math.Abs(float64(dst[i]) - want[i]); d > tol*mag[i] {
							t.Fatalf("rows %d kw %d n %d add %v: dst[%d] = %g, definition %g (|diff| %g > %g)",
								rows, kw, n, add, i, dst[i], want[i], d, tol*mag[i])
						}
					}
				}
			}
		}
	})
}

// TestCorrVectorMatchesPortable compares both paths directly on the same
// inputs (within corrTol: fused multiply-add rounding). Source: Higham,
// Accuracy and Stability of Numerical Algorithms, 2nd ed., 2002, section
// 4.2 (the error bound of a reordered sum, as corrTol states).
func TestCorrVectorMatchesPortable(t *testing.T) {
	if !hasAccel {
		t.Skip("no AVX2+FMA on this CPU")
	}
	defer SetPortable(false)
	r := rand.New(rand.NewPCG(9, 10))
	for _, sh := range [][2]int{{1, 13}, {13, 1}, {7, 7}} {
		rows, kw := sh[0], sh[1]
		k := randSlice(r, rows*kw)
		for _, n := range corrLengths()[1:] {
			src := randSlice(r, rows*(n+kw))
			offs := make([]int, rows)
			for i := range offs {
				offs[i] = i * (n + kw)
			}
			a, b := make([]float32, n), make([]float32, n)
			SetPortable(true)
			Corr(a, src, offs, k, false)
			SetPortable(false)
			Corr(b, src, offs, k, false)
			_, mag := corrRef(a, src, offs, k, false)
			for i := range a {
				if d := math.Abs(float64(a[i]) - float64(b[i])); d > corrTol(rows*kw)*mag[i] {
					t.Fatalf("rows %d kw %d n %d: portable %g vector %g", rows, kw, n, a[i], b[i])
				}
			}
		}
	}
}

// Source: Go's slice bounds rules (https://go.dev/ref/spec#Index_expressions):
// a read outside src must panic, never read memory beyond it.
func TestCorrPanicsOutOfRange(t *testing.T) {
	for name, call := range map[string]func(){
		"row past end":   func() { Corr(make([]float32, 8), make([]float32, 10), []int{3}, []float32{1, 1}, false) },
		"negative row":   func() { Corr(make([]float32, 8), make([]float32, 20), []int{-1}, []float32{1}, false) },
		"ragged kernel":  func() { Corr(make([]float32, 8), make([]float32, 20), []int{0, 1}, []float32{1, 1, 1}, false) },
		"taps, no rows ": func() { Corr(make([]float32, 8), make([]float32, 20), nil, []float32{1}, false) },
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s: no panic", name)
				}
			}()
			call()
		}()
	}
}

// elementwise inputs: denominators and sensitivities around the thresholds
// (negative, zero, tiny, the floor itself), masks with zeros and NaN.
func elemInputs(r *rand.Rand, n int) (a, b, c, m []float32) {
	a, b, c, m = randSlice(r, n), randSlice(r, n), randSlice(r, n), randSlice(r, n)
	special := []float32{0, -0.5, 1e-7, 1e-6, float32(math.Copysign(0, -1)), 2}
	for i := range a {
		if r.IntN(3) == 0 {
			a[i] = special[r.IntN(len(special))]
		}
		switch r.IntN(4) {
		case 0:
			m[i] = 0
		case 1:
			m[i] = float32(math.NaN())
		}
	}
	return a, b, c, m
}

// The elementwise kernels perform the same IEEE-754 operations (correctly
// rounded add, multiply, divide; IEEE 754-2008 section 5.4.1) in the same
// order on both paths, so they must agree bit for bit.
func sameBits(t *testing.T, what string, n int, a, b []float32) {
	t.Helper()
	for i := range a {
		if math.Float32bits(a[i]) != math.Float32bits(b[i]) {
			t.Fatalf("%s n %d: element %d portable %g vector %g", what, n, i, a[i], b[i])
		}
	}
}

// Source: IEEE 754-2008 section 5.4.1 (each operation correctly rounded),
// so identical operation sequences give identical bits.
func TestElementwiseVectorMatchesPortable(t *testing.T) {
	if !hasAccel {
		t.Skip("no AVX2+FMA on this CPU")
	}
	defer SetPortable(false)
	r := rand.New(rand.NewPCG(11, 12))
	const floor = 1e-6
	for n := 0; n <= 70; n++ {
		hf, d, delta, m := elemInputs(r, n+1)
		hf, d, delta, m = hf[1:], d[1:], delta[1:], m[1:] // unaligned
		hu := randSlice(r, n)
		var out [2][4][]float32
		for p, portable := range []bool{true, false} {
			SetPortable(portable)
			o := &out[p]
			for j := range o {
				o[j] = make([]float32, n)
			}
			Ratio(o[0], hf, d, m, 0.25)
			RatioJVP(o[1], o[2], hf, d, m, delta, hu, 0.25)
			Update(o[3], d, delta, hf, floor)
		}
		sameBits(t, "Ratio", n, out[0][0], out[1][0])
		sameBits(t, "RatioJVP q", n, out[0][1], out[1][1])
		sameBits(t, "RatioJVP dq", n, out[0][2], out[1][2])
		sameBits(t, "Update", n, out[0][3], out[1][3])
		for p, portable := range []bool{true, false} {
			SetPortable(portable)
			out[p][0] = make([]float32, n)
			out[p][1] = make([]float32, n)
			UpdateJVP(out[p][0], out[p][1], d, delta, hu, m, hf, floor)
		}
		sameBits(t, "UpdateJVP e", n, out[0][0], out[1][0])
		sameBits(t, "UpdateJVP ue", n, out[0][1], out[1][1])
	}
}

// Source: the formulas in the doc comments (EMS data ratio and update,
// Silverman et al., JRSS-B 52:271, 1990), on hand-picked cases covering
// each branch; exact because each is one or two correctly rounded
// operations on exactly representable values.
func TestElementwiseCases(t *testing.T) {
	bothPaths(t, func(t *testing.T) {
		// 9 elements: one vector block and a scalar tail.
		hf := []float32{1, -1, 3, 0, 1, 1, 1, 1, 3}
		d := []float32{2, 2, 6, 5, 4, 4, 4, 4, 6}
		m := []float32{1, 1, 1, 1, 0, 1, 1, 1, 1}
		q := make([]float32, 9)
		Ratio(q, hf, d, m, 1)
		want := []float32{1, 0, 1.5, 5, 0, 2, 2, 2, 1.5}
		for i := range q {
			if q[i] != want[i] {
				t.Fatalf("Ratio[%d] = %g, want %g", i, q[i], want[i])
			}
		}
		s := []float32{2, 0, 4, 1e-7, 1, 0.5, 2, 2, 4}
		e := make([]float32, 9)
		Update(e, d, hf, s, 1e-6)
		wantE := []float32{1, 2, 4.5, 5, 4, 8, 2, 2, 4.5}
		for i := range e {
			if e[i] != wantE[i] {
				t.Fatalf("Update[%d] = %g, want %g", i, e[i], wantE[i])
			}
		}
	})
}

// Corr allocates nothing per call. Source: project requirement (hot loops
// allocate nothing), measured with Go's testing.AllocsPerRun.
func TestCorrAllocates(t *testing.T) {
	src := make([]float32, 4096)
	dst := make([]float32, 1000)
	offs := []int{0, 1024, 2048}
	k := []float32{1, 2, 3}
	if n := testing.AllocsPerRun(10, func() { Corr(dst, src, offs, k, true) }); n != 0 {
		t.Errorf("Corr allocates %v times per call", n)
	}
}

// Source: IEEE 754-2008 section 5.4.1 (correctly rounded operations): both
// paths add the same float64 values into the same 8 lanes in the same
// order, so L1Sums agrees bit for bit; against the plain sequential sum
// it differs only by reassociation, bounded by n u sum|x| (Higham 2002,
// section 4.2), u = 2^-53.
func TestL1Sums(t *testing.T) {
	r := rand.New(rand.NewPCG(13, 14))
	defer SetPortable(false)
	for n := 0; n <= 70; n++ {
		a, b := randSlice(r, n+1)[1:], randSlice(r, n)
		var seqD, seqN, magD float64
		for i := range a {
			d := math.Abs(float64(a[i] - b[i]))
			seqD += d
			magD += d
			seqN += math.Abs(float64(b[i]))
		}
		tol := float64(n+1) * 0x1p-53
		SetPortable(true)
		pd, pn := L1Sums(a, b)
		if math.Abs(pd-seqD) > tol*magD || math.Abs(pn-seqN) > tol*seqN {
			t.Fatalf("n %d: L1Sums (%g, %g), sequential (%g, %g)", n, pd, pn, seqD, seqN)
		}
		SetPortable(false)
		vd, vn := L1Sums(a, b)
		if math.Float64bits(vd) != math.Float64bits(pd) || math.Float64bits(vn) != math.Float64bits(pn) {
			t.Fatalf("n %d: vector (%g, %g), portable (%g, %g)", n, vd, vn, pd, pn)
		}
	}
}
