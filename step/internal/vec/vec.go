package vec

import "math"

// accel is true when the vector kernels run (set at start-up from the CPU's
// features; SetPortable clears it).
var accel = hasAccel

// SetPortable forces the portable Go kernels (on = true) or restores the
// start-up choice (on = false). It is meant for tests and benchmarks that
// compare both paths, before any kernel runs concurrently; it is not safe to
// call while kernels run.
func SetPortable(on bool) { accel = hasAccel && !on }

// Accelerated reports whether the vector kernels are in use.
func Accelerated() bool { return accel }

// Corr sets, for every i < len(dst),
//
//	dst[i] = sum_{r < len(offs)} sum_{c < kw} k[r*kw+c] * src[offs[r]+i+c]
//
// with kw = len(k)/len(offs), or adds that sum to dst[i] when add is set.
// The terms are summed in order (r, then c). One source row (offs = {0})
// is a 1-D correlation; kw = 1 sums weighted rows (a column pass); both
// together are a 2-D correlation. It panics when len(k) is not a multiple
// of len(offs) or a read would leave src (a programming error).
func Corr(dst, src []float32, offs []int, k []float32, add bool) {
	kw, ok := corrCheck(dst, src, offs, k, add)
	if !ok {
		return
	}
	if accel {
		corrAsm(dst, src, offs, k, kw, add)
		return
	}
	corrGo(dst, src, offs, k, kw, add)
}

// CorrPortable is Corr on the portable path whatever the CPU: for results
// that must be the same on every machine (simulated scenes, fixtures).
func CorrPortable(dst, src []float32, offs []int, k []float32, add bool) {
	if kw, ok := corrCheck(dst, src, offs, k, add); ok {
		corrGo(dst, src, offs, k, kw, add)
	}
}

// corrCheck validates Corr's arguments and handles the empty cases; ok
// means a kernel has work to do, with kw taps per row.
func corrCheck(dst, src []float32, offs []int, k []float32, add bool) (kw int, ok bool) {
	if len(offs) == 0 {
		if len(k) != 0 {
			panic("vec.Corr: taps without rows")
		}
		if !add {
			clear(dst)
		}
		return 0, false
	}
	kw = len(k) / len(offs)
	if kw*len(offs) != len(k) {
		panic("vec.Corr: len(k) is not a multiple of len(offs)")
	}
	if len(dst) == 0 {
		return kw, false
	}
	span := len(dst) + kw - 1
	for _, o := range offs {
		if o < 0 || o > len(src)-span {
			panic("vec.Corr: source row out of range")
		}
	}
	return kw, true
}

// corrGo is the portable Corr. It sums each source row's kw taps in a
// register and adds the row sums straight into dst (so the association
// differs from the vector path's one running sum per element, within the
// same rounding bound; with add=false the first row's sums are stored).
func corrGo(dst, src []float32, offs []int, k []float32, kw int, add bool) {
	n := len(dst)
	for r, o := range offs {
		kr := k[r*kw : (r+1)*kw]
		set := r == 0 && !add
		if kw == 1 {
			k0 := kr[0]
			s := src[o : o+n] // lets the compiler drop the bounds checks
			if set {
				for i := range dst {
					dst[i] = k0 * s[i]
				}
			} else {
				for i := range dst {
					dst[i] += k0 * s[i]
				}
			}
			continue
		}
		s := src[o : o+n+kw-1]
		for i := range dst {
			w := s[i : i+kw : i+kw]
			var t float32
			for c, kc := range kr {
				t += kc * w[c]
			}
			if set {
				dst[i] = t
			} else {
				dst[i] += t
			}
		}
	}
}

// Ratio sets q[i] = d[i] / (hf[i] + b) where m[i] != 0 and the denominator
// is positive, else 0 (the EMS data ratio). All slices have len(q) elements
// at least.
func Ratio(q, hf, d, m []float32, b float32) {
	n := len(q)
	hf, d, m = hf[:n], d[:n], m[:n]
	i := 0
	if accel && n >= 8 {
		i = n &^ 7
		ratioAsm(q[:i], hf, d, m, b)
	}
	for ; i < n; i++ {
		den := hf[i] + b
		if den > 0 && m[i] != 0 {
			q[i] = d[i] / den
		} else {
			q[i] = 0
		}
	}
}

