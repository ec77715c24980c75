package rowio

import (
	"context"
	"errors"
	"testing"

	"limpid/raster"
)

// rowsReader fills row y of band b with 100 b + y and fails from row
// failAt on.
type rowsReader struct {
	w, h, failAt int
}

func (r rowsReader) Meta() raster.Meta { return raster.Meta{Width: r.w, Height: r.h} }

func (r rowsReader) ReadRows(y0, y1 int, bands []int, dst [][]float32) error {
	if y1 > r.failAt {
		return errors.New("broken row")
	}
	for i, b := range bands {
		for y := y0; y < y1; y++ {
			for x := 0; x < r.w; x++ {
				dst[i][(y-y0)*r.w+x] = float32(100*b + y)
			}
		}
	}
	return nil
}

// TestAheadOrder: the strips come back in the spans' order with their rows
// (project requirement: the tile pipeline's order), through two buffers.
func TestAheadOrder(t *testing.T) {
	src := rowsReader{w: 3, h: 40, failAt: 1 << 30}
	spans := []Span{{0, 10}, {8, 20}, {18, 30}, {28, 40}}
	a := NewAhead(context.Background(), src, []int{1, 0}, spans, 2, 3*12)
	defer a.Close()
	for _, s := range spans {
		st, err := a.Next(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		if st.Y != s.Start {
			t.Fatalf("strip at row %d, want %d", st.Y, s.Start)
		}
		for y := s.Start; y < s.End; y++ {
			if got := st.Rows[0][(y-s.Start)*3+2]; got != float32(100+y) {
				t.Fatalf("band 2 row %d: %v, want %v", y, got, 100+y)
			}
			if got := st.Rows[1][(y-s.Start)*3]; got != float32(y) {
				t.Fatalf("band 1 row %d: %v, want %v", y, got, y)
			}
		}
		a.Release(st)
	}
}

// TestAheadError: a read failure comes back from Next in its turn, after
// the strips read before it; Close returns with the reader stopped.
func TestAheadError(t *testing.T) {
	src := rowsReader{w: 2, h: 40, failAt: 15}
	a := NewAhead(context.Background(), src, []int{0}, []Span{{0, 10}, {10, 20}, {20, 30}}, 2, 2*10)
	st, err := a.Next(context.Background())
	if err != nil || st.Y != 0 {
		t.Fatalf("first strip: %v, %v", st, err)
	}
	if _, err := a.Next(context.Background()); err == nil {
		t.Fatal("the failing read gave no error")
	}
	a.Close()
	// A cancelled caller gets its context's error.
	b := NewAhead(context.Background(), src, []int{0}, []Span{{0, 10}, {10, 12}, {12, 14}}, 2, 2*10)
	defer b.Close()
	b.Next(context.Background())
	b.Next(context.Background())
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := b.Next(ctx); !errors.Is(err, context.Canceled) {
		t.Fatalf("Next with no free strip and a cancelled context: %v, want context.Canceled", err)
	}
}

// sink records WriteRows calls and fails from the call failAt on.
type sink struct {
	y0s    []int
	failAt int
}

func (s *sink) WriteRows(y0, y1 int, src [][]float32) error {
	if len(s.y0s) == s.failAt {
		return errors.New("disk full")
	}
	s.y0s = append(s.y0s, y0)
	return nil
}
func (s *sink) Commit() error { return nil }
func (s *sink) Abort()        {}

// TestWriterOrderAndFailure: rows are written in the order queued through
// one buffer set, and the first failure is what Buffer and Close return.
func TestWriterOrderAndFailure(t *testing.T) {
	s := &sink{failAt: 1 << 30}
	w := NewWriter(s, nil, 1, 4, false)
	for y := 0; y < 5; y++ {
		bufs, err := w.Buffer()
		if err != nil {
			t.Fatal(err)
		}
		w.Write(Job{Y0: y, Y1: y + 1, Rows: bufs})
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	for i, y := range s.y0s {
		if y != i {
			t.Fatalf("writes at rows %v, want 0 1 2 3 4", s.y0s)
		}
	}
	f := &sink{failAt: 1}
	w = NewWriter(f, nil, 1, 4, false)
	var err error
	for y := 0; y < 5 && err == nil; y++ {
		var bufs [][]float32
		if bufs, err = w.Buffer(); err == nil {
			w.Write(Job{Y0: y, Y1: y + 1, Rows: bufs})
		}
	}
	if cerr := w.Close(); cerr == nil || (err != nil && err != cerr) {
		t.Fatalf("Buffer gave %v, Close %v; want the write failure from Close (and Buffer)", err, cerr)
	}
	if len(f.y0s) != 1 {
		t.Fatalf("%d writes after the failure's predecessor, want 1", len(f.y0s))
	}
}
