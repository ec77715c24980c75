package psf

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// gaussianKernelText writes a point-sampled isotropic Gaussian of sigma on
// offsets -r..r as a text matrix (unnormalised weights).
func gaussianKernelText(sigma float64, r int) string {
	var b strings.Builder
	for y := -r; y <= r; y++ {
		for x := -r; x <= r; x++ {
			fmt.Fprintf(&b, "%.17g ", math.Exp(-0.5*float64(x*x+y*y)/(sigma*sigma)))
		}
		b.WriteString("\n")
	}
	return b.String()
}

// A kernel file's record: its hash is SHA-256 over the documented layout
// (little-endian float64 of the normalised weights, row-major), computed
// here independently of WeightsSHA256 with crypto/sha256 and
// encoding/binary; its moment sigmas are the generating sigma; no Gaussian
// model is claimed for a file.
func TestDescribeKernelFile(t *testing.T) {
	const sigma, r = 1.2, 8 // radius 6.7 sigma: the truncated mass is below 1e-10
	path := filepath.Join(t.TempDir(), "k.txt")
	if err := os.WriteFile(path, []byte(gaussianKernelText(sigma, r)), 0o644); err != nil {
		t.Fatal(err)
	}
	k, err := Parse("kernel:"+path, Env{})
	if err != nil {
		t.Fatal(err)
	}
	rec := Describe("kernel:"+path, k)
	if rec.Width != 2*r+1 || rec.Height != 2*r+1 || rec.Model != "" || rec.SigmaX != nil {
		t.Fatalf("record %+v: want a %dx%d kernel without a model", rec, 2*r+1, 2*r+1)
	}
	// The weights as used: the file's values divided by their sum (NewKernel).
	f, _ := os.Open(path)
	_, _, raw, err := ReadTextMatrix(f)
	f.Close()
	if err != nil {
		t.Fatal(err)
	}
	var sum float64
	for _, v := range raw {
		sum += v
	}
	h := sha256.New()
	for _, v := range raw {
		// Source: FIPS 180-4 (SHA-256) via crypto/sha256, over the byte
		// layout WeightsSHA256 documents.
		if err := binary.Write(h, binary.LittleEndian, v/sum); err != nil {
			t.Fatal(err)
		}
	}
	if want := hex.EncodeToString(h.Sum(nil)); rec.SHA256 != want {
		t.Errorf("weights SHA-256 %s, independent computation %s", rec.SHA256, want)
	}
	// Source: the second central moment of a Gaussian is sigma^2. The
	// sampled, truncated kernel differs by the tail beyond 6.7 sigma
	// (relative mass < 1e-10) and the sampling term of the Poisson
	// summation formula, of order 4 pi^2 sigma^2 exp(-2 pi^2 sigma^2) ~ 3e-11
	// at sigma 1.2 (derived); momentTol leaves a wide margin above both.
	const momentTol = 1e-6
	for _, got := range []float64{rec.MomentSigmaX, rec.MomentSigmaY} {
		if math.Abs(got-sigma)/sigma > momentTol {
			t.Errorf("moment sigma %.9f, generating sigma %g (tolerance %g relative)", got, sigma, momentTol)
		}
	}
}

// Gaussian specifications record the model's sigmas and angle; a measured
// summary records the sigmas it gives; a product of models records none.
func TestDescribeGaussianModels(t *testing.T) {
	dir := t.TempDir()
	js := filepath.Join(dir, "psf.json")
	b, _ := json.Marshal(map[string]float64{"sigma": 0.9, "sigma_x": 0.85, "sigma_y": 0.7})
	if err := os.WriteFile(js, b, 0o644); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		spec          string
		sx, sy, angle float64
		model         bool
	}{
		{"gaussian:sigma=0.7", 0.7, 0.7, 0, true},
		{"gaussian:sx=0.8,sy=0.6,angle=20", 0.8, 0.6, 20, true},
		{"measured:" + js, 0.85, 0.7, 0, true},
		{"gaussian:sx=0.8,sy=0.7 (auto: 3 edges in band 1)", 0.8, 0.7, 0, true},
		{"gaussian:sigma=0.7*detector:fill=0.8", 0, 0, 0, false},
	} {
		spec, _, _ := strings.Cut(c.spec, " (")
		k, err := Parse(spec, Env{})
		if err != nil {
			t.Fatalf("%s: %v", c.spec, err)
		}
		r := Describe(c.spec, k)
		if !c.model {
			if r.Model != "" {
				t.Errorf("%s: model %q recorded for a product", c.spec, r.Model)
			}
			continue
		}
		if r.Model != "gaussian" || *r.SigmaX != c.sx || *r.SigmaY != c.sy || (c.angle != 0) != (r.AngleDeg != nil) || (r.AngleDeg != nil && *r.AngleDeg != c.angle) {
			t.Errorf("%s: record %+v, want sigmas %g, %g angle %g", c.spec, r, c.sx, c.sy, c.angle)
		}
	}
	// A measured file rewritten after the kernel was built: the model no
	// longer builds the kernel, so no sigmas are claimed.
	k, _ := Parse("measured:"+js, Env{})
	b, _ = json.Marshal(map[string]float64{"sigma": 1.5})
	os.WriteFile(js, b, 0o644)
	if r := Describe("measured:"+js, k); r.Model != "" {
		t.Errorf("changed measured file: record %+v claims a model", r)
	}
}
