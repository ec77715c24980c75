package psf

import (
	"bytes"
	"math"
	"strings"
	"testing"
)

// kernelSumTol: a normalised kernel's weights sum to 1 up to float64
// rounding of at most 1025^2 terms (about n * 2^-53 = 1.2e-10; Higham,
// "Accuracy and Stability of Numerical Algorithms", 2nd ed., sec. 4.2,
// recursive summation bound).
const kernelSumTol = 1e-9

// checkKernel asserts NewKernel's documented invariants: odd size within
// MaxKernelSize, W*H finite non-negative weights summing to 1, and exact
// 1-D factors (each summing to 1) when the kernel says it is separable.
func checkKernel(t *testing.T, what string, k *Kernel) {
	t.Helper()
	if k.W < 1 || k.H < 1 || k.W%2 == 0 || k.H%2 == 0 || k.W > MaxKernelSize || k.H > MaxKernelSize || len(k.Data) != k.W*k.H {
		t.Fatalf("%s: kernel %dx%d with %d weights", what, k.W, k.H, len(k.Data))
	}
	var sum float64
	for i, v := range k.Data {
		if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
			t.Fatalf("%s: weight %d is %g", what, i, v)
		}
		sum += v
	}
	if math.Abs(sum-1) > kernelSumTol {
		t.Fatalf("%s: weights sum to %.17g", what, sum)
	}
	if k.Separable() {
		for _, f := range [][]float64{k.X, k.Y} {
			var s float64
			for _, v := range f {
				s += v
			}
			if math.Abs(s-1) > kernelSumTol {
				t.Fatalf("%s: a 1-D factor sums to %.17g", what, s)
			}
		}
	}
}

// FuzzParse: any --psf specification either fails with an error or gives a
// kernel with NewKernel's invariants; never a panic. File-based forms
// (kernel:PATH, measured:FILE) are FuzzReadTextMatrix's and
// FuzzParseMeasured's.
func FuzzParse(f *testing.F) {
	for _, s := range []string{
		"gaussian:sigma=0.7", "gaussian:sx=0.8,sy=0.6,angle=20", "gaussian:sigma=-1", "gaussian:sigma=1,sx=2",
		"gaussian-mtf:nyquist=0.3", "diffraction:wavelength=0.66,fnumber=8,pitch=6.5*motion:length=0.8,angle=90",
		"detector:fill=0.9", "motion:length=3", "airy:r=1", ":", "", "gaussian:sigma=1e308", "gaussian:sigma=nan",
		"diffraction:wavelength=0.65,fnumber=8,pitch=10*detector:fill=0.9*gaussian:sigma=0.4",
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, spec string) {
		name, _, _ := strings.Cut(strings.TrimSpace(spec), ":")
		if name == "kernel" || name == "measured" || len(spec) > 512 {
			return
		}
		// Source: a transfer function is normalised to 1 at zero frequency
		// (ISO 12233:2017, the MTF's definition; each model's formula).
		if sys, err := ParseTransfer(spec); err == nil {
			if v := sys.At(0, 0); math.Abs(v-1) > kernelSumTol {
				t.Fatalf("%q: transfer at zero frequency %g, want 1", spec, v)
			}
		}
		// Diffraction kernels and products take up to seconds to build
		// (numerical transfer to kernel); their parsing is covered by
		// ParseTransfer above.
		if strings.Contains(spec, "diffraction") || strings.Contains(spec, ProductSeparator) {
			return
		}
		k, err := Parse(spec, Env{})
		if err != nil {
			return
		}
		checkKernel(t, spec, k)
	})
}

// FuzzReadTextMatrix: a kernel text file is read into w*h values with w, h
// within MaxKernelSize, and NewKernel either refuses them or normalises them.
func FuzzReadTextMatrix(f *testing.F) {
	for _, s := range []string{
		"0 1 0\n1 4 1\n0 1 0\n", "# comment\n1\n", "1 1\n1 1\n", "0 1 0\n1 -4 1\n0 1 0\n", "0 0 0\n",
		"1e308 1e308 1e308\n", "nan 1 1\n", "inf 0 0\n", "1 2\n3\n", "", "\n\n", "1,2,3\n", "5e-324 5e-324 5e-324\n",
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, text []byte) {
		w, h, data, err := ReadTextMatrix(bytes.NewReader(text))
		if err != nil {
			return
		}
		if w < 1 || h < 1 || w > MaxKernelSize || h > MaxKernelSize || len(data) != w*h {
			t.Fatalf("%q: %dx%d with %d values", text, w, h, len(data))
		}
		k, err := NewKernel(w, h, data)
		if err != nil {
			return
		}
		checkKernel(t, string(text), k)
	})
}

// FuzzParseMeasured: a measured: JSON summary gives a gaussian spec with
// positive finite sigmas that Parse accepts, or an error.
func FuzzParseMeasured(f *testing.F) {
	for _, s := range []string{
		`{"sigma": 1.2}`, `{"sigma_x": 0.8, "sigma_y": 0.9}`, `{"sigma_x": 0.8}`, `{"sigma": 1.2}{"sigma": 3}`,
		`{"sigma": 1.2} x`, `{"sigma": -1}`, `{"sigma": 1e400}`, `[]`, `null`, `{}`, `{"sigma": 1.2}  ` + "\n",
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		spec, err := ParseMeasured(bytes.NewReader(b))
		if err != nil {
			return
		}
		_, params, err := parseModel(spec)
		if err != nil {
			t.Fatalf("%q gave spec %q that does not parse: %v", b, spec, err)
		}
		for _, k := range []string{"sx", "sy"} {
			if v := params[k]; !(v > 0) || math.IsInf(v, 0) {
				t.Fatalf("%q gave %s=%g", b, k, v)
			}
		}
		k, err := Parse(spec, Env{})
		if err != nil {
			return // a sigma beyond what a kernel may hold is refused there
		}
		checkKernel(t, spec, k)
	})
}
