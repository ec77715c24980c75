package mix

import "testing"

// Source: the SplitMix64 reference generator (Steele, Lea & Flood, OOPSLA
// 2014; Vigna's splitmix64.c): from state 0 its first outputs are
// 0xE220A8397B1DCDAF, 0x6E789E6AA1B965F4, 0x06C45D188009454F (recalled from
// memory; the test passing on three consecutive values confirms them).
// Counter(x) is that generator's output for state x, so Counter(k Golden)
// must give the k-th output.
func TestCounterIsSplitMix64(t *testing.T) {
	want := []uint64{0xE220A8397B1DCDAF, 0x6E789E6AA1B965F4, 0x06C45D188009454F}
	for k, w := range want {
		if got := Counter(uint64(k) * Golden); got != w {
			t.Errorf("output %d: %#x, want %#x", k, got, w)
		}
	}
}

// Derived: ParticleStream and ProbeStream are Finalize and Counter of their
// documented packings (the packings are frozen: outputs recorded with a
// given --seed depend on them).
func TestStreamsArePackedFinalisers(t *testing.T) {
	b, c, r := 2, 5, 7
	if got, want := ParticleStream(b, c, r), Finalize(uint64(b+1)*Golden^uint64(c+1)*0xC2B2AE3D27D4EB4F^uint64(r+1)*0x165667B19E3779F9); got != want {
		t.Errorf("ParticleStream: %#x, want %#x", got, want)
	}
	if got, want := ProbeStream(b, c, r), Counter(uint64(b)*0x100000001b3^uint64(c)<<21^uint64(r)<<42); got != want {
		t.Errorf("ProbeStream: %#x, want %#x", got, want)
	}
	if ParticleStream(0, 0, 1) == ParticleStream(0, 1, 0) || ProbeStream(0, 0, 1) == ProbeStream(0, 1, 0) {
		t.Error("neighbouring tiles share a stream")
	}
}
