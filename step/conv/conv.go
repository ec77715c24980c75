package conv

import (
	"limpid/psf"
	"limpid/raster"
	"limpid/step/internal/vec"
)

// convKind is the implementation a Operator uses.
type convKind int

const (
	convSeparable convKind = iota
	convDirect
	convFFT
)

func (k convKind) String() string {
	return [...]string{"separable", "direct", "fft"}[k]
}

// directMaxTaps is the largest non-separable kernel convolved directly; larger
// ones go through the float32 FFT (fft32.go, fftconv.go). Measured on this
// machine class (2 cores, go1.26, 584x584 tiles, Apply + Adjoint per CPU
// second; DEVELOPERS.md "Large kernels"): the FFT path runs at 135-154
// Mpix/s for kernels up to 19x15 taps (110 at 31x23); the vectorised direct
// path (merged with the vector kernels) at 166 Mpix/s for 9x9 and 118 for
// 13x9 taps, falling as 1/taps (about 97 taps break even); the portable
// direct loops alone run at 68 Mpix/s for 3x3 and 5 for 9x9, so without the
// vector kernels the FFT would win from 9 taps.
const directMaxTaps = 81

// Operator is the linear operator "convolve with kernel h under half-sample
// symmetric extension" on w x h float32 planes, with its exact adjoint.
//
// Forward: H = V ∘ E, where E extends the plane by the kernel radius with
// half-sample symmetric reflection and V is the valid convolution. Adjoint:
// H^T = E^T ∘ V^T, i.e. full correlation of the zero-padded plane followed by
// folding the extension back onto the pixels it mirrored. For symmetric
// kernels H is symmetric (diagonal in the DCT-II basis), and the fold makes
// H^T exact for any kernel, which the EM flux identity sum(s*e) = sum(d)
// (Shepp & Vardi 1982) needs.
//
// A Operator is immutable and shared by workers; each worker owns a Work.
type Operator struct {
	kind   convKind
	rx, ry int
	// Separable: fwdX[t] = hx(rx - t) (reversed, forward correlation),
	// adjX[t] = hx(t - rx); likewise Y.
	fwdX, adjX, fwdY, adjY []float32
	symX, symY             bool
	// Direct: fwd2[ty*kw+tx] = h(rx-tx, ry-ty); adj2 = h(tx-rx, ty-ry).
	fwd2, adj2 []float32
	kw, kh     int
	kern       *psf.Kernel
	// portable: the portable Go kernels of package vec whatever the CPU
	// (Portable), so results are the same on every machine.
	portable bool
}

// New chooses the implementation for a kernel: separable when the kernel
// is rank one, else direct or FFT by the measured cost rule of route.go.
func New(k *psf.Kernel) *Operator {
	return newKind(k, chooseKind(k))
}

// newKind builds the operator for k with the given implementation
// (convSeparable needs a separable k).
func newKind(k *psf.Kernel, kind convKind) *Operator {
	c := &Operator{kind: kind, rx: k.Rx(), ry: k.Ry(), kw: k.W, kh: k.H, kern: k}
	switch kind {
	case convSeparable:
		c.fwdX, c.adjX, c.symX = taps1(k.X)
		c.fwdY, c.adjY, c.symY = taps1(k.Y)
	case convDirect:
		c.fwd2 = make([]float32, k.W*k.H)
		c.adj2 = make([]float32, k.W*k.H)
		n := len(k.Data)
		for i, v := range k.Data {
			c.adj2[i] = float32(v)
			c.fwd2[n-1-i] = float32(v)
		}
	}
	return c
}

// NewSeparable builds a separable operator from 1-D factors.
func NewSeparable(x, y []float64) *Operator {
	c := &Operator{kind: convSeparable, rx: (len(x) - 1) / 2, ry: (len(y) - 1) / 2, kw: len(x), kh: len(y)}
	c.fwdX, c.adjX, c.symX = taps1(x)
	c.fwdY, c.adjY, c.symY = taps1(y)
	return c
}

func taps1(v []float64) (fwd, adj []float32, sym bool) {
	n := len(v)
	fwd = make([]float32, n)
	adj = make([]float32, n)
	sym = true
	for i, x := range v {
		adj[i] = float32(x)
		fwd[n-1-i] = float32(x)
		if float32(x) != float32(v[n-1-i]) {
			sym = false
		}
	}
	return fwd, adj, sym
}

// Portable returns a copy of c that always takes the portable Go kernels
// (package vec), so its results are the same on every machine, with or
// without vector units: for simulated scenes and committed fixtures, not
// for restoration (which is deterministic per machine on either path).
func (c *Operator) Portable() *Operator {
	p := *c
	p.portable = true
	return &p
}

