package mix

// Golden is 2^64 / phi, SplitMix64's increment.
const Golden = 0x9E3779B97F4A7C15

// Finalize is the SplitMix64 finaliser: a bijection of 64-bit words whose
// output bits each depend on every input bit.
func Finalize(x uint64) uint64 {
	x ^= x >> 30
	x *= 0xBF58476D1CE4E5B9
	x ^= x >> 27
	x *= 0x94D049BB133111EB
	x ^= x >> 31
	return x
}

// Counter is SplitMix64's output for state x: Finalize(x + Golden). A
// counter-based source: Counter(base ^ i) are independent-looking bits.
func Counter(x uint64) uint64 { return Finalize(x + Golden) }

// ParticleStream is the particle method's PCG stream word of the tile
// (band, col, row), all 0-based.
func ParticleStream(band, col, row int) uint64 {
	return Finalize(uint64(band+1)*Golden ^ uint64(col+1)*0xC2B2AE3D27D4EB4F ^ uint64(row+1)*0x165667B19E3779F9)
}

// ProbeStream is the automatic choice's probe stream of the tile (band,
// col, row), all 0-based.
func ProbeStream(band, col, row int) uint64 {
	return Counter(uint64(band)*0x100000001b3 ^ uint64(col)<<21 ^ uint64(row)<<42)
}

// Pair mixes two integers with a shorter, two-multiply variant of the
// finaliser (one multiply and two shifts after the packing). It draws the
// demo scenes' textures and the simulated noise's row streams.
func Pair(i, j int) uint64 {
	x := uint64(int64(i))*Golden ^ uint64(int64(j))*0xC2B2AE3D27D4EB4F
	x ^= x >> 31
	x *= 0xBF58476D1CE4E5B9
	x ^= x >> 29
	return x
}