// Update sets e[i] = f[i] * t[i] / s[i] where s[i] > floor, else f[i] (the
// EMS multiplicative update with the sensitivity s). All slices have len(e)
// elements at least.
func Update(e, f, t, s []float32, floor float32) {
	n := len(e)
	f, t, s = f[:n], t[:n], s[:n]
	i := 0
	if accel && n >= 8 {
		i = n &^ 7
		updateAsm(e[:i], f, t, s, floor)
	}
	for ; i < n; i++ {
		if s[i] > floor {
			e[i] = f[i] * t[i] / s[i]
		} else {
			e[i] = f[i]
		}
	}
}

// RatioJVP is Ratio carrying a directional derivative: where the data term
// applies, q[i] = d[i]/den and dq[i] = (delta[i] - q[i]*hu[i]) / den with
// den = hf[i] + b; elsewhere both are 0. All slices have len(q) elements at
// least.
func RatioJVP(q, dq, hf, d, m, delta, hu []float32, b float32) {
	n := len(q)
	dq, hf, d, m, delta, hu = dq[:n], hf[:n], d[:n], m[:n], delta[:n], hu[:n]
	i := 0
	if accel && n >= 8 {
		i = n &^ 7
		ratioJVPAsm(q[:i], dq, hf, d, m, delta, hu, b)
	}
	for ; i < n; i++ {
		den := hf[i] + b
		if den > 0 && m[i] != 0 {
			q[i] = d[i] / den
			// float32(...) keeps the product rounded on its own (no fused
			// multiply-add; Go spec, "Arithmetic operators").
			dq[i] = (delta[i] - float32(q[i]*hu[i])) / den
		} else {
			q[i], dq[i] = 0, 0
		}
	}
}

// UpdateJVP is Update carrying a directional derivative: where s[i] > floor,
// e[i] = f[i]*t[i]/s[i] and ue[i] = (u[i]*t[i] + f[i]*dt[i]) / s[i];
// elsewhere e[i] = f[i] and ue[i] = u[i]. All slices have len(e) elements
// at least.
func UpdateJVP(e, ue, f, u, t, dt, s []float32, floor float32) {
	n := len(e)
	ue, f, u, t, dt, s = ue[:n], f[:n], u[:n], t[:n], dt[:n], s[:n]
	i := 0
	if accel && n >= 8 {
		i = n &^ 7
		updateJVPAsm(e[:i], ue, f, u, t, dt, s, floor)
	}
	for ; i < n; i++ {
		if s[i] > floor {
			e[i] = f[i] * t[i] / s[i]
			ue[i] = (float32(u[i]*t[i]) + float32(f[i]*dt[i])) / s[i]
		} else {
			e[i] = f[i]
			ue[i] = u[i]
		}
	}
}

// l1Lanes is the number of float64 partial sums L1Sums keeps: element i
// goes to lane i mod 8 on both paths (two YMM registers of 4 float64 on the
// vector path), and the lanes are added in order at the end, so both paths
// give the same bits.
const l1Lanes = 8

// L1Sums returns sum_i |a[i] - b[i]| and sum_i |b[i]| over len(a) elements
// (b at least as long), each difference taken in float32 and the sums in
// float64: the numerator and denominator of a relative L1 change.
func L1Sums(a, b []float32) (diff, norm float64) {
	n := len(a)
	b = b[:n]
	var dl, nl [l1Lanes]float64
	i := 0
	if accel && n >= l1Lanes {
		i = n &^ (l1Lanes - 1)
		l1SumsAsm(&dl, &nl, a[:i], b)
	} else {
		for ; i+l1Lanes <= n; i += l1Lanes {
			for l := range l1Lanes {
				dl[l] += math.Abs(float64(a[i+l] - b[i+l]))
				nl[l] += math.Abs(float64(b[i+l]))
			}
		}
	}
	for l := 0; i < n; i, l = i+1, l+1 {
		dl[l] += math.Abs(float64(a[i] - b[i]))
		nl[l] += math.Abs(float64(b[i]))
	}
	for l := range l1Lanes {
		diff += dl[l]
		norm += nl[l]
	}
	return diff, norm
}