// Kind names the implementation ("separable", "direct", "fft"); the run
// report's "convolution" field records it.
func (c *Operator) Kind() string { return c.kind.String() }

// Radius returns the kernel radii.
func (c *Operator) Radius() (rx, ry int) { return c.rx, c.ry }

// Work is a per-worker scratch space for Conv; reused across calls, it
// grows to the largest plane seen and never shrinks.
type Work struct {
	tmp  []float32
	ext  []float32
	ext2 []float32
	fft  *fftWork
}

func grow(b []float32, n int) []float32 {
	if cap(b) < n {
		return make([]float32, n)
	}
	return b[:n]
}

// Apply sets dst = H src for w x h planes (dst and src must not alias).
func (c *Operator) Apply(ws *Work, dst, src []float32, w, h int) {
	switch c.kind {
	case convSeparable:
		ws.tmp = grow(ws.tmp, w*h)
		ws.ext = grow(ws.ext, max(w+2*c.rx, h))
		for y := 0; y < h; y++ {
			rowFwd(ws.tmp[y*w:(y+1)*w], src[y*w:(y+1)*w], c.fwdX, c.rx, ws.ext, c.symX, !c.portable)
		}
		colFwd(dst, ws.tmp, w, h, c.fwdY, c.ry, !c.portable)
	case convDirect:
		c.directFwd(ws, dst, src, w, h)
	case convFFT:
		c.fftApply(ws, dst, src, w, h, false)
	}
}

// Adjoint sets dst = H^T src for w x h planes (dst and src must not alias).
func (c *Operator) Adjoint(ws *Work, dst, src []float32, w, h int) {
	switch c.kind {
	case convSeparable:
		ws.tmp = grow(ws.tmp, w*h)
		ws.ext = grow(ws.ext, max(w+4*c.rx, h))
		for y := 0; y < h; y++ {
			rowAdj(ws.tmp[y*w:(y+1)*w], src[y*w:(y+1)*w], c.adjX, c.rx, ws.ext, c.symX, !c.portable)
		}
		colAdj(dst, ws.tmp, w, h, c.adjY, c.ry, !c.portable)
	case convDirect:
		c.directAdj(ws, dst, src, w, h)
	case convFFT:
		c.fftApply(ws, dst, src, w, h, true)
	}
}

// corr sets dst[x] = sum_t k[t] e[x+t] (len(e) >= len(dst)+len(k)-1): the
// vector kernel when fast is set and the CPU has one, else the scalar loops
// below (which use the symmetry of sym kernels to halve the
// multiplications).
func corr(dst, e, k []float32, sym, fast bool) {
	if fast && vec.Accelerated() {
		var one [1]int
		vec.Corr(dst, e, one[:], k, false)
		return
	}
	n := len(k)
	switch {
	case sym && n == 3:
		k0, k1 := k[0], k[1]
		e = e[:len(dst)+2]
		for x := range dst {
			dst[x] = k0*(e[x]+e[x+2]) + k1*e[x+1]
		}
	case sym && n == 5:
		k0, k1, k2 := k[0], k[1], k[2]
		e = e[:len(dst)+4]
		for x := range dst {
			dst[x] = k0*(e[x]+e[x+4]) + k1*(e[x+1]+e[x+3]) + k2*e[x+2]
		}
	case sym && n == 7:
		k0, k1, k2, k3 := k[0], k[1], k[2], k[3]
		e = e[:len(dst)+6]
		for x := range dst {
			dst[x] = k0*(e[x]+e[x+6]) + k1*(e[x+1]+e[x+5]) + k2*(e[x+2]+e[x+4]) + k3*e[x+3]
		}
	case sym && n == 9:
		k0, k1, k2, k3, k4 := k[0], k[1], k[2], k[3], k[4]
		e = e[:len(dst)+8]
		for x := range dst {
			dst[x] = k0*(e[x]+e[x+8]) + k1*(e[x+1]+e[x+7]) + k2*(e[x+2]+e[x+6]) + k3*(e[x+3]+e[x+5]) + k4*e[x+4]
		}
	case sym && n == 13:
		k0, k1, k2, k3, k4, k5, k6 := k[0], k[1], k[2], k[3], k[4], k[5], k[6]
		e = e[:len(dst)+12]
		for x := range dst {
			s := e[x : x+13 : x+13]
			dst[x] = k0*(s[0]+s[12]) + k1*(s[1]+s[11]) + k2*(s[2]+s[10]) + k3*(s[3]+s[9]) +
				k4*(s[4]+s[8]) + k5*(s[5]+s[7]) + k6*s[6]
		}
	case sym:
		h := n / 2
		for x := range dst {
			s := e[x : x+n : x+n]
			acc := k[h] * s[h]
			for t := 0; t < h; t++ {
				acc += k[t] * (s[t] + s[n-1-t])
			}
			dst[x] = acc
		}
	default:
		for x := range dst {
			s := e[x : x+n : x+n]
			var acc float32
			for t, kt := range k {
				acc += kt * s[t]
			}
			dst[x] = acc
		}
	}
}

