package raster

import "fmt"

// Mem is an in-memory scene implementing Reader and Writer (tests, demo,
// small products). Bands[i] holds Width*Height values.
type Mem struct {
	M     Meta
	Bands [][]float32
	// Committed is set by Commit.
	Committed bool
}

// NewMem allocates a zeroed scene for meta.
func NewMem(meta Meta) *Mem {
	m := &Mem{M: meta, Bands: make([][]float32, len(meta.Bands))}
	for i := range m.Bands {
		m.Bands[i] = make([]float32, meta.Width*meta.Height)
	}
	return m
}

// Meta implements Reader.
func (m *Mem) Meta() Meta { return m.M }

// ReadRows implements Reader.
func (m *Mem) ReadRows(y0, y1 int, bands []int, dst [][]float32) error {
	if y0 < 0 || y1 > m.M.Height || y0 >= y1 {
		return fmt.Errorf("raster: rows %d-%d outside 0-%d", y0, y1, m.M.Height)
	}
	W := m.M.Width
	for i, b := range bands {
		copy(dst[i][:(y1-y0)*W], m.Bands[b][y0*W:y1*W])
	}
	return nil
}

// WriteRows implements Writer.
func (m *Mem) WriteRows(y0, y1 int, src [][]float32) error {
	if y0 < 0 || y1 > m.M.Height || y0 >= y1 {
		return fmt.Errorf("raster: rows %d-%d outside 0-%d", y0, y1, m.M.Height)
	}
	W := m.M.Width
	for i := range m.Bands {
		copy(m.Bands[i][y0*W:y1*W], src[i][:(y1-y0)*W])
	}
	return nil
}

// Commit implements Writer.
func (m *Mem) Commit() error { m.Committed = true; return nil }

// Abort implements Writer.
func (m *Mem) Abort() {}
