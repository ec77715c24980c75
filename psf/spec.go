package psf

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"sort"
	"strconv"
	"strings"
)

// ErrSpec is wrapped by every PSF specification error.
var ErrSpec = errors.New("psf: bad specification")

// Env carries what building a kernel may need from outside the package.
type Env struct {
	// LoadRaster reads a single-band raster kernel (row-major weights). When
	// nil, kernel:PATH accepts only text matrices.
	LoadRaster func(path string) (w, h int, data []float64, err error)
}

// Model is one PSF family of the --psf specification language
// "NAME:KEY=VALUE,KEY=VALUE" (or "kernel:PATH").
type Model struct {
	Name    string
	Summary string
	// Params documents each accepted key with its unit.
	Params []Param
	// build makes the kernel from validated parameters (nil for kernel:).
	build func(p map[string]float64) (*Kernel, error)
	// check validates the set of keys present (mutually exclusive forms).
	check func(p map[string]float64) error
	// otf is the model's transfer function, for products (nil when the
	// model cannot be a part, e.g. kernel:).
	otf func(p map[string]float64) (Transfer, error)
	// inBand marks transfer functions relative to the full pixel (no point
	// spread of their own), applied inside the pixel grid's band only.
	inBand bool
}

// Param documents one model parameter.
type Param struct {
	Key, Unit, Doc string
}

var models = map[string]*Model{}

func register(m *Model) { models[m.Name] = m }

// Models lists the registered PSF models in name order (for --help).
func Models() []*Model {
	out := make([]*Model, 0, len(models))
	for _, m := range models {
		out = append(out, m)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Name < out[j].Name })
	return out
}

func init() {
	register(&Model{
		Name:    "gaussian",
		Summary: "Gaussian PSF point-sampled at pixel centres: isotropic (sigma) or anisotropic (sx, sy, angle)",
		Params: []Param{
			{"sigma", "pixels", "standard deviation, isotropic form"},
			{"sx", "pixels", "standard deviation along the first axis"},
			{"sy", "pixels", "standard deviation along the second axis"},
			{"angle", "degrees", "turn of the first axis from the column axis towards the row axis (default 0)"},
		},
		check: func(p map[string]float64) error {
			_, iso := p["sigma"]
			_, hx := p["sx"]
			_, hy := p["sy"]
			_, ha := p["angle"]
			switch {
			case iso && (hx || hy || ha):
				return errors.New("give either sigma or sx,sy[,angle], not both")
			case iso:
				return nil
			case hx && hy:
				return nil
			default:
				return errors.New("needs sigma=S or sx=SX,sy=SY[,angle=DEG]")
			}
		},
		build: func(p map[string]float64) (*Kernel, error) {
			if s, ok := p["sigma"]; ok {
				if err := checkWidth("sigma", s); err != nil {
					return nil, err
				}
				return GaussianAniso(s, s, 0)
			}
			return GaussianAniso(p["sx"], p["sy"], p["angle"])
		},
		otf: gaussianOTF,
	})
	register(&Model{
		Name:    "kernel",
		Summary: "weights from a file: any GDAL-readable single-band raster, or a text matrix (whitespace-separated rows); odd size, normalised to sum 1",
		Params:  []Param{{"PATH", "file", "kernel:PATH; everything after the colon is the path"}},
	})
}

// Parse builds the kernel a specification names: NAME:KEY=VALUE,..., a
// product of such parts joined by ProductSeparator, or kernel:PATH. The
// returned error wraps ErrSpec or ErrKernel and names the part of the spec
// that is wrong.
func Parse(spec string, env Env) (*Kernel, error) {
	spec = strings.TrimSpace(spec)
	name, rest, _ := strings.Cut(spec, ":")
	if name == "kernel" {
		if rest == "" {
			return nil, fmt.Errorf("%w: %q: kernel needs a path, e.g. kernel:psf.txt", ErrSpec, spec)
		}
		return loadKernel(rest, env)
	}
	if name == "measured" {
		return loadMeasured(rest, env)
	}
	if strings.Contains(spec, ProductSeparator) {
		return parseProduct(spec)
	}
	m, params, err := parseModel(spec)
	if err != nil {
		return nil, err
	}
	kern, err := m.build(params)
	if err != nil {
		return nil, fmt.Errorf("%q: %w", spec, err)
	}
	return kern, nil
}

