package step

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"

	"limpid/raster"
	"limpid/step/conv"
)

// Simulation: the degradation that turns a sharp scene into an observation,
// for validating restoration settings on data whose truth is known. It
// follows limpid's PSF convention (the input is the scene as an ideal sensor
// on the same grid records it; the PSF operator is the Conv restore uses,
// half-sample symmetric boundaries), then adds sensor noise and quantises.

// SimNoise is the noise simulate adds, in DN.
//
//   - "poisson": DN = Gain * Poisson(s / Gain) + Normal(0, Read^2): mean s,
//     variance Gain*s + Read^2 (a Poisson-Gaussian sensor with Gain DN per
//     photo-electron; the same model as noise.Model with A = Gain, B = Read^2).
//   - "gaussian": DN = s + Normal(0, Sigma^2).
//   - "none": DN = s.
type SimNoise struct {
	Kind              string
	Gain, Read, Sigma float64
}

// Variance is the model variance at blurred signal s (s < 0 counts as 0 for
// the Poisson part).
func (n SimNoise) Variance(s float64) float64 {
	switch n.Kind {
	case "poisson":
		return n.Gain*math.Max(s, 0) + n.Read*n.Read
	case "gaussian":
		return n.Sigma * n.Sigma
	}
	return 0
}

// ParseSimNoise reads "poisson:gain=G,read=R", "gaussian:sigma=S" or "none".
func ParseSimNoise(spec string) (SimNoise, error) {
	spec = strings.TrimSpace(spec)
	name, rest, _ := strings.Cut(spec, ":")
	bad := func(format string, a ...any) (SimNoise, error) {
		return SimNoise{}, fmt.Errorf("%w: --noise %q: %s", ErrConfig, spec, fmt.Sprintf(format, a...))
	}
	keys := map[string]float64{}
	if rest != "" {
		for _, kv := range strings.Split(rest, ",") {
			k, v, ok := strings.Cut(strings.TrimSpace(kv), "=")
			x, err := strconv.ParseFloat(v, 64)
			if !ok || err != nil || math.IsNaN(x) || math.IsInf(x, 0) || x < 0 || x > 1e12 {
				return bad("%q: give key=value with a number between 0 and 1e12", kv)
			}
			if _, dup := keys[k]; dup {
				return bad("%s is given twice", k)
			}
			keys[k] = x
		}
	}
	take := func(allowed ...string) error {
		for k := range keys {
			found := false
			for _, a := range allowed {
				found = found || k == a
			}
			if !found {
				return fmt.Errorf("%w: --noise %q: unknown key %q for %s (use %s)", ErrConfig, spec, k, name, strings.Join(allowed, ", "))
			}
		}
		return nil
	}
	switch name {
	case "poisson":
		if err := take("gain", "read"); err != nil {
			return SimNoise{}, err
		}
		g, ok := keys["gain"]
		if !ok || g <= 0 {
			return bad("poisson needs gain > 0 (DN per photo-electron), e.g. poisson:gain=0.4,read=3")
		}
		return SimNoise{Kind: "poisson", Gain: g, Read: keys["read"]}, nil
	case "gaussian":
		if err := take("sigma"); err != nil {
			return SimNoise{}, err
		}
		s, ok := keys["sigma"]
		if !ok {
			return bad("gaussian needs sigma (DN), e.g. gaussian:sigma=5")
		}
		return SimNoise{Kind: "gaussian", Sigma: s}, nil
	case "none":
		if rest != "" {
			return bad("none takes no parameters")
		}
		return SimNoise{Kind: "none"}, nil
	}
	return bad("unknown noise model %q: use poisson:gain=G,read=R, gaussian:sigma=S or none", name)
}

// SimConfig configures Simulate.
type SimConfig struct {
	H     *conv.Operator
	Noise SimNoise
	// Seed selects the random streams; the stream of a pixel depends only on
	// Seed, its band and its row, so the output is the same for any strip
	// size.
	Seed uint64
	// DataType is the output type: integer types are rounded to nearest
	// (ties to even) and clamped to the type's range; "" or a float type
	// keeps float values.
	DataType string
	// NoData and HasNoData describe the input's nodata; invalid pixels (NaN,
	// nodata) stay invalid (NaN to the writer).
	NoData    float64
	HasNoData bool
	// OutNoData is the output's nodata value: a valid pixel whose quantised
	// value would equal it is moved one step towards the type's interior, so
	// no valid pixel becomes nodata.
	OutNoData    float64
	HasOutNoData bool
	// Strip is the number of output rows per read (0: 256).
	Strip int
}

