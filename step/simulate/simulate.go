package simulate

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"

	"limpid/raster"
	"limpid/step"
	"limpid/step/conv"
	"limpid/step/mix"
	"limpid/step/scene"
)

// NoiseKind is the model of the noise Simulate adds. The zero value is
// NoiseNone. Its text form ("none", "poisson", "gaussian") is the name
// ParseNoise reads.
type NoiseKind int

const (
	// NoiseNone adds nothing: DN = s.
	NoiseNone NoiseKind = iota
	// NoisePoisson is a Poisson-Gaussian sensor:
	// DN = Gain * scene.Poisson(s / Gain) + Normal(0, Read^2).
	NoisePoisson
	// NoiseGaussian is additive white noise: DN = s + Normal(0, Sigma^2).
	NoiseGaussian
)

var noiseKindNames = [...]string{NoiseNone: "none", NoisePoisson: "poisson", NoiseGaussian: "gaussian"}

// String returns the kind's name as ParseNoise reads it.
func (k NoiseKind) String() string {
	if k >= 0 && int(k) < len(noiseKindNames) {
		return noiseKindNames[k]
	}
	return "NoiseKind(" + strconv.Itoa(int(k)) + ")"
}

// ParseNoiseKind returns the kind named name ("none", "poisson" or
// "gaussian"); ok is false for any other name.
func ParseNoiseKind(name string) (k NoiseKind, ok bool) {
	for i, n := range noiseKindNames {
		if n == name {
			return NoiseKind(i), true
		}
	}
	return NoiseNone, false
}

// MarshalText writes the kind's name, so JSON carries the same spelling as
// the noise specification.
func (k NoiseKind) MarshalText() ([]byte, error) {
	if k < 0 || int(k) >= len(noiseKindNames) {
		return nil, fmt.Errorf("step: %v has no name", k)
	}
	return []byte(k.String()), nil
}

// UnmarshalText reads a name written by MarshalText.
func (k *NoiseKind) UnmarshalText(b []byte) error {
	v, ok := ParseNoiseKind(string(b))
	if !ok {
		return &Error{Field: "Noise", Value: string(b), Reason: "unknown noise model: use poisson, gaussian or none"}
	}
	*k = v
	return nil
}

// Noise is the noise simulate adds, in DN. The zero value adds no noise.
//
//   - NoisePoisson: DN = Gain * scene.Poisson(s / Gain) + Normal(0, Read^2): mean
//     s, variance Gain*s + Read^2 (a Poisson-Gaussian sensor with Gain DN
//     per photo-electron; the same model as noise.Model with A = Gain,
//     B = Read^2).
//   - NoiseGaussian: DN = s + Normal(0, Sigma^2).
//   - NoiseNone: DN = s.
type Noise struct {
	Kind              NoiseKind
	Gain, Read, Sigma float64
}

// Variance is the model variance at blurred signal s (s < 0 counts as 0 for
// the Poisson part).
func (n Noise) Variance(s float64) float64 {
	switch n.Kind {
	case NoisePoisson:
		return n.Gain*math.Max(s, 0) + n.Read*n.Read
	case NoiseGaussian:
		return n.Sigma * n.Sigma
	}
	return 0
}

// Error is a simulation setting that cannot be used. Field names the
// setting ("Noise": the noise specification ParseNoise reads; "H",
// "DataType" and "NoData": the Config fields), Value is the value given
// (the specification, the type name, the nodata value as %g; "" for H) and
// Reason says what is wrong. It wraps step.ErrConfig.
type Error struct {
	Field, Value, Reason string
}

func (e *Error) Error() string {
	if e.Value == "" {
		return fmt.Sprintf("%v: %s: %s", step.ErrConfig, e.Field, e.Reason)
	}
	return fmt.Sprintf("%v: %s %q: %s", step.ErrConfig, e.Field, e.Value, e.Reason)
}

// Unwrap returns step.ErrConfig.
func (e *Error) Unwrap() error { return step.ErrConfig }

