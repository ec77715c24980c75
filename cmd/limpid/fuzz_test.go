package main

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"
)

// FuzzParseBands: --bands (and psf measure's comma-separated whole-number
// lists, parseInts) either fail with a usage error (exit 2, one line) or
// give values that satisfy the flag's rule: 0-based band indices below the
// band count, in the order given; never a panic.
func FuzzParseBands(f *testing.F) {
	for _, s := range []string{"1,3,4", "", " 2 ", "0", "7", "1,,2", "a", "-1", "3,3", "99999999999999999999", "1, 2"} {
		f.Add(s, uint8(4))
	}
	f.Fuzz(func(t *testing.T, s string, nb uint8) {
		n := int(nb)%16 + 1
		bands, err := parseBands(s, n)
		if err != nil {
			var u usageError
			if !errors.As(err, &u) || exitCode(err) != exitUsage || strings.Contains(err.Error(), "\n") {
				t.Fatalf("%q: error %v is not a one-line usage error", s, err)
			}
		} else {
			if strings.TrimSpace(s) == "" && len(bands) != n {
				t.Fatalf("%q: %d bands of %d", s, len(bands), n)
			}
			for _, b := range bands {
				if b < 0 || b >= n {
					t.Fatalf("%q: band index %d outside 0..%d", s, b, n-1)
				}
			}
		}
		if v, err := parseInts("--edge", s, 4); err == nil {
			if len(v) != 4 || len(strings.Split(s, ",")) != 4 {
				t.Fatalf("%q: --edge gave %v", s, v)
			}
		} else if exitCode(err) != exitUsage {
			t.Fatalf("%q: --edge error %v exits %d", s, err, exitCode(err))
		}
	})
}

// FuzzParseNoiseFlag: restore's --noise a=GAIN,b=READVAR gives a model with
// finite a, b in [0, 1e30], not both 0, that reads back the same when
// written with %v (the shortest decimal that parses back exactly: Go's
// strconv docs), or a one-line usage error; never a panic.
func FuzzParseNoiseFlag(f *testing.F) {
	for _, s := range []string{"a=0.4,b=9", "b=9,a=0.4", "a=0,b=0", "a=0.4", "a=x,b=2", "a=1,a=2,b=3", "c=1", "", "a=1e31,b=1", "a=nan,b=1"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		m, err := parseNoise(s)
		if err != nil {
			if exitCode(err) != exitUsage || strings.Contains(err.Error(), "\n") {
				t.Fatalf("%q: error %v", s, err)
			}
			return
		}
		for _, v := range []float64{m.A, m.B} {
			if math.IsNaN(v) || v < 0 || v > 1e30 {
				t.Fatalf("%q: a=%g b=%g", s, m.A, m.B)
			}
		}
		if m.A == 0 && m.B == 0 {
			t.Fatalf("%q: a and b both 0", s)
		}
		back, err := parseNoise(fmt.Sprintf("a=%v,b=%v", m.A, m.B))
		if err != nil || back.A != m.A || back.B != m.B {
			t.Fatalf("%q -> a=%v,b=%v -> %+v, %v", s, m.A, m.B, back, err)
		}
	})
}