// rowFwd: dst = V(E(src)) along one row.
func rowFwd(dst, src, k []float32, r int, ext []float32, sym, fast bool) {
	w := len(src)
	e := ext[:w+2*r]
	copy(e[r:], src)
	for m := 0; m < r; m++ {
		e[m] = src[raster.Mirror(m-r, w)]
		e[w+r+m] = src[raster.Mirror(w+m, w)]
	}
	corr(dst, e, k, sym, fast)
}

// rowAdj: dst = E^T(V^T(src)) along one row.
func rowAdj(dst, src, k []float32, r int, ext []float32, sym, fast bool) {
	w := len(src)
	// Zero-padded source of length w+4r, correlated into z of length w+2r.
	gp := ext[:w+4*r]
	for i := 0; i < 2*r; i++ {
		gp[i] = 0
		gp[w+2*r+i] = 0
	}
	copy(gp[2*r:], src)
	// z[m] for interior m = r..w+r-1 goes straight to dst[m-r].
	corr(dst, gp[r:], k, sym, fast)
	// Fold the 2r extension samples back.
	for m := 0; m < r; m++ {
		var zl, zr float32
		for t, kt := range k {
			zl += kt * gp[m+t]
			zr += kt * gp[w+r+m+t]
		}
		dst[raster.Mirror(m-r, w)] += zl
		dst[raster.Mirror(w+m, w)] += zr
	}
}

// maxRows is the number of source rows one vec.Corr call sums; longer
// kernels take several calls (the row offsets live on the stack).
const maxRows = 32

// corrRows sets dst (or adds to it, with add) to sum_j sum_c k[j*kw+c] *
// src[row(j)+i+c] over the n source rows j (kw = len(k)/n), in order of j;
// on the vector kernels when fast is set.
func corrRows(dst, src []float32, n int, row func(j int) int, k []float32, add, fast bool) {
	kw := len(k) / n
	var offs [maxRows]int
	for j0 := 0; j0 < n; j0 += maxRows {
		m := min(maxRows, n-j0)
		for j := range m {
			offs[j] = row(j0 + j)
		}
		if fast {
			vec.Corr(dst, src, offs[:m], k[j0*kw:(j0+m)*kw], add || j0 > 0)
		} else {
			vec.CorrPortable(dst, src, offs[:m], k[j0*kw:(j0+m)*kw], add || j0 > 0)
		}
	}
}

// colFwd: vertical pass of the forward operator, rows mirrored: each
// output row is the tap-weighted sum of its 2r+1 mirrored source rows.
func colFwd(dst, src []float32, w, h int, k []float32, r int, fast bool) {
	for y := 0; y < h; y++ {
		corrRows(dst[y*w:(y+1)*w], src, len(k), func(t int) int {
			return raster.Mirror(y+t-r, h) * w
		}, k, false, fast)
	}
}

// colAdj: vertical pass of the adjoint: correlate zero-padded rows (only
// the taps that meet a source row), fold the 2r extension rows back onto
// the rows they mirrored.
func colAdj(dst, src []float32, w, h int, k []float32, r int, fast bool) {
	clear(dst[:w*h])
	for m := 0; m < h+2*r; m++ {
		ty := raster.Mirror(m-r, h)
		// Source row m+t-2r exists for t in [t0, t1).
		t0, t1 := max(0, 2*r-m), min(len(k), h+2*r-m)
		if t0 >= t1 {
			continue
		}
		corrRows(dst[ty*w:(ty+1)*w], src, t1-t0, func(j int) int {
			return (m + t0 + j - 2*r) * w
		}, k[t0:t1], true, fast)
	}
}