// ParseNoise reads "poisson:gain=G,read=R", "gaussian:sigma=S" or "none".
// Errors are *Error with Field "Noise" and Value the trimmed spec.
func ParseNoise(spec string) (Noise, error) {
	spec = strings.TrimSpace(spec)
	name, rest, _ := strings.Cut(spec, ":")
	bad := func(format string, a ...any) (Noise, error) {
		return Noise{}, &Error{Field: "Noise", Value: spec, Reason: fmt.Sprintf(format, a...)}
	}
	keys, err := simNoiseKeys(rest)
	if err != nil {
		return bad("%s", err)
	}
	take := func(allowed ...string) error {
		for k := range keys {
			found := false
			for _, a := range allowed {
				found = found || k == a
			}
			if !found {
				return fmt.Errorf("unknown key %q for %s (use %s)", k, name, strings.Join(allowed, ", "))
			}
		}
		return nil
	}
	kind, ok := ParseNoiseKind(name)
	switch {
	case !ok:
		return bad("unknown noise model %q: use poisson:gain=G,read=R, gaussian:sigma=S or none", name)
	case kind == NoisePoisson:
		if err := take("gain", "read"); err != nil {
			return bad("%s", err)
		}
		g, ok := keys["gain"]
		if !ok || g <= 0 {
			return bad("poisson needs gain > 0 (DN per photo-electron), e.g. poisson:gain=0.4,read=3")
		}
		return Noise{Kind: NoisePoisson, Gain: g, Read: keys["read"]}, nil
	case kind == NoiseGaussian:
		if err := take("sigma"); err != nil {
			return bad("%s", err)
		}
		s, ok := keys["sigma"]
		if !ok {
			return bad("gaussian needs sigma (DN), e.g. gaussian:sigma=5")
		}
		return Noise{Kind: NoiseGaussian, Sigma: s}, nil
	}
	if rest != "" {
		return bad("none takes no parameters")
	}
	return Noise{Kind: NoiseNone}, nil
}

// simNoiseKeys reads the comma-separated key=value list of a noise
// specification; every value is a number between 0 and 1e12.
func simNoiseKeys(rest string) (map[string]float64, error) {
	keys := map[string]float64{}
	if rest == "" {
		return keys, nil
	}
	for _, kv := range strings.Split(rest, ",") {
		k, v, ok := strings.Cut(strings.TrimSpace(kv), "=")
		x, err := strconv.ParseFloat(v, 64)
		if !ok || err != nil || math.IsNaN(x) || math.IsInf(x, 0) || x < 0 || x > 1e12 {
			return nil, fmt.Errorf("%q: give key=value with a number between 0 and 1e12", kv)
		}
		if _, dup := keys[k]; dup {
			return nil, fmt.Errorf("%s is given twice", k)
		}
		keys[k] = x
	}
	return keys, nil
}

// DefaultStrip is the number of output rows Simulate reads at a time when
// Config.Strip is 0.
const DefaultStrip = 256

// DataTypes are the output data types Simulate writes when asked for one
// (Config.DataType "" keeps the input's).
var DataTypes = []string{"Byte", "UInt16", "Int16", "UInt32", "Int32", "Float32"}

// CheckDataType returns a *Error with Field "DataType" unless t is one
// of DataTypes.
func CheckDataType(t string) error {
	for _, s := range DataTypes {
		if t == s {
			return nil
		}
	}
	return &Error{Field: "DataType", Value: t, Reason: "use " + strings.Join(DataTypes, ", ")}
}

// Config configures Simulate. Its zero value adds no noise, keeps float
// values and reads DefaultStrip rows at a time; H must be set.
type Config struct {
	// H is the PSF operator (required).
	H     *conv.Operator
	Noise Noise
	// Seed selects the random streams; the stream of a pixel depends only on
	// Seed, its band and its row, so the output is the same for any strip
	// size.
	Seed uint64
	// DataType is the output type: integer types are rounded to nearest
	// (ties to even) and clamped to the type's range; a float type keeps
	// float values. Resolve turns "" into the input's type; Simulate alone
	// treats "" as a float type.
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
	// Strip is the number of output rows per read (0: DefaultStrip).
	Strip int
}

// Resolve fills the fields that follow from the input's metadata in:
//   - DataType "" becomes the input's type (Float64 becomes Float32); any
//     other value must be one of DataTypes;
//   - NoData, HasNoData: the nodata of the input's first band that has one
//     (a GeoTIFF has one value for all bands);
//   - OutNoData, HasOutNoData: the input's nodata; else, when invalid pixels
//     can occur (a float input), NaN for a float output and the type's
//     maximum for an integer one. A NaN nodata cannot be stored in an integer
//     type: it becomes the type's maximum.
//
// Errors are *Error: Field "DataType" for an unknown type, "NoData" when
// the input's nodata cannot be stored in the output type.
func (cfg *Config) Resolve(in raster.Meta) error {
	if cfg.DataType == "" {
		cfg.DataType = in.DataType
		if cfg.DataType == "Float64" {
			cfg.DataType = "Float32"
		}
	} else if err := CheckDataType(cfg.DataType); err != nil {
		return err
	}
	cfg.NoData, cfg.HasNoData = 0, false
	for _, b := range in.Bands {
		if b.HasNoData {
			cfg.NoData, cfg.HasNoData = b.NoData, true
			break
		}
	}
	inND := cfg.NoData
	cfg.OutNoData, cfg.HasOutNoData = inND, cfg.HasNoData
	_, _, inInt := raster.TypeRange(in.DataType)
	lo, hi, outInt := raster.TypeRange(cfg.DataType)
	switch {
	case cfg.HasOutNoData && outInt && math.IsNaN(inND):
		cfg.OutNoData = hi
	case cfg.HasOutNoData && outInt && (inND < lo || inND > hi || inND != math.Round(inND)):
		return &Error{Field: "NoData", Value: fmt.Sprintf("%g", inND),
			Reason: "cannot be stored in DataType " + cfg.DataType}
	case !cfg.HasOutNoData && !inInt:
		cfg.HasOutNoData = true
		cfg.OutNoData = math.NaN()
		if outInt {
			cfg.OutNoData = hi
		}
	}
	return nil
}

