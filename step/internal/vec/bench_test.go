package vec

import (
	"math/rand/v2"
	"testing"
)

// colBench is one output row of a 13-tap column pass on 2048-wide rows
// (sigma 1.5 Gaussian PSF, the README's default band width class): 13 source
// rows, one tap each.
type colBench struct {
	dst, src []float32
	offs     []int
	k        []float32
}

func newColBench() *colBench {
	const w, taps = 2048, 13
	r := rand.New(rand.NewPCG(1, 2))
	c := &colBench{dst: make([]float32, w), src: randSlice(r, w*taps), offs: make([]int, taps), k: randSlice(r, taps)}
	for t := range c.offs {
		c.offs[t] = t * w
	}
	return c
}

func (c *colBench) report(b *testing.B) {
	b.ReportMetric(float64(len(c.dst))*float64(b.N)/b.Elapsed().Seconds()/1e6, "Mpix/s")
}

// BenchmarkColumnAxpy is the former scalar column pass: one y += a x sweep
// per tap.
func BenchmarkColumnAxpy(b *testing.B) {
	c := newColBench()
	w := len(c.dst)
	for b.Loop() {
		clear(c.dst)
		for t, kt := range c.k {
			x := c.src[c.offs[t] : c.offs[t]+w]
			for i := range c.dst {
				c.dst[i] += kt * x[i]
			}
		}
	}
	c.report(b)
}

// BenchmarkColumnCorr is the same row through Corr, portable and vector.
func BenchmarkColumnCorr(b *testing.B) { benchCorr(b, 0) }

// BenchmarkRowCorr is a 13-tap row pass (one source row) on 2048 pixels.
func BenchmarkRowCorr(b *testing.B) { benchCorr(b, 1) }

// benchCorr runs Corr over rows source rows of a colBench (0: all of them),
// as sub-benchmarks portable and, on CPUs with the vector kernels, vector.
func benchCorr(b *testing.B, rows int) {
	c := newColBench()
	offs := c.offs
	if rows > 0 {
		offs = offs[:rows]
	}
	defer SetPortable(false)
	for _, portable := range []bool{true, false} {
		name := "vector"
		if portable {
			name = "portable"
		} else if !hasAccel {
			continue
		}
		b.Run(name, func(b *testing.B) {
			SetPortable(portable)
			for b.Loop() {
				Corr(c.dst, c.src, offs, c.k, false)
			}
			c.report(b)
		})
	}
}