// directFwd: dst = V(E(src)) with a 2-D kernel.
func (c *Operator) directFwd(ws *Work, dst, src []float32, w, h int) {
	ew := w + 2*c.rx
	ws.ext = grow(ws.ext, ew*h)
	for y := 0; y < h; y++ {
		row := src[y*w : (y+1)*w]
		e := ws.ext[y*ew : (y+1)*ew]
		copy(e[c.rx:], row)
		for m := 0; m < c.rx; m++ {
			e[m] = row[raster.Mirror(m-c.rx, w)]
			e[w+c.rx+m] = row[raster.Mirror(w+m, w)]
		}
	}
	for y := 0; y < h; y++ {
		corrRows(dst[y*w:(y+1)*w], ws.ext, c.kh, func(ty int) int {
			return raster.Mirror(y+ty-c.ry, h) * ew
		}, c.fwd2, false, !c.portable)
	}
}

// directAdj: dst = E^T(V^T(src)) with a 2-D kernel.
func (c *Operator) directAdj(ws *Work, dst, src []float32, w, h int) {
	gw := w + 4*c.rx
	zw := w + 2*c.rx
	ws.ext = grow(ws.ext, gw*h)
	for y := 0; y < h; y++ {
		g := ws.ext[y*gw : (y+1)*gw]
		for i := 0; i < 2*c.rx; i++ {
			g[i] = 0
			g[w+2*c.rx+i] = 0
		}
		copy(g[2*c.rx:], src[y*w:(y+1)*w])
	}
	ws.ext2 = grow(ws.ext2, zw*(h+2*c.ry))
	z := ws.ext2
	for m := 0; m < h+2*c.ry; m++ {
		zr := z[m*zw : (m+1)*zw]
		// Source row m+ty-2ry exists for ty in [t0, t1) (never empty).
		t0, t1 := max(0, 2*c.ry-m), min(c.kh, h+2*c.ry-m)
		if t0 >= t1 {
			clear(zr)
			continue
		}
		corrRows(zr, ws.ext, t1-t0, func(j int) int {
			return (m + t0 + j - 2*c.ry) * gw
		}, c.adj2[t0*c.kw:t1*c.kw], false, !c.portable)
	}
	for i := range dst[:w*h] {
		dst[i] = 0
	}
	for m := 0; m < h+2*c.ry; m++ {
		ty := raster.Mirror(m-c.ry, h)
		out := dst[ty*w : (ty+1)*w]
		zr := z[m*zw : (m+1)*zw]
		for x := 0; x < w; x++ {
			out[x] += zr[x+c.rx]
		}
		for mx := 0; mx < c.rx; mx++ {
			out[raster.Mirror(mx-c.rx, w)] += zr[mx]
			out[raster.Mirror(w+mx, w)] += zr[w+c.rx+mx]
		}
	}
}

// fftApply computes the forward or adjoint operator through the float32 FFT
// (fftconv.go) on the same extended/padded grids as the direct path.
func (c *Operator) fftApply(ws *Work, dst, src []float32, w, h int, adjoint bool) {
	f := c.fftSetup(ws, w, h)
	io := corrIO{adjoint: adjoint, src: src[:w*h], dst: dst[:w*h], w: w, h: h, rx: c.rx, ry: c.ry}
	if !adjoint {
		f.correlate(&io, h+2*c.ry, w+2*c.rx, h, w)
		return
	}
	clear(io.dst)
	f.correlate(&io, h+4*c.ry, w+4*c.rx, h+2*c.ry, w+2*c.rx)
}

// SmoothingKernel returns the 1-D smoothing kernel of EMS for bandwidth eps
// (pixels): nil for eps = 0 (Richardson-Lucy); for eps <= 0.5 the 3-tap
// variance-matched kernel [a, 1-2a, a] with 2a = eps^2 (a point-sampled
// Gaussian is numerically the identity below eps ~ 0.25: its side weights
// are exp(-1/(2 eps^2)), 4e-6 at eps = 0.2);
// above, a point-sampled Gaussian whose width is adjusted so that its
// discrete variance equals eps^2 exactly.
func SmoothingKernel(eps float64) []float64 {
	switch {
	case eps <= 0:
		return nil
	case eps <= 0.5:
		a := eps * eps / 2
		return []float64{a, 1 - 2*a, a}
	}
	r := psf.GaussianRadius(eps)
	variance := func(s float64) float64 {
		g := psf.Gaussian1D(s, r)
		var v float64
		for i, x := range g {
			d := float64(i - r)
			v += x * d * d
		}
		return v
	}
	lo, hi := eps*0.5, eps*1.5
	for it := 0; it < 60; it++ {
		mid := 0.5 * (lo + hi)
		if variance(mid) < eps*eps {
			lo = mid
		} else {
			hi = mid
		}
	}
	return psf.Gaussian1D(0.5*(lo+hi), r)
}