// Metadata is the processing metadata a simulated observation carries,
// in order: what it is, the limpid version, and the PSF and noise
// specifications and the Seed as given.
func Metadata(psfSpec, noiseSpec string, seed uint64) [][2]string {
	return [][2]string{
		{"LIMPID_PRODUCT", "simulated observation (blurred, noise added); not a measurement"},
		{"LIMPID_VERSION", step.Version},
		{"LIMPID_SIMULATED_PSF", psfSpec},
		{"LIMPID_SIMULATED_NOISE", noiseSpec},
		{"LIMPID_SIMULATED_SEED", fmt.Sprint(seed)},
	}
}

// Simulate reads every band of src strip by strip (each strip with a halo of
// the PSF's row radius, mirrored at the scene's top and bottom: the same
// half-sample symmetric extension as a whole-scene Conv.Apply), blurs it,
// adds noise and quantises it into dst. Near invalid pixels the blur is the
// normalised convolution H(v w) / H(w) over valid pixels w (v the values);
// with no invalid pixel this is H v. Memory: about (Strip + 2 ry) x width x
// bands x 3 float32.
func Simulate(ctx context.Context, src raster.Reader, dst raster.Writer, cfg Config) error {
	if cfg.H == nil {
		return &Error{Field: "H", Reason: "no PSF operator (NewConv)"}
	}
	s := newSimulator(src.Meta(), &cfg)
	for y0 := 0; y0 < s.h; y0 += s.strip {
		if err := ctx.Err(); err != nil {
			return err
		}
		y1 := min(y0+s.strip, s.h)
		rows, r0, err := s.read(src, y0, y1)
		if err != nil {
			return err
		}
		for b := range rows {
			bl, mk := s.blur(rows[b], y0, y1, r0)
			s.degrade(b, y0, y1, bl, mk)
		}
		if err := dst.WriteRows(y0, y1, sliceRows(s.out, (y1-y0)*s.w)); err != nil {
			return err
		}
	}
	return nil
}

// simulator is one Simulate call: the scene's size, the strip geometry and the
// buffers, sized once for the largest strip.
type simulator struct {
	cfg         *Config
	w, h, strip int
	ry          int // the PSF's row radius: the halo above and below a strip
	q           simQuantizer
	bands       []int
	in          [][]float32 // per band: the scene rows a strip reads
	out         [][]float32 // per band: the strip's output rows
	ext, mask   []float32   // one band's strip with its halo, and its validity
	bl, wbl     []float32   // ext and mask blurred
	ws          conv.Work
	pcg         *rand.PCG // reset per row (simStream)
	rng         *rand.Rand
}

func newSimulator(m raster.Meta, cfg *Config) *simulator {
	// The portable kernels (conv.Operator.Portable): the noise draws depend
	// on the blurred values' last bits, and a simulation with a given random
	// stream key must give the same scene on every machine.
	cfg.H = cfg.H.Portable()
	s := &simulator{cfg: cfg, w: m.Width, h: m.Height, strip: cfg.Strip}
	if s.strip <= 0 {
		s.strip = DefaultStrip
	}
	_, s.ry = cfg.H.Radius()
	s.q.lo, s.q.hi, s.q.integer = raster.TypeRange(cfg.DataType)
	s.q.nodata, s.q.hasNoData = cfg.OutNoData, cfg.HasOutNoData
	nb, W := len(m.Bands), s.w
	s.bands = make([]int, nb)
	for i := range s.bands {
		s.bands[i] = i
	}
	maxExt := min(s.strip, s.h) + 2*s.ry
	s.in = make([][]float32, nb)
	for i := range s.in {
		s.in[i] = make([]float32, (min(s.strip, s.h)+2*s.ry)*W)
	}
	s.ext = make([]float32, maxExt*W)
	s.mask = make([]float32, maxExt*W)
	s.bl = make([]float32, maxExt*W)
	s.wbl = make([]float32, maxExt*W)
	s.out = make([][]float32, nb)
	for i := range s.out {
		s.out[i] = make([]float32, min(s.strip, s.h)*W)
	}
	s.pcg = rand.NewPCG(0, 0)
	s.rng = rand.New(s.pcg)
	return s
}

