package raster

import "testing"

// Half-sample symmetric reflection, the even extension that the DCT-II
// assumes (Martucci, IEEE Trans. Signal Process. 42(5):1038-1051, 1994);
// derived from its definition for n = 4: ... 1 0 | 0 1 2 3 | 3 2 ...
func TestMirror(t *testing.T) {
	want := map[int]int{-3: 2, -2: 1, -1: 0, 0: 0, 3: 3, 4: 3, 5: 2, 8: 0, 9: 1, -5: 3}
	for i, w := range want {
		if got := Mirror(i, 4); got != w {
			t.Errorf("Mirror(%d, 4) = %d, want %d", i, got, w)
		}
	}
	if Mirror(-7, 1) != 0 || Mirror(5, 1) != 0 {
		t.Error("length 1")
	}
}
