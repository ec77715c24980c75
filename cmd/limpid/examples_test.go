package main

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
)

// helpExamples are the subcommands whose --help prints examples.
var helpExamples = [][]string{{"psf", "build"}, {"psf", "measure"}, {"simulate"}, {"restore"}, {"tiles", "pack"}}

// Every example that a subcommand's --help prints runs as written, in
// order, on the fixtures: input names (scene.tif, in.tif, truth.tif,
// in.jp2) stand for a 96-pixel crop of the observed fixture (the whole
// fixture for psf measure, whose edge window is the demo tarp's), other
// file names for files in one temporary directory, so that one example can
// read what an earlier one wrote; pipes run through stdin and stdout, GDAL's
// own tools as programs. Source: the project's contract that documented
// examples work (README "Usage"); no outside source.
func TestHelpExamplesRun(t *testing.T) {
	skipUnderRace(t)
	dir := t.TempDir()
	crop := cropFixture(t, dir, 96)
	inputs := map[string]bool{"scene.tif": true, "in.tif": true, "truth.tif": true, "in.jp2": true}
	n := 0
	for _, sub := range helpExamples {
		code, stdout, stderr := limpid(t, nil, append(sub, "--help")...)
		if code != 0 {
			t.Fatalf("%v --help: exit %d", sub, code)
		}
		for _, line := range exampleLines(stdout + stderr) {
			n++
			var mapFile func(a string) string
			mapFile = func(a string) string {
				for _, p := range []string{"kernel:", "measured:"} {
					if strings.HasPrefix(a, p) {
						return p + mapFile(a[len(p):])
					}
				}
				switch {
				case inputs[a] && strings.HasPrefix(line, "limpid psf measure"):
					return fixture("observed.tif")
				case inputs[a]:
					return crop
				case regexp.MustCompile(`^[\w.-]+\.(tif|txt|json|arrows)$`).MatchString(a):
					return filepath.Join(dir, a)
				}
				return a
			}
			runExample(t, line, mapFile)
		}
	}
	if n < 9 {
		t.Fatalf("found %d examples in the help texts, expected at least 9", n)
	}
}

// exampleLines returns the indented command lines of a help text's
// examples (without trailing comments in parentheses).
func exampleLines(help string) []string {
	var out []string
	for _, l := range strings.Split(help, "\n") {
		if !strings.HasPrefix(l, "      ") { // the usage lines sit at 3 spaces, examples at 6
			continue
		}
		l = strings.TrimSpace(l)
		if !strings.HasPrefix(l, "limpid ") && !strings.HasPrefix(l, "gdal_translate ") {
			continue
		}
		if i := strings.Index(l, "   ("); i > 0 {
			l = l[:i]
		}
		out = append(out, l)
	}
	return out
}

// runExample runs one example line: commands joined by " | ", an optional
// final "> FILE".
func runExample(t *testing.T, line string, mapFile func(string) string) {
	t.Helper()
	cmdline, redirect := line, ""
	if i := strings.LastIndex(line, " > "); i > 0 {
		cmdline, redirect = line[:i], mapFile(strings.TrimSpace(line[i+3:]))
	}
	var in []byte
	for _, cmd := range strings.Split(cmdline, " | ") {
		args := strings.Fields(strings.ReplaceAll(cmd, "'", ""))
		for i := range args {
			args[i] = mapFile(args[i])
		}
		var out []byte
		if args[0] == "limpid" {
			code, stdout, errs := limpid(t, in, args[1:]...)
			if code != 0 {
				t.Fatalf("example %q: %q: exit %d: %s", line, cmd, code, errs)
			}
			out = []byte(stdout)
		} else {
			c := exec.Command(args[0], args[1:]...)
			c.Stdin = bytes.NewReader(in)
			var e bytes.Buffer
			c.Stderr = &e
			var err error
			if out, err = c.Output(); err != nil {
				t.Fatalf("example %q: %q: %v: %s", line, cmd, err, e.String())
			}
		}
		in = out
	}
	if redirect != "" {
		if err := os.WriteFile(redirect, in, 0o644); err != nil {
			t.Fatal(err)
		}
		if len(in) == 0 {
			t.Fatalf("example %q wrote nothing to %s", line, redirect)
		}
	}
}

// skipUnderRace skips a documentation check under the race detector (make
// test runs it in its own pass without -race; it checks no concurrency).
func skipUnderRace(t *testing.T) {
	t.Helper()
	if raceEnabled {
		t.Skip("documentation check: runs without -race (make test's docs pass)")
	}
}