// read reads rows [r0, r1) of every band: the strip [y0, y1) and its halo
// inside the scene (the halo beyond the scene is mirrored from them).
func (s *simulator) read(src raster.Reader, y0, y1 int) (rows [][]float32, r0 int, err error) {
	r0, r1 := max(0, y0-s.ry), min(s.h, y1+s.ry)
	rows = make([][]float32, len(s.in))
	for i := range rows {
		rows[i] = s.in[i][:(r1-r0)*s.w]
	}
	if err := src.ReadRows(r0, r1, s.bands, rows); err != nil {
		return nil, 0, err
	}
	return rows, r0, nil
}

// blur extends one band's strip [y0, y1) by the mirrored halo (rows: the
// scene rows from r0), masks invalid pixels and blurs it; near invalid
// pixels it normalises by the blurred mask. It returns the blurred extended
// strip and its mask.
func (s *simulator) blur(rows []float32, y0, y1, r0 int) (bl, mk []float32) {
	W, cfg := s.w, s.cfg
	eh := y1 - y0 + 2*s.ry
	e, mk := s.ext[:eh*W], s.mask[:eh*W]
	anyBad := false
	for j := 0; j < eh; j++ {
		sy := raster.Mirror(y0-s.ry+j, s.h) - r0
		row := rows[sy*W : (sy+1)*W]
		for x, v := range row {
			if raster.Valid(v, cfg.NoData, cfg.HasNoData, 0, false) {
				e[j*W+x], mk[j*W+x] = v, 1
			} else {
				e[j*W+x], mk[j*W+x] = 0, 0
				anyBad = true
			}
		}
	}
	bl = s.bl[:eh*W]
	cfg.H.Apply(&s.ws, bl, e, W, eh)
	if anyBad {
		wb := s.wbl[:eh*W]
		cfg.H.Apply(&s.ws, wb, mk, W, eh)
		for i := range bl {
			if wb[i] > 1e-6 {
				bl[i] /= wb[i]
			}
		}
	}
	return bl, mk
}

// degrade adds noise to band b's blurred strip rows [y0, y1) and quantises
// them into s.out[b]; each row draws from its own stream (simStream).
func (s *simulator) degrade(b, y0, y1 int, bl, mk []float32) {
	W := s.w
	nz, q := s.cfg.Noise, s.q
	o := s.out[b][:(y1-y0)*W]
	for j := 0; j < y1-y0; j++ {
		y := y0 + j
		s.pcg.Seed(s.cfg.Seed, simStream(b, y))
		for x := 0; x < W; x++ {
			k := (j+s.ry)*W + x
			if mk[k] == 0 {
				o[j*W+x] = float32(math.NaN())
				continue
			}
			o[j*W+x] = float32(q.quantize(nz.add(s.rng, float64(bl[k]))))
		}
	}
}

// add returns the blurred value v with the model's noise drawn from rng.
func (n Noise) add(rng *rand.Rand, v float64) float64 {
	switch n.Kind {
	case NoisePoisson:
		v = n.Gain * float64(scene.Poisson(rng, math.Max(v, 0)/n.Gain))
		if n.Read > 0 {
			v += n.Read * rng.NormFloat64()
		}
	case NoiseGaussian:
		v += n.Sigma * rng.NormFloat64()
	}
	return v
}

// simQuantizer rounds to an integer output type (integer: the type's range
// is [lo, hi]): to nearest (ties to even), clamped, and off the output
// nodata value.
type simQuantizer struct {
	lo, hi    float64
	integer   bool
	nodata    float64
	hasNoData bool
}

// quantize returns v as the output type stores it (float types: v).
func (q simQuantizer) quantize(v float64) float64 {
	if !q.integer {
		return v
	}
	v = math.RoundToEven(v)
	v = math.Min(q.hi, math.Max(q.lo, v))
	if q.hasNoData && v == q.nodata {
		if v < q.hi {
			v++
		} else {
			v--
		}
	}
	return v
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
	return mix.Pair(b+0x51, y) ^ 0x6A09E667F3BCC909
}
