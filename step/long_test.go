package step

import (
	"os"
	"testing"
)

// long reports whether the measurement-grade cases run: LIMPID_LONG=1, as
// `make test-long` sets it. The default run (`make test`) keeps every
// property at a smaller size or with fewer draws; DEVELOPERS.md ("Testing")
// lists what each mode checks.
func long() bool { return os.Getenv("LIMPID_LONG") == "1" }

// longTest skips a measurement-grade case in the default run.
func longTest(t *testing.T) {
	t.Helper()
	if !long() {
		t.Skip("measurement-grade case: runs with LIMPID_LONG=1 (make test-long)")
	}
}
