package sample

import (
	"math"

	"limpid/step/conv"
)

// Grid returns up to perAxis indices of 0..n-1 spread evenly (the centres
// of perAxis equal strata); all of them when n <= perAxis.
func Grid(n, perAxis int) []int {
	if n <= perAxis {
		out := make([]int, n)
		for i := range out {
			out[i] = i
		}
		return out
	}
	out := make([]int, perAxis)
	for i := range out {
		out[i] = int((float64(i) + 0.5) * float64(n) / float64(perAxis))
	}
	return out
}

// Side is the side of the sample windows when budget pixels are shared by
// tiles windows, never below minSide (budget < 0: no bound, 0).
func Side(budget, tiles, minSide int) int {
	if budget < 0 {
		return 0
	}
	return max(minSide, int(math.Sqrt(float64(budget)/float64(max(1, tiles)))))
}

// Window shrinks [a, b) to a centred span of at most side pixels (side 0:
// any length) whose length is 2,3,5-smooth.
func Window(a, b, side int) (int, int) {
	n := b - a
	if side > 0 {
		n = min(n, side)
	}
	n = SmoothAtMost(n)
	a += (b - a - n) / 2
	return a, a + n
}

// SmoothAtMost returns the largest n' <= n whose only prime factors are 2,
// 3 and 5 (conv.Smooth235; 1 for n < 2). Measured with gonum v0.17: the
// 592^2 DCT (592 = 16 x 37) took twice the 576^2 one; the float32 route of
// the risk's DCT (conv.DCT2.Energy) takes only such lengths.
func SmoothAtMost(n int) int {
	for m := n; m > 1; m-- {
		if conv.Smooth235(m) {
			return m
		}
	}
	return 1
}
