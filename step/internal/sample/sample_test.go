package sample

import "testing"

// smooth reports whether n's only prime factors are 2, 3 and 5, by trial
// division of the prime factors. Source: the definition of 5-smooth (regular, Hamming) numbers;
// the first ones are OEIS A051037: 1, 2, 3, 4, 5, 6, 8, 9, 10, 12, 15, 16,
// 18, 20, 24, 25, 27, 30, 32, 36, ...
func smooth(n int) bool {
	if n < 1 {
		return false
	}
	for p := 2; n > 1; p++ {
		for n%p == 0 {
			if p > 5 {
				return false
			}
			n /= p
		}
	}
	return true
}

func TestSmoothAtMost(t *testing.T) {
	// Source: OEIS A051037 (5-smooth numbers), first terms.
	want := []int{1, 2, 3, 4, 5, 6, 8, 9, 10, 12, 15, 16, 18, 20, 24, 25, 27, 30, 32, 36}
	var got []int
	for n := 1; n <= 36; n++ {
		if SmoothAtMost(n) == n {
			got = append(got, n)
		}
	}
	if len(got) != len(want) {
		t.Fatalf("fixed points of SmoothAtMost up to 36: %v, want %v", got, want)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("fixed points of SmoothAtMost up to 36: %v, want %v", got, want)
		}
	}
	for n := 2; n < 2000; n++ {
		m := SmoothAtMost(n)
		if m > n || !smooth(m) {
			t.Fatalf("SmoothAtMost(%d) = %d: not a 5-smooth number <= n", n, m)
		}
		for k := m + 1; k <= n; k++ {
			if smooth(k) {
				t.Fatalf("SmoothAtMost(%d) = %d but %d is 5-smooth and larger", n, m, k)
			}
		}
	}
	// The tile sizes of the default plan: 592 = 16 x 37 -> 576 = 2^6 x 3^2.
	if got := SmoothAtMost(592); got != 576 {
		t.Fatalf("SmoothAtMost(592) = %d, want 576", got)
	}
}

// Windows stay inside their span, centred (the offset is half the slack,
// rounded down) and 5-smooth long. Source: project contract (the choice's
// windows), checked against the smooth-number definition above.
func TestWindowCentredAndBounded(t *testing.T) {
	for _, c := range []struct{ a, b, side, wa, wb int }{
		{0, 592, 256, 168, 424}, // budget-bound: centred 256 (the 2048^2 default)
		{40, 592, 0, 46, 586},   // unbounded: the smooth length 540 <= 552, centred
		{0, 100, 256, 0, 100},   // shorter than the side and smooth already
		{10, 11, 128, 10, 11},   // one pixel
	} {
		a, b := Window(c.a, c.b, c.side)
		if a != c.wa || b != c.wb {
			t.Errorf("Window(%d, %d, %d) = [%d, %d), want [%d, %d)", c.a, c.b, c.side, a, b, c.wa, c.wb)
		}
		if a < c.a || b > c.b || !smooth(b-a) {
			t.Errorf("Window(%d, %d, %d) = [%d, %d): outside the span or not 5-smooth", c.a, c.b, c.side, a, b)
		}
	}
}

// The window side is the square root of the budget's share per tile, never
// below the floor. Source: project contract (the pixel budget), no outside
// source.
func TestSideFromBudget(t *testing.T) {
	// The default budget 2^20 over a 4 x 4 grid: windows of 256.
	if got := Side(1<<20, 16, 128); got != 256 {
		t.Errorf("Side(2^20, 16) = %d, want 256", got)
	}
	if got := Side(1<<20, 256, 128); got != 128 {
		t.Errorf("Side(2^20, 256) = %d, want the floor 128", got)
	}
	if got := Side(-1, 16, 128); got != 0 {
		t.Errorf("Side(-1, 16) = %d, want 0 (no bound)", got)
	}
}

// Sample indices are the centres of equal strata (stratified sampling:
// Cochran, Sampling Techniques, 3rd ed., 1977, chapter 5; recalled from
// memory), every index when there are fewer than the strata.
func TestGridEvenStrata(t *testing.T) {
	// Centres of 4 equal strata of 0..15: 2, 6, 10, 14 (int of 2.0, 6.0, ...).
	got := Grid(16, 4)
	want := []int{2, 6, 10, 14}
	for i := range want {
		if got[i] != want[i] {
			t.Fatalf("Grid(16, 4) = %v, want %v", got, want)
		}
	}
	if got := Grid(3, 4); len(got) != 3 || got[2] != 2 {
		t.Fatalf("Grid(3, 4) = %v, want every index", got)
	}
}
