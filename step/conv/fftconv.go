package conv

import "limpid/raster"

// The FFT path of Operator: valid 2-D correlation of a real grid with the
// kernel's forward or adjoint taps through the float32 FFT of fft32.go, on
// the same extended (forward) and zero-padded (adjoint) grids as the direct
// path, so Apply and Adjoint stay each other's exact transposes up to float32
// rounding.
//
// Two real problems in one complex transform: the output rows are split in a
// top and a bottom half; the top half's input rows go into the real part of
// a complex grid and the bottom half's into the imaginary part. Correlation
// with a real kernel is real-linear, so the real part of the result is the
// top half's correlation and the imaginary part the bottom half's (the
// two-for-one trick of real-data FFTs, Cooley, Lewis & Welch, IEEE Trans.
// Education 12(1):27, 1969 (reference recalled from memory), applied to the
// whole convolution instead of the spectrum). A half needs its output rows plus 2 ry input rows, so the grid
// has about h/2 + 3 ry rows instead of h + 4 ry.
//
// Circular correlation on a P x Q grid equals the valid correlation for the
// output rows y < P - 2 ry and columns x < Q - 2 rx (no wrap-around), and
// the DFT of a circular correlation with a real t is conj(T) times the DFT
// of the input (correlation theorem, e.g. Bracewell, "The Fourier Transform
// and Its Applications"; chapter not given, recalled from memory).

// fftBatch is the number of rows or columns transformed together (batch
// width; measured: see DEVELOPERS.md "Large kernels").
const fftBatch = 16

// fftWork caches plans, kernel spectra and buffers for one tile size.
type fftWork struct {
	p, q       int // complex grid rows, columns
	rows, cols *plan32
	// grid is p x q in column blocks: block c0 (fftBatch columns, fewer in
	// the last) holds its p x wb values from offset c0 p, row-major, so a
	// column pass transforms a block in place. kspec, conj(T) / (p q), has
	// the same layout.
	grid, kspec []complex64
	blk, blk2   []complex64 // max(p, q) x fftBatch
	rowBuf      []complex64 // fftBatch x q, row-major: rows in or out
	forConv     *Operator
	forW        int
	forH        int
}

// fftSize is the smallest 2^a 3^b 5^c at least n.
func fftSize(n int) int {
	for m := max(n, 1); ; m++ {
		if Smooth235(m) {
			return m
		}
	}
}

// fftCost estimates the time of one length-n transform: n times the sum of
// its stages' per-point costs, measured with the AVX butterflies
// (BenchmarkFFT32Radix, 16 vectors per batch: 0.127 ns per point for a
// radix-4 stage, 0.097 radix 2, 0.157 radix 3, 0.22 radix 5), plus one
// pass over the data for the gather and scatter around the transform.
func fftCost(n int) float64 {
	perPoint := map[int]float64{4: 0.127, 2: 0.097, 3: 0.157, 5: 0.22}
	c := 0.1 // gather and scatter
	for _, st := range newPlan32(n).stages {
		c += perPoint[st.r]
	}
	return float64(n) * c
}

// fftGoodSize is the 2^a 3^b 5^c length at least n (and below 5n/4 + 4),
// a multiple of 4 (the vector transposes work on 4x4 blocks), of least
// fftCost: 640 = 4^3 2 5 rather than 625 = 5^4.
func fftGoodSize(n int) int {
	best, bc := 0, 0.0
	for m := max(n, 4); best == 0 || m < n+n/4+4; m++ {
		if m%4 == 0 && Smooth235(m) {
			if c := fftCost(m); best == 0 || c < bc {
				best, bc = m, c
			}
		}
	}
	return best
}

