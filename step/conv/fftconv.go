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
	grid       []complex64 // p x q
	blk, blk2  []complex64 // max(p, q) x fftBatch
	// conj(T) / (p q) in column blocks: block c0 (fftBatch columns, fewer
	// in the last) holds p x nb values from offset c0 p, row-major.
	kspec    []complex64
	top, bot []float32 // one input or output row each
	forConv  *Operator
	forW     int
	forH     int
}

// fftSize is the smallest 2^a 3^b 5^c at least n.
func fftSize(n int) int {
	for m := max(n, 1); ; m++ {
		if smooth235(m) {
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
		if m%4 == 0 && smooth235(m) {
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
	// One spectrum serves both directions: T is the DFT of the forward
	// taps t (reversed kernel) at the grid origin. Forward: correlation
	// with t, conj(T). Adjoint: correlation with the adjoint taps t(kh-1-m,
	// kw-1-n) is the circular convolution with t (multiply by T) read
	// (kh-1, kw-1) samples further on (shift theorem; see correlate).
	scale := 1 / float64(p*q)
	clear(f.grid)
	for ty := 0; ty < c.kh; ty++ {
		for tx := 0; tx < c.kw; tx++ {
			v := c.kern.Data[(c.kh-1-ty)*c.kw+(c.kw-1-tx)] // forward taps (reversed)
			f.grid[ty*q+tx] = complex(float32(v), 0)
		}
	}
	f.rowPass(c.kh, false)
	for c0 := 0; c0 < q; c0 += fftBatch {
		nb := min(fftBatch, q-c0)
		b := f.gatherCols(c0, nb)
		b = f.cols.transform(b, f.other(b), nb, false)
		for r := 0; r < p; r++ {
			for j := 0; j < nb; j++ {
				v := b[r*nb+j]
				f.kspec[c0*p+r*nb+j] = complex(float32(float64(real(v))*scale), float32(-float64(imag(v))*scale))
			}
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

// other returns the scratch block that b is not.
func (f *fftWork) other(b []complex64) []complex64 {
	if &b[0] == &f.blk[0] {
		return f.blk2
	}
	return f.blk
}

// rowPass transforms rows [0, n) of the grid in place, nb at a time.
func (f *fftWork) rowPass(n int, inverse bool) {
	q := f.q
	for r0 := 0; r0 < n; r0 += fftBatch {
		nb := min(fftBatch, n-r0)
		b := f.blk[:q*nb]
		transposeC(b, nb, f.grid[r0*q:], q, nb, q)
		b = f.rows.transform(b, f.blk2, nb, inverse)
		transposeC(f.grid[r0*q:], q, b, nb, q, nb)
	}
}

// gatherCols copies columns [c0, c0+nb) of the grid into f.blk (p x nb).
func (f *fftWork) gatherCols(c0, nb int) []complex64 {
	b := f.blk[:f.p*nb]
	for r := 0; r < f.p; r++ {
		copy(b[r*nb:(r+1)*nb], f.grid[r*f.q+c0:r*f.q+c0+nb])
	}
	return b
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

// input writes input row m into e (its full width).
func (io *corrIO) input(e []float32, m int) {
	w, h, rx, ry := io.w, io.h, io.rx, io.ry
	if !io.adjoint {
		row := io.src[raster.Mirror(m-ry, h)*w:][:w]
		copy(e[rx:], row)
		for n := 0; n < rx; n++ {
			e[n] = row[raster.Mirror(n-rx, w)]
			e[w+rx+n] = row[raster.Mirror(w+n, w)]
		}
		return
	}
	y := m - 2*ry
	if y < 0 || y >= h {
		clear(e)
		return
	}
	clear(e[:2*rx])
	copy(e[2*rx:], io.src[y*w:(y+1)*w])
	clear(e[w+2*rx:])
}

// output takes output row m (its full width).
func (io *corrIO) output(m int, z []float32) {
	w, h, rx, ry := io.w, io.h, io.rx, io.ry
	if !io.adjoint {
		copy(io.dst[m*w:(m+1)*w], z)
		return
	}
	out := io.dst[raster.Mirror(m-ry, h)*w:][:w]
	for x, v := range z[rx : rx+w] {
		out[x] += v
	}
	for mx := 0; mx < rx; mx++ {
		out[raster.Mirror(mx-rx, w)] += z[mx]
		out[raster.Mirror(w+mx, w)] += z[w+rx+mx]
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
	f.top = grow(f.top, max(cin, cout))
	f.bot = grow(f.bot, max(cin, cout))
	top, bot := f.top[:cin], f.bot[:cin]
	for r := 0; r < nz; r++ {
		row := f.grid[r*q : (r+1)*q]
		io.input(top, r)
		if br := ho + r; br < rin {
			io.input(bot, br)
			for x := range top {
				row[x] = complex(top[x], bot[x])
			}
		} else {
			for x := range top {
				row[x] = complex(top[x], 0)
			}
		}
		clear(row[cin:])
	}
	clear(f.grid[nz*q:])
	f.rowPass(nz, false)
	// Columns: forward transform, multiply by the kernel spectrum, inverse,
	// all while the block is in cache.
	for c0 := 0; c0 < q; c0 += fftBatch {
		nb := min(fftBatch, q-c0)
		b := f.gatherCols(c0, nb)
		b = f.cols.transform(b, f.other(b), nb, false)
		cmulSlice(b[:p*nb], k[c0*p:c0*p+p*nb], io.adjoint)
		b = f.cols.transform(b, f.other(b), nb, true)
		for r := 0; r < p; r++ {
			copy(f.grid[r*q+c0:r*q+c0+nb], b[r*nb:(r+1)*nb])
		}
	}
	// Inverse rows: only the ho output rows.
	top, bot = f.top[:cout], f.bot[:cout]
	for r0 := 0; r0 < ho; r0 += fftBatch {
		nb := min(fftBatch, ho-r0)
		b := f.blk[:q*nb]
		g := f.grid[(r0ff+r0)*q:]
		transposeC(b, nb, g, q, nb, q)
		b = f.rows.transform(b, f.blk2, nb, true)
		transposeC(g, q, b, nb, q, nb) // back into the rows it came from
		for j := 0; j < nb; j++ {
			r := r0 + j
			br := ho + r
			row := g[j*q+c0ff : j*q+c0ff+cout]
			for x := range top {
				v := row[x]
				top[x], bot[x] = real(v), imag(v)
			}
			io.output(r, top)
			if br < rout {
				io.output(br, bot)
			}
		}
	}
}