// Simulate reads every band of src strip by strip (each strip with a halo of
// the PSF's row radius, mirrored at the scene's top and bottom: the same
// half-sample symmetric extension as a whole-scene Conv.Apply), blurs it,
// adds noise and quantises it into dst. Near invalid pixels the blur is the
// normalised convolution H(v w) / H(w) over valid pixels w (v the values);
// with no invalid pixel this is H v. Memory: about (Strip + 2 ry) x width x
// bands x 3 float32.
func Simulate(ctx context.Context, src raster.Reader, dst raster.Writer, cfg SimConfig) error {
	m := src.Meta()
	W, Hh := m.Width, m.Height
	nb := len(m.Bands)
	strip := cfg.Strip
	if strip <= 0 {
		strip = 256
	}
	_, ry := cfg.H.Radius()
	lo, hi, integer := raster.TypeRange(cfg.DataType)
	bands := make([]int, nb)
	for i := range bands {
		bands[i] = i
	}
	var ws conv.Work
	maxExt := min(strip, Hh) + 2*ry
	in := make([][]float32, nb)
	for i := range in {
		in[i] = make([]float32, (min(strip, Hh)+2*ry)*W)
	}
	ext := make([]float32, maxExt*W)
	mask := make([]float32, maxExt*W)
	blur := make([]float32, maxExt*W)
	wblur := make([]float32, maxExt*W)
	out := make([][]float32, nb)
	for i := range out {
		out[i] = make([]float32, min(strip, Hh)*W)
	}
	pcg := rand.NewPCG(0, 0)
	rng := rand.New(pcg)
	for y0 := 0; y0 < Hh; y0 += strip {
		if err := ctx.Err(); err != nil {
			return err
		}
		y1 := min(y0+strip, Hh)
		// Rows [r0, r1) of the scene cover the strip and its halo inside the
		// scene; the halo beyond the scene is mirrored from them.
		r0, r1 := max(0, y0-ry), min(Hh, y1+ry)
		rows := make([][]float32, nb)
		for i := range rows {
			rows[i] = in[i][:(r1-r0)*W]
		}
		if err := src.ReadRows(r0, r1, bands, rows); err != nil {
			return err
		}
		eh := y1 - y0 + 2*ry
		for b := 0; b < nb; b++ {
			e, mk := ext[:eh*W], mask[:eh*W]
			anyBad := false
			for j := 0; j < eh; j++ {
				sy := raster.Mirror(y0-ry+j, Hh) - r0
				row := rows[b][sy*W : (sy+1)*W]
				for x, v := range row {
					if raster.Valid(v, cfg.NoData, cfg.HasNoData, 0, false) {
						e[j*W+x], mk[j*W+x] = v, 1
					} else {
						e[j*W+x], mk[j*W+x] = 0, 0
						anyBad = true
					}
				}
			}
			bl := blur[:eh*W]
			cfg.H.Apply(&ws, bl, e, W, eh)
			if anyBad {
				wb := wblur[:eh*W]
				cfg.H.Apply(&ws, wb, mk, W, eh)
				for i := range bl {
					if wb[i] > 1e-6 {
						bl[i] /= wb[i]
					}
				}
			}
			o := out[b][:(y1-y0)*W]
			for j := 0; j < y1-y0; j++ {
				y := y0 + j
				pcg.Seed(cfg.Seed, simStream(b, y))
				for x := 0; x < W; x++ {
					k := (j+ry)*W + x
					if mk[k] == 0 {
						o[j*W+x] = float32(math.NaN())
						continue
					}
					s := float64(bl[k])
					switch cfg.Noise.Kind {
					case "poisson":
						s = cfg.Noise.Gain * float64(Poisson(rng, math.Max(s, 0)/cfg.Noise.Gain))
						if cfg.Noise.Read > 0 {
							s += cfg.Noise.Read * rng.NormFloat64()
						}
					case "gaussian":
						s += cfg.Noise.Sigma * rng.NormFloat64()
					}
					if integer {
						s = math.RoundToEven(s)
						s = math.Min(hi, math.Max(lo, s))
						if cfg.HasOutNoData && s == cfg.OutNoData {
							if s < hi {
								s++
							} else {
								s--
							}
						}
					}
					o[j*W+x] = float32(s)
				}
			}
		}
		if err := dst.WriteRows(y0, y1, sliceRows(out, (y1-y0)*W)); err != nil {
			return err
		}
	}
	return nil
}

func sliceRows(p [][]float32, n int) [][]float32 {
	s := make([][]float32, len(p))
	for i := range p {
		s[i] = p[i][:n]
	}
	return s
}

// simStream is the PCG stream selector of band b, row y.
func simStream(b, y int) uint64 {
	return hash2(b+0x51, y) ^ 0x6A09E667F3BCC909
}
