package step

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// maxTopLevelLines bounds the non-test Go lines directly in step/ (the
// project's limit; new engine code goes to sub-packages). Common practice,
// no source.
const maxTopLevelLines = 4000

func TestTopLevelSize(t *testing.T) {
	files, err := filepath.Glob("*.go")
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for _, f := range files {
		if strings.HasSuffix(f, "_test.go") {
			continue
		}
		b, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		n += strings.Count(string(b), "\n")
	}
	if n == 0 || n >= maxTopLevelLines {
		t.Fatalf("step/ holds %d non-test lines; the limit is under %d: move engine code to a sub-package", n, maxTopLevelLines)
	}
}
