package step

import (
	"errors"
	"os/exec"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// The module's layering (DEVELOPERS.md, "Architecture"):
// cmd/limpid -> step -> {psf, raster, arrowio}; raster is pure Go and
// raster/gdal is the GDAL adapter, the only package that may reach GDAL.
// Patterns ending in "/..." match the package and everything below it, so
// new sub-packages (step/conv, step/assess, ...) are covered as they appear.

// layerRules says which module packages each package may depend on,
// directly or transitively, its tests included. A package takes the rule
// with the longest matching pattern; a package that matches none fails the
// test, so a new top-level package needs a rule.
var layerRules = []struct {
	pkg string
	may []string
}{
	{"limpid/cmd/...", []string{"limpid/..."}},
	{"limpid/scripts/...", []string{"limpid/scripts/...", "limpid/step/...", "limpid/psf/...", "limpid/raster/...", "limpid/arrowio/..."}},
	{"limpid/step/...", []string{"limpid/step/...", "limpid/psf/...", "limpid/raster/...", "limpid/arrowio/..."}},
	{"limpid/psf/...", []string{"limpid/psf/...", "limpid/raster/..."}},
	{"limpid/arrowio/...", []string{"limpid/arrowio/...", "limpid/raster/..."}},
	{"limpid/raster/...", []string{"limpid/raster/..."}},
}

// onlyFrom lists dependencies that only some packages may have, directly or
// transitively (whatever layerRules allows otherwise).
var onlyFrom = []struct {
	dep, why string
	who      []string
}{
	{"github.com/airbusgeo/godal/...", "GDAL (cgo) is reached only through limpid/raster/gdal",
		[]string{"limpid/raster/gdal/...", "limpid/cmd/..."}},
	{"limpid/raster/gdal/...", "the engine, psf, arrowio and raster's pure packages build without GDAL",
		[]string{"limpid/raster/gdal/...", "limpid/cmd/..."}},
}

// directOnlyFrom lists imports that only some packages may write in their
// own files (the engine sees Arrow streams only as arrowio's plain-Go Tile
// and Header).
var directOnlyFrom = []struct {
	dep string
	who []string
}{
	{"github.com/apache/arrow/...", []string{"limpid/arrowio/...", "limpid/cmd/..."}},
}

// corePackages must be among the module's packages: a listing without them
// means the listing, not the layering, is broken.
var corePackages = []string{"limpid/step", "limpid/psf", "limpid/raster", "limpid/raster/gdal", "limpid/arrowio", "limpid/cmd/limpid"}

// TestImportRules checks every package of the module against the rules
// above, with the transitive dependencies `go list -deps -test` reports, and
// that no package but limpid/raster/gdal holds cgo files. It fails when go
// list fails or lists no packages.
func TestImportRules(t *testing.T) {
	pkgs := goList(t, "list", "-f", "{{.ImportPath}}", "limpid/...")
	if len(pkgs) == 0 {
		t.Fatal("go list limpid/... lists no packages")
	}
	for _, p := range corePackages {
		if !slices.Contains(pkgs, p) {
			t.Fatalf("go list limpid/... does not list %s (got %v)", p, pkgs)
		}
	}
	for _, p := range pkgs {
		checkPackage(t, p)
	}
}

func checkPackage(t *testing.T, p string) {
	may, ok := ruleFor(p)
	if !ok {
		t.Errorf("%s matches no pattern of layerRules: add a rule for it", p)
		return
	}
	g := depGraph(t, p)
	if _, ok := g.imports[p]; !ok {
		t.Errorf("go list -deps -test %s does not list %s itself", p, p)
		return
	}
	for _, d := range g.order {
		if d == p {
			continue
		}
		if (d == "limpid" || strings.HasPrefix(d, "limpid/")) && !matchAny(may, d) {
			t.Errorf("%s depends on %s (%s); it may depend only on %v", p, d, g.path(p, d), may)
		}
		for _, r := range onlyFrom {
			if match(r.dep, d) && !matchAny(r.who, p) {
				t.Errorf("%s depends on %s (%s); only %v may: %s", p, d, g.path(p, d), r.who, r.why)
			}
		}
	}
	for _, d := range g.imports[p] {
		for _, r := range directOnlyFrom {
			if match(r.dep, d) && !matchAny(r.who, p) {
				t.Errorf("%s imports %s; only %v may import it directly", p, d, r.who)
			}
		}
	}
	if g.cgo[p] && !match("limpid/raster/gdal/...", p) {
		t.Errorf("%s has cgo files; the GDAL adapter limpid/raster/gdal is the only cgo in the module", p)
	}
}

// ruleFor returns the dependencies layerRules allows p (the rule with the
// longest matching pattern).
func ruleFor(p string) ([]string, bool) {
	best := -1
	for i, r := range layerRules {
		if match(r.pkg, p) && (best < 0 || len(r.pkg) > len(layerRules[best].pkg)) {
			best = i
		}
	}
	if best < 0 {
		return nil, false
	}
	return layerRules[best].may, true
}

// match reports whether import path p matches pattern ("a/b" exactly, or
// "a/b/..." for a/b and everything below it).
func match(pattern, p string) bool {
	if root, ok := strings.CutSuffix(pattern, "/..."); ok {
		return p == root || strings.HasPrefix(p, root+"/")
	}
	return p == pattern
}

func matchAny(patterns []string, p string) bool {
	return slices.ContainsFunc(patterns, func(q string) bool { return match(q, p) })
}

// deps is a package's transitive dependency graph, its tests included.
type deps struct {
	order   []string            // every package, in go list's order
	imports map[string][]string // direct imports of each package
	cgo     map[string]bool     // packages with cgo files
}

// depGraph runs go list -deps -test on p. Test variants ("x [p.test]") are
// merged into x, p's external test package into p, and the generated test
// main p.test is left out.
func depGraph(t *testing.T, p string) *deps {
	lines := goList(t, "list", "-deps", "-test", "-f", "{{.ImportPath}}\t{{len .CgoFiles}}\t{{join .Imports \" \"}}", p)
	g := &deps{imports: map[string][]string{}, cgo: map[string]bool{}}
	norm := func(s string) string {
		s, _, _ = strings.Cut(s, " [")
		if s == p+"_test" {
			return p
		}
		return s
	}
	for _, l := range lines {
		f := strings.Split(l, "\t")
		if len(f) != 3 {
			t.Fatalf("go list -deps -test %s: unexpected line %q", p, l)
		}
		name := norm(f[0])
		if name == p+".test" {
			continue
		}
		if _, seen := g.imports[name]; !seen {
			g.order = append(g.order, name)
			g.imports[name] = nil
		}
		for _, imp := range strings.Fields(f[2]) {
			if imp = norm(imp); !slices.Contains(g.imports[name], imp) {
				g.imports[name] = append(g.imports[name], imp)
			}
		}
		if n, err := strconv.Atoi(f[1]); err != nil {
			t.Fatalf("go list -deps -test %s: line %q: %v", p, l, err)
		} else if n > 0 {
			g.cgo[name] = true
		}
	}
	return g
}

// path returns an import chain from p to d, for messages.
func (g *deps) path(p, d string) string {
	prev := map[string]string{p: ""}
	queue := []string{p}
	for len(queue) > 0 {
		c := queue[0]
		queue = queue[1:]
		if c == d {
			chain := []string{d}
			for x := prev[d]; x != ""; x = prev[x] {
				chain = append(chain, x)
			}
			slices.Reverse(chain)
			return strings.Join(chain, " -> ")
		}
		for _, n := range g.imports[c] {
			if _, seen := prev[n]; !seen {
				prev[n] = c
				queue = append(queue, n)
			}
		}
	}
	return "no chain found"
}

// goList runs the go command and returns its non-empty output lines; any
// failure (including a go list error about one package) fails the test.
func goList(t *testing.T, args ...string) []string {
	t.Helper()
	out, err := exec.Command("go", args...).Output()
	if err != nil {
		msg := err.Error()
		var ee *exec.ExitError
		if errors.As(err, &ee) {
			msg += ": " + strings.TrimSpace(string(ee.Stderr))
		}
		t.Fatalf("go %s: %s", strings.Join(args, " "), msg)
	}
	var lines []string
	for _, l := range strings.Split(string(out), "\n") {
		if strings.TrimSpace(l) != "" {
			lines = append(lines, l)
		}
	}
	return lines
}