func (c *Operator) fftSetup(ws *Work, w, h int) *fftWork {
	if f := ws.fft; f != nil && f.forConv == c && f.forW == w && f.forH == h {
		return f
	}
	// The adjoint's output z has h + 2 ry rows and w + 2 rx columns, its
	// input 2 ry rows and 2 rx columns more: the larger of the two problems.
	ho := (h + 2*c.ry + 1) / 2
	p := fftGoodSize(ho + 2*c.ry)
	q := fftGoodSize(w + 4*c.rx)
	// A new tile size reuses the previous buffers (tiles at the image's
	// edges are smaller: workers alternate between a few sizes).
	f := ws.fft
	if f == nil {
		f = &fftWork{}
	}
	if f.rows == nil || f.rows.n != q {
		f.rows = newPlan32(q)
	}
	if f.cols == nil || f.cols.n != p {
		f.cols = newPlan32(p)
	}
	f.p, f.q, f.forConv, f.forW, f.forH = p, q, c, w, h
	f.grid = growC(f.grid, p*q)
	f.kspec = growC(f.kspec, p*q)
	f.blk = growC(f.blk, max(p, q)*fftBatch)
	f.blk2 = growC(f.blk2, max(p, q)*fftBatch)
	f.rowBuf = growC(f.rowBuf, fftBatch*q)
	// One spectrum serves both directions: T is the DFT of the forward
	// taps t (reversed kernel) at the grid origin. Forward: correlation
	// with t, conj(T). Adjoint: correlation with the adjoint taps t(kh-1-m,
	// kw-1-n) is the circular convolution with t (multiply by T) read
	// (kh-1, kw-1) samples further on (shift theorem; see correlate).
	scale := 1 / float64(p*q)
	clear(f.grid)
	for r0 := 0; r0 < c.kh; r0 += fftBatch {
		nb := min(fftBatch, c.kh-r0)
		clear(f.rowBuf[:nb*q])
		for j := 0; j < nb; j++ {
			ty := r0 + j
			for tx := 0; tx < c.kw; tx++ {
				v := c.kern.Data[(c.kh-1-ty)*c.kw+(c.kw-1-tx)] // forward taps (reversed)
				f.rowBuf[j*q+tx] = complex(float32(v), 0)
			}
		}
		f.rowsIn(r0, nb)
	}
	for c0 := 0; c0 < q; c0 += fftBatch {
		wb := min(fftBatch, q-c0)
		blk := f.grid[c0*p : c0*p+p*wb]
		b := f.cols.transform(blk, f.blk[:p*wb], wb, false)
		for i, v := range b {
			f.kspec[c0*p+i] = complex(float32(float64(real(v))*scale), float32(-float64(imag(v))*scale))
		}
	}
	ws.fft = f
	return f
}

func growC(b []complex64, n int) []complex64 {
	if cap(b) < n {
		return make([]complex64, n)
	}
	return b[:n]
}

// rowsIn transforms the nb rows in f.rowBuf (row-major) along x and stores
// them as rows [r0, r0+nb) of the blocked grid.
func (f *fftWork) rowsIn(r0, nb int) {
	q := f.q
	b := f.blk[:q*nb]
	transposeC(b, nb, f.rowBuf, q, nb, q)
	b = f.rows.transform(b, f.blk2[:q*nb], nb, false)
	for c0 := 0; c0 < q; c0 += fftBatch {
		wb := min(fftBatch, q-c0)
		transposeC(f.grid[c0*f.p+r0*wb:], wb, b[c0*nb:], nb, wb, nb)
	}
}

// rowsOut inverse-transforms rows [r0, r0+nb) of the blocked grid along x
// into f.rowBuf (row-major).
func (f *fftWork) rowsOut(r0, nb int) {
	q := f.q
	b := f.blk[:q*nb]
	for c0 := 0; c0 < q; c0 += fftBatch {
		wb := min(fftBatch, q-c0)
		transposeC(b[c0*nb:], nb, f.grid[c0*f.p+r0*wb:], wb, nb, wb)
	}
	b = f.rows.transform(b, f.blk2[:q*nb], nb, true)
	transposeC(f.rowBuf, q, b, nb, q, nb)
}

// corrIO reads the FFT path's input rows and takes its output rows.
// Forward: input row m of (h + 2 ry) x (w + 2 rx) is the half-sample
// symmetric extension of src, output row y goes to dst. Adjoint: input row m
// of (h + 4 ry) x (w + 4 rx) is src zero-padded by (2 ry, 2 rx), output row
// m of z ((h + 2 ry) x (w + 2 rx)) is folded back onto the pixels its
// extension samples mirrored (dst must start at zero).
type corrIO struct {
	adjoint      bool
	src, dst     []float32
	w, h, rx, ry int
}

// srcRow returns the source row behind input row m and the column offset
// of its first pixel (nil for a zero row).
func (io *corrIO) srcRow(m int) (row []float32, off int) {
	w, h := io.w, io.h
	if !io.adjoint {
		return io.src[raster.Mirror(m-io.ry, h)*w:][:w], io.rx
	}
	y := m - 2*io.ry
	if y < 0 || y >= h {
		return nil, 2 * io.rx
	}
	return io.src[y*w : (y+1)*w], 2 * io.rx
}

