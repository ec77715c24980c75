package raster

import (
	"errors"
	"strings"
	"testing"
)

// The limits and their variables (README, "Input limits"): defaults,
// replacement from the environment, refusal of non-numbers, and products
// of declared sizes that saturate instead of wrapping (a header declaring
// 2^31 x 2^31 x 2^31 must not pass as a small or negative number: Go spec,
// "Integer overflow" wraps int64 silently). Project requirement, no outside
// source.
func TestLimits(t *testing.T) {
	env := func(m map[string]string) func(string) string { return func(k string) string { return m[k] } }
	l, err := LimitsFrom(env(nil))
	if err != nil || l.Pixels != DefaultMaxPixels || l.Whole != DefaultMaxWholePixels {
		t.Fatalf("defaults: %+v %v", l, err)
	}
	l, err = LimitsFrom(env(map[string]string{EnvMaxPixels: " 100 ", EnvMaxWholePixels: "7"}))
	if err != nil || l.Pixels != 100 || l.Whole != 7 {
		t.Fatalf("from the environment: %+v %v", l, err)
	}
	for _, bad := range []string{"0", "-5", "1e9", "lots", "9223372036854775808"} {
		if _, err := LimitsFrom(env(map[string]string{EnvMaxPixels: bad})); !errors.Is(err, ErrInput) || !strings.Contains(err.Error(), EnvMaxPixels) {
			t.Errorf("%s=%q: %v", EnvMaxPixels, bad, err)
		}
	}
	if err := l.CheckScene("input a.tif", 10, 10, 1); err != nil {
		t.Errorf("100 pixels at the limit 100: %v", err)
	}
	err = l.CheckScene("input a.tif", 101, 1, 1)
	if !errors.Is(err, ErrInput) || !strings.Contains(err.Error(), "input a.tif is 101 x 1 pixels x 1 bands = 101 pixels, over the limit of 100") {
		t.Errorf("101 pixels: %v", err)
	}
	huge := Limits{Pixels: 1<<63 - 2, Whole: 1<<63 - 2}
	if err := huge.CheckScene("x", 1<<31, 1<<31, 1<<31); err == nil {
		t.Error("2^93 pixels passed (the product wrapped)")
	}
	if err := l.CheckWhole("input b.tif", "band 2", 3, 3, 1); err == nil || !strings.Contains(err.Error(), "band 2 is read whole: 3 x 3 pixels x 1 = 9 pixels, over the limit of 7") {
		t.Errorf("whole: %v", err)
	}
}
