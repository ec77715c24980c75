package main

import (
	"path/filepath"
	"strings"
	"testing"
)

// The examples that `limpid tiles pack --help` prints run as written (file
// names replaced by the fixture and temporary paths; pipes chained through
// stdin and stdout). Source: the project's contract that documented examples
// work (README "Usage"); no outside source.
func TestTilesPackHelpExamplesRun(t *testing.T) {
	code, stdout, stderr := limpid(t, nil, "tiles", "pack", "--help")
	if code != 0 {
		t.Fatalf("help: exit %d", code)
	}
	help := stdout + stderr // wherever the help is printed
	dir := t.TempDir()
	files := map[string]string{
		"scene.tif":    cropFixture(t, dir, 64),
		"scene.arrows": filepath.Join(dir, "scene.arrows"),
		"restored.tif": filepath.Join(dir, "restored.tif"),
	}
	n := 0
	for _, line := range strings.Split(help, "\n") {
		line = strings.TrimSpace(line)
		if !strings.HasPrefix(line, "limpid tiles pack --") {
			continue
		}
		n++
		var in []byte
		for _, cmd := range strings.Split(line, " | ") {
			args := strings.Fields(cmd)[1:]
			for i, a := range args {
				if p, ok := files[a]; ok {
					args[i] = p
				}
			}
			code, out, errs := limpid(t, in, args...)
			if code != 0 {
				t.Fatalf("example %q: %q: exit %d: %s", line, cmd, code, errs)
			}
			in = []byte(out)
		}
	}
	if n != 2 {
		t.Fatalf("found %d examples in the help, want 2", n)
	}
	// GDAL's own reader sees the piped example's product: bands 3, 2, 1.
	if b := gdalinfo(t, files["restored.tif"])["bands"].([]any); len(b) != 3 {
		t.Fatalf("the piped example's product has %d bands, want 3", len(b))
	}
}
