package draw

import (
	"math"
	"math/rand/v2"

	"limpid/psf"
	"limpid/step/resample"
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

// Jump samples only the particles that move when most do not (small
// eps: each axis stays with probability 1 - eps^2): the gap to the next
// moving particle is geometric with parameter p = 1 - kx(0) ky(0), and the
// moving particle's (dx, dy) is drawn from the product kernel conditioned on
// (dx, dy) != (0, 0). The law of every particle's move is unchanged.
type Jump struct {
	On     bool     // the table is in use (p <= JumpMaxP)
	logq   float64  // log(1 - p)
	Cum    []uint64 // CDF over the non-zero moves, 32-bit fixed point
	DX, DY []float32
}

// JumpMaxP: above this move probability the per-particle draw is cheaper.
const JumpMaxP = 0.25

// NewJump is the table of the product of the 1-D kernels kx and ky (nil:
// no move on that axis); On is false when a move is more likely than
// JumpMaxP.
func NewJump(kx, ky []float64) Jump {
	if kx == nil {
		kx = []float64{1}
	}
	if ky == nil {
		ky = []float64{1}
	}
	rx, ry := (len(kx)-1)/2, (len(ky)-1)/2
	p := 1 - kx[rx]*ky[ry]
	if !(p > 0) || p > JumpMaxP {
		return Jump{}
	}
	j := Jump{On: true, logq: math.Log1p(-p)}
	var acc float64
	for ty, vy := range ky {
		for tx, vx := range kx {
			if tx == rx && ty == ry {
				continue
			}
			acc += vx * vy / p
			j.Cum = append(j.Cum, uint64(math.Round(acc*(1<<32))))
			j.DX = append(j.DX, float32(tx-rx))
			j.DY = append(j.DY, float32(ty-ry))
		}
	}
	j.Cum[len(j.Cum)-1] = 1 << 32
	return j
}

// Gap draws the number of particles that stay before the next one moves.
func (j *Jump) Gap(r *rand.PCG) int {
	g := math.Log(1-resample.Uniform(r)) / j.logq
	if g > 1<<40 {
		return 1 << 40
	}
	return int(g)
}
