package draw

import (
	"math"

	"limpid/psf"
)

// Move samples an integer displacement from a 1-D kernel by inversion
// of its CDF in 32-bit fixed point.
type Move struct {
	cum []uint64 // cum[t] = round(2^32 * sum_{u <= t} k[u]); last = 2^32
	r   int
}

// NewMove is the sampler of kernel k (odd length, sums to 1); a kernel of
// length <= 1 gives the zero Move, which never moves (On is false).
func NewMove(k []float64) Move {
	if len(k) <= 1 {
		return Move{}
	}
	m := Move{cum: make([]uint64, len(k)), r: (len(k) - 1) / 2}
	var acc float64
	for i, v := range k {
		acc += v
		m.cum[i] = uint64(math.Round(acc * (1 << 32)))
	}
	m.cum[len(k)-1] = 1 << 32
	return m
}

// On reports whether the kernel moves at all.
func (m *Move) On() bool { return m.cum != nil }

// Move maps a 32-bit uniform to a displacement in [-r, r].
func (m *Move) Move(u uint32) float32 {
	t := 0
	for uint64(u) >= m.cum[t] {
		t++
	}
	return float32(t - m.r)
}

// Alias is Walker's alias method (Walker, ACM TOMS 3:253, 1977; Vose's
// construction, IEEE TSE 17:972, 1991) over the PSF taps.
type Alias struct {
	prob   []uint32
	alias  []int32
	DX, DY []int32 // each tap's offset
}

// NewAlias is the sampler of the taps of kernel k.
func NewAlias(k *psf.Kernel) Alias {
	n := len(k.Data)
	a := Alias{prob: make([]uint32, n), alias: make([]int32, n), DX: make([]int32, n), DY: make([]int32, n)}
	var sum float64
	for _, v := range k.Data {
		sum += v
	}
	p := make([]float64, n)
	var small, large []int
	for i, v := range k.Data {
		p[i] = v / sum * float64(n)
		a.DX[i] = int32(i%k.W - k.Rx())
		a.DY[i] = int32(i/k.W - k.Ry())
		if p[i] < 1 {
			small = append(small, i)
		} else {
			large = append(large, i)
		}
	}
	for len(small) > 0 && len(large) > 0 {
		s, l := small[len(small)-1], large[len(large)-1]
		small = small[:len(small)-1]
		a.prob[s] = uint32(math.Min(p[s]*(1<<32), math.MaxUint32))
		a.alias[s] = int32(l)
		p[l] -= 1 - p[s]
		if p[l] < 1 {
			large = large[:len(large)-1]
			small = append(small, l)
		}
	}
	for _, i := range append(small, large...) {
		a.prob[i] = math.MaxUint32
		a.alias[i] = int32(i)
	}
	return a
}

// Draw returns a tap index from 64 random bits.
func (a *Alias) Draw(u uint64) int {
	k := int((u >> 32) * uint64(len(a.prob)) >> 32)
	if uint32(u) < a.prob[k] {
		return k
	}
	return int(a.alias[k])
}
