package step

import (
	"go/parser"
	"go/token"
	"path/filepath"
	"strings"
	"testing"
)

// goFiles lists the non-test Go files of the module's package dir; it fails
// the test when the pattern is bad or finds nothing (a rule checked on no
// files would pass silently).
func goFiles(t *testing.T, dir string) []string {
	t.Helper()
	all, err := filepath.Glob(filepath.Join("..", dir, "*.go"))
	if err != nil {
		t.Fatal(err)
	}
	var out []string
	for _, f := range all {
		if !strings.HasSuffix(f, "_test.go") {
			out = append(out, f)
		}
	}
	if len(out) == 0 {
		t.Fatalf("no Go files in %s", dir)
	}
	return out
}

// TestImportRules enforces DEVELOPERS.md's one-way data flow
// cmd -> step -> {psf, raster, arrowio}: psf is pure Go (no GDAL, Arrow or
// other limpid package), raster and arrowio never import step or cmd, step
// never imports GDAL or Arrow directly (it reaches Arrow streams only through
// arrowio's plain-Go Tile and Header). arrowio imports only the standard
// library, Arrow and limpid/raster's types.
func TestImportRules(t *testing.T) {
	arrowioAllowed := []string{"github.com/apache/arrow/go/v17/", "limpid/raster"}
	for _, f := range goFiles(t, "arrowio") {
		af, err := parser.ParseFile(token.NewFileSet(), f, nil, parser.ImportsOnly)
		if err != nil {
			t.Fatal(err)
		}
	imports:
		for _, imp := range af.Imports {
			path := strings.Trim(imp.Path.Value, `"`)
			if !strings.Contains(strings.SplitN(path, "/", 2)[0], ".") && !strings.HasPrefix(path, "limpid") && path != "C" {
				continue // standard library
			}
			for _, a := range arrowioAllowed {
				if path == a || strings.HasPrefix(path, a) {
					continue imports
				}
			}
			t.Errorf("%s imports %s (arrowio may import only the standard library, Arrow and limpid/raster)", f, path)
		}
	}
	forbidden := map[string][]string{
		"psf":     {"limpid/", "github.com/airbusgeo/godal", "github.com/apache/arrow", "C"},
		"raster":  {"limpid/step", "limpid/cmd", "limpid/arrowio"},
		"arrowio": {"limpid/step", "limpid/cmd", "github.com/airbusgeo/godal"},
		"step":    {"limpid/cmd", "github.com/airbusgeo/godal", "github.com/apache/arrow", "C"},
	}
	for pkg, bad := range forbidden {
		for _, f := range goFiles(t, pkg) {
			af, err := parser.ParseFile(token.NewFileSet(), f, nil, parser.ImportsOnly)
			if err != nil {
				t.Fatal(err)
			}
			for _, imp := range af.Imports {
				path := strings.Trim(imp.Path.Value, `"`)
				for _, b := range bad {
					if path == b || (strings.HasSuffix(b, "/") && strings.HasPrefix(path, b)) || (b != "C" && strings.HasPrefix(path, b)) {
						t.Errorf("%s imports %s (not allowed in %s)", f, path, pkg)
					}
				}
			}
		}
	}
}
