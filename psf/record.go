package psf

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"io"
	"math"
	"os"
	"strings"
)

// Record describes the kernel a restoration used, so that the product can
// be reproduced from its record alone: the specification, the kernel's size,
// the Gaussian model's parameters when the kernel is exactly that model,
// the equivalent Gaussian of its second moments and a hash of its weights.
type Record struct {
	Spec   string `json:"spec"`
	Width  int    `json:"width"`
	Height int    `json:"height"`
	// Model is "gaussian" when the kernel is, weight for weight, the
	// point-sampled Gaussian of SigmaX, SigmaY and AngleDeg (gaussian:,
	// measured: and auto specifications); otherwise empty and the three are
	// absent (kernel files, products).
	Model    string   `json:"model,omitempty"`
	SigmaX   *float64 `json:"sigma_x,omitempty"`
	SigmaY   *float64 `json:"sigma_y,omitempty"`
	AngleDeg *float64 `json:"angle_deg,omitempty"`
	// MomentSigmaX and MomentSigmaY are the square roots of the kernel's
	// second central moments along the columns and the rows (pixels): the
	// sigmas of the Gaussian with the same second moments.
	MomentSigmaX float64 `json:"moment_sigma_x"`
	MomentSigmaY float64 `json:"moment_sigma_y"`
	// SHA256 is WeightsSHA256 of the kernel, in lower-case hex.
	SHA256 string `json:"weights_sha256"`
}

// WeightsSHA256 is the SHA-256 (FIPS 180-4) of k's weights as used: the
// normalised Data in row-major order (row dy = -Ry first, dx increasing
// within a row), each weight as an IEEE-754 binary64 in little-endian byte
// order; 8 x W x H bytes, no header (the size is recorded beside it).
func WeightsSHA256(k *Kernel) [32]byte {
	h := sha256.New()
	var b [8]byte
	for _, v := range k.Data {
		binary.LittleEndian.PutUint64(b[:], math.Float64bits(v))
		h.Write(b[:])
	}
	var out [32]byte
	h.Sum(out[:0])
	return out
}

// Describe records kernel k, built from spec (a specification Parse took,
// optionally followed by " (" and a note, as restore's --psf auto records
// it).
func Describe(spec string, k *Kernel) Record {
	vx, vy := k.Variance()
	sum := WeightsSHA256(k)
	r := Record{Spec: spec, Width: k.W, Height: k.H, MomentSigmaX: math.Sqrt(vx), MomentSigmaY: math.Sqrt(vy),
		SHA256: hex.EncodeToString(sum[:])}
	sx, sy, angle, ok := gaussianOf(spec, k)
	if ok {
		r.Model, r.SigmaX, r.SigmaY = "gaussian", &sx, &sy
		if angle != 0 {
			r.AngleDeg = &angle
		}
	}
	return r
}

// gaussianOf returns the Gaussian model's parameters of spec when spec is a
// Gaussian (gaussian:, measured:FILE, or one of them followed by a note) and
// the model builds exactly k (a measured file changed since it was read
// does not).
func gaussianOf(spec string, k *Kernel) (sx, sy, angle float64, ok bool) {
	spec, _, _ = strings.Cut(strings.TrimSpace(spec), " (")
	if path, isMeasured := strings.CutPrefix(spec, "measured:"); isMeasured {
		f, err := os.Open(path)
		if err != nil {
			return 0, 0, 0, false
		}
		defer f.Close()
		var m Measured
		if json.NewDecoder(io.LimitReader(f, maxMeasuredBytes)).Decode(&m) != nil {
			return 0, 0, 0, false
		}
		if spec, err = m.Spec(); err != nil {
			return 0, 0, 0, false
		}
	}
	if strings.Contains(spec, ProductSeparator) {
		return 0, 0, 0, false
	}
	m, p, err := parseModel(spec)
	if err != nil || m.Name != "gaussian" {
		return 0, 0, 0, false
	}
	if s, iso := p["sigma"]; iso {
		sx, sy = s, s
	} else {
		sx, sy, angle = p["sx"], p["sy"], p["angle"]
	}
	g, err := GaussianAniso(sx, sy, angle)
	if err != nil || g.W != k.W || g.H != k.H {
		return 0, 0, 0, false
	}
	for i, v := range g.Data {
		if v != k.Data[i] {
			return 0, 0, 0, false
		}
	}
	return sx, sy, angle, true
}