// inputPair writes input row mt into the real and input row mb (when
// hasBot) into the imaginary part of the grid row g, zeros past the input's
// width: one pass, no intermediate rows.
func (io *corrIO) inputPair(g []complex64, mt, mb int, hasBot bool) {
	w, rx := io.w, io.rx
	t, off := io.srcRow(mt)
	var b []float32
	if hasBot {
		b, _ = io.srcRow(mb)
	}
	clear(g)
	switch {
	case t != nil && b != nil:
		d := g[off : off+w]
		for x := range d {
			d[x] = complex(t[x], b[x])
		}
	case t != nil:
		d := g[off : off+w]
		for x := range d {
			d[x] = complex(t[x], 0)
		}
	case b != nil:
		d := g[off : off+w]
		for x := range d {
			d[x] = complex(0, b[x])
		}
	}
	if io.adjoint {
		return // zero padding
	}
	// Forward: the half-sample symmetric extension's rx columns each side.
	for n := 0; n < rx; n++ {
		l, r := raster.Mirror(n-rx, w), raster.Mirror(w+n, w)
		var tl, tr, bl, br float32
		if t != nil {
			tl, tr = t[l], t[r]
		}
		if b != nil {
			bl, br = b[l], b[r]
		}
		g[n] = complex(tl, bl)
		g[w+rx+n] = complex(tr, br)
	}
}

// output takes output row m from the real (or imaginary) parts of z, which
// holds it from column off on.
func (io *corrIO) output(m int, z []complex64, off int, imagPart bool) {
	w, h, rx, ry := io.w, io.h, io.rx, io.ry
	part := func(v complex64) float32 {
		if imagPart {
			return imag(v)
		}
		return real(v)
	}
	if !io.adjoint {
		d := io.dst[m*w : (m+1)*w]
		zz := z[off : off+w]
		if imagPart {
			for x := range d {
				d[x] = imag(zz[x])
			}
		} else {
			for x := range d {
				d[x] = real(zz[x])
			}
		}
		return
	}
	out := io.dst[raster.Mirror(m-ry, h)*w:][:w]
	zz := z[off+rx : off+rx+w]
	if imagPart {
		for x := range out {
			out[x] += imag(zz[x])
		}
	} else {
		for x := range out {
			out[x] += real(zz[x])
		}
	}
	for mx := 0; mx < rx; mx++ {
		out[raster.Mirror(mx-rx, w)] += part(z[off+mx])
		out[raster.Mirror(w+mx, w)] += part(z[off+w+rx+mx])
	}
}

// correlate computes the valid correlation of the rin x cin input (rin =
// rout + 2 ry) with the forward taps t (io.adjoint false) or the adjoint
// taps (t reversed), and hands its rout x cout rows to io.output. The
// adjoint multiplies by conj(kspec) = T / (p q), a circular convolution
// with t, whose sample (y + 2 ry, x + 2 rx) is the adjoint correlation's
// sample (y, x) (no wrap-around: y + 2 ry < ho + 2 ry <= p, x + 2 rx < cin
// <= q).
func (f *fftWork) correlate(io *corrIO, rin, cin, rout, cout int) {
	p, q, ry := f.p, f.q, io.ry
	k := f.kspec
	r0ff, c0ff := 0, 0
	if io.adjoint {
		r0ff, c0ff = 2*ry, 2*io.rx
	}
	ho := (rout + 1) / 2
	nz := ho + 2*ry // grid rows holding data (<= rin)
	for r0 := 0; r0 < nz; r0 += fftBatch {
		nb := min(fftBatch, nz-r0)
		for j := 0; j < nb; j++ {
			r := r0 + j
			io.inputPair(f.rowBuf[j*q:(j+1)*q], r, ho+r, ho+r < rin)
		}
		f.rowsIn(r0, nb)
	}
	// Columns, one block in place: forward transform, multiply by the
	// kernel spectrum, inverse (rows nz on are zero).
	for c0 := 0; c0 < q; c0 += fftBatch {
		wb := min(fftBatch, q-c0)
		blk := f.grid[c0*p : c0*p+p*wb]
		clear(blk[nz*wb:])
		b := f.cols.transform(blk, f.blk[:p*wb], wb, false)
		cmulSlice(b, k[c0*p:c0*p+p*wb], io.adjoint)
		o := f.blk[:p*wb]
		if &b[0] == &o[0] {
			o = blk
		}
		if b = f.cols.transform(b, o, wb, true); &b[0] != &blk[0] {
			copy(blk, b)
		}
	}
	// Inverse rows: only the ho output rows.
	for r0 := 0; r0 < ho; r0 += fftBatch {
		nb := min(fftBatch, ho-r0)
		f.rowsOut(r0ff+r0, nb)
		for j := 0; j < nb; j++ {
			r := r0 + j
			row := f.rowBuf[j*q : (j+1)*q]
			io.output(r, row, c0ff, false)
			if br := ho + r; br < rout {
				io.output(br, row, c0ff, true)
			}
		}
	}
}
