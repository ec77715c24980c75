package step

import (
	"encoding/json"
	"math"
	"os"
	"testing"

	"limpid/psf"
	"limpid/step/conv"
)

// Source: scikit-image 0.19.3 skimage.restoration.richardson_lucy (Debian
// python3-skimage), vectors made by testdata/ref/make_rl_reference.py.
// scikit-image pads with zeros and starts from 0.5; limpid mirrors the
// border and starts flat. After the first iteration any flat start gives the
// same iterate where s = 1, so the two agree exactly wherever the border has
// not reached: 2 r pixels per iteration (one convolution and one correlation
// of radius r). The comparison skips that margin.
func TestRichardsonLucyMatchesScikitImage(t *testing.T) {
	b, err := os.ReadFile("../testdata/ref/rl_skimage.json")
	if err != nil {
		t.Fatal(err)
	}
	var ref struct {
		Cases []struct {
			Name          string
			Width, Height int
			Iterations    int
			Image, PSF    []float64
			PSFSize       [2]int `json:"psf_size"`
			Skimage       []float64
		}
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatal(err)
	}
	// float32 arithmetic against float64: ~50 rounding steps of 6e-8 per
	// iteration, 5 iterations: relative 1e-5 with margin.
	const tol = 1e-5
	for _, c := range ref.Cases {
		k, err := psf.NewKernel(c.PSFSize[1], c.PSFSize[0], c.PSF)
		if err != nil {
			t.Fatal(err)
		}
		w, h := c.Width, c.Height
		d := make([]float32, w*h)
		for i, v := range c.Image {
			d[i] = float32(v)
		}
		g := &GridEMS{H: conv.New(k), Iterations: c.Iterations}
		f, _ := solve(t, g, d, ones(w*h), w, h, 0)
		margin := 2 * max(k.Rx(), k.Ry()) * (c.Iterations + 1)
		n := 0
		for y := margin; y < h-margin; y++ {
			for x := margin; x < w-margin; x++ {
				i := y*w + x
				want := c.Skimage[i]
				if math.Abs(float64(f[i])-want) > tol*math.Abs(want) {
					t.Fatalf("%s (%s): pixel (%d,%d) = %.7g, scikit-image %.7g", c.Name, conv.New(k).Kind(), x, y, f[i], want)
				}
				n++
			}
		}
		if n < 1000 {
			t.Fatalf("%s: only %d pixels compared", c.Name, n)
		}
	}
}