// parseModel reads NAME:KEY=VALUE,... into its model and checked parameters.
func parseModel(spec string) (*Model, map[string]float64, error) {
	name, rest, ok := strings.Cut(spec, ":")
	if !ok || name == "" {
		return nil, nil, fmt.Errorf("%w: %q: expected NAME:PARAMETERS, e.g. gaussian:sigma=0.7 (models: %s)", ErrSpec, spec, modelNames())
	}
	m, ok := models[name]
	if !ok {
		return nil, nil, fmt.Errorf("%w: %q: unknown model %q (models: %s)", ErrSpec, spec, name, modelNames())
	}
	if m.build == nil {
		return nil, nil, fmt.Errorf("%w: %q: %s:PATH cannot be combined with other parts", ErrSpec, spec, name)
	}
	params := map[string]float64{}
	allowed := map[string]bool{}
	for _, p := range m.Params {
		allowed[p.Key] = true
	}
	for _, kv := range strings.Split(rest, ",") {
		kv = strings.TrimSpace(kv)
		if kv == "" {
			continue
		}
		k, v, ok := strings.Cut(kv, "=")
		if !ok {
			return nil, nil, fmt.Errorf("%w: %q: parameter %q is not KEY=VALUE", ErrSpec, spec, kv)
		}
		k = strings.TrimSpace(k)
		if !allowed[k] {
			return nil, nil, fmt.Errorf("%w: %q: %s has no parameter %q (accepted: %s)", ErrSpec, spec, name, k, paramNames(m))
		}
		if _, dup := params[k]; dup {
			return nil, nil, fmt.Errorf("%w: %q: parameter %q given twice", ErrSpec, spec, k)
		}
		f, err := strconv.ParseFloat(strings.TrimSpace(v), 64)
		if err != nil || math.IsNaN(f) || math.IsInf(f, 0) {
			return nil, nil, fmt.Errorf("%w: %q: %s=%q is not a finite number", ErrSpec, spec, k, v)
		}
		params[k] = f
	}
	if m.check != nil {
		if err := m.check(params); err != nil {
			return nil, nil, fmt.Errorf("%w: %q: %s %v", ErrSpec, spec, name, err)
		}
	}
	return m, params, nil
}

func modelNames() string {
	var n []string
	for _, m := range Models() {
		n = append(n, m.Name)
	}
	return strings.Join(n, ", ")
}

func paramNames(m *Model) string {
	var n []string
	for _, p := range m.Params {
		n = append(n, p.Key)
	}
	return strings.Join(n, ", ")
}

// loadKernel reads a text matrix, or a raster through env.LoadRaster when the
// file is not text.
func loadKernel(path string, env Env) (*Kernel, error) {
	f, err := os.Open(path)
	if err == nil {
		defer f.Close()
		head := make([]byte, 512)
		n, _ := io.ReadFull(f, head)
		if isText(head[:n]) {
			if _, err := f.Seek(0, io.SeekStart); err != nil {
				return nil, fmt.Errorf("%w: kernel file %s: %v", ErrSpec, path, err)
			}
			w, h, data, err := ReadTextMatrix(f)
			if err != nil {
				return nil, fmt.Errorf("kernel file %s: %w", path, err)
			}
			k, err := NewKernel(w, h, data)
			if err != nil {
				return nil, fmt.Errorf("kernel file %s: %w", path, err)
			}
			return k, nil
		}
	} else if !strings.HasPrefix(path, "/vsi") {
		return nil, fmt.Errorf("%w: kernel file %s: %v", ErrSpec, path, errors.Unwrap(err))
	}
	if env.LoadRaster == nil {
		return nil, fmt.Errorf("%w: kernel file %s is not a text matrix", ErrSpec, path)
	}
	w, h, data, err := env.LoadRaster(path)
	if err != nil {
		return nil, fmt.Errorf("%w: kernel file %s: %v", ErrSpec, path, err)
	}
	k, err := NewKernel(w, h, data)
	if err != nil {
		return nil, fmt.Errorf("kernel file %s: %w", path, err)
	}
	return k, nil
}

func isText(b []byte) bool {
	for _, c := range b {
		switch {
		case c == '\n' || c == '\r' || c == '\t' || c == ' ':
		case c >= '0' && c <= '9':
		case c == '.' || c == '-' || c == '+' || c == 'e' || c == 'E' || c == '#' || c == ',':
		case c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z':
			// letters allowed (nan, inf, comments); binary files have bytes < 32 or > 126
		case c >= 32 && c < 127:
		default:
			return false
		}
	}
	return true
}

// ReadTextMatrix reads whitespace-separated rows of numbers; blank lines and
// lines starting with '#' are skipped. All rows must have the same length.
func ReadTextMatrix(r io.Reader) (w, h int, data []float64, err error) {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 64*1024), 4*1024*1024)
	line := 0
	for sc.Scan() {
		line++
		t := strings.TrimSpace(sc.Text())
		if t == "" || strings.HasPrefix(t, "#") {
			continue
		}
		fields := strings.Fields(t)
		if w == 0 {
			w = len(fields)
			if w > MaxKernelSize {
				return 0, 0, nil, fmt.Errorf("%w: line %d has %d values, limit %d", ErrKernel, line, w, MaxKernelSize)
			}
		} else if len(fields) != w {
			return 0, 0, nil, fmt.Errorf("%w: line %d has %d values, expected %d like the first row", ErrKernel, line, len(fields), w)
		}
		for i, fs := range fields {
			v, perr := strconv.ParseFloat(fs, 64)
			if perr != nil {
				return 0, 0, nil, fmt.Errorf("%w: line %d, value %d %q is not a number", ErrKernel, line, i+1, fs)
			}
			data = append(data, v)
		}
		h++
		if h > MaxKernelSize {
			return 0, 0, nil, fmt.Errorf("%w: more than %d rows", ErrKernel, MaxKernelSize)
		}
	}
	if err := sc.Err(); err != nil {
		return 0, 0, nil, fmt.Errorf("%w: %v", ErrKernel, err)
	}
	if h == 0 {
		return 0, 0, nil, fmt.Errorf("%w: no numbers found", ErrKernel)
	}
	return w, h, data, nil
}
