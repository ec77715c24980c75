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
var helpExamples = [][]string{{"psf", "build"}, {"psf", "measure"}, {"simulate"}, {"restore"}, {"tiles", "pack"}, {"assess"}, {"clean"}, {"plan"}, {"merge"}}

// Every example that a subcommand's --help prints runs as written, in
// order, on the fixtures: input names (scene.tif, in.tif, truth.tif,
// in.jp2) stand for a 96-pixel crop of the observed fixture (the whole
// fixture for psf measure, whose edge window is the demo tarp's), paths
// under testdata/ for the repository's files (the examples run from its
// root), other file names for files in one temporary directory, so that one example can
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
				case strings.HasPrefix(a, "testdata/"):
					return filepath.Join("..", "..", a)
				case inputs[a] && strings.HasPrefix(line, "limpid psf measure"):
					return fixture("observed.tif")
				case inputs[a]:
					return crop
				case regexp.MustCompile(`^[\w.-]+(\.(tif|txt|json|arrows)|/)$`).MatchString(a):
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
		t.Skip("runs without -race, in make test's second pass (documentation and scale-out checks)")
	}
}

// The README's shell examples run as written (the same substitutions as
// the help examples: truth.tif is the fixture's reference, observed.tif the
// file an earlier example simulated; GDAL pipes as programs). Lines that
// only configure a shell (export, loops, make rules) are not commands and
// are skipped. Source: the project's contract that documented examples
// work (README); no outside source.
func TestREADMEExamplesRun(t *testing.T) {
	skipUnderRace(t)
	dir := t.TempDir()
	crop := cropFixture(t, dir, 96)
	n := 0
	for _, line := range readmeCommands(t) {
		n++
		wholeScene := strings.Contains(line, "psf measure") || strings.Contains(line, "--psf auto")
		var mapFile func(a string) string
		mapFile = func(a string) string {
			for _, p := range []string{"kernel:", "measured:"} {
				if strings.HasPrefix(a, p) {
					return p + mapFile(a[len(p):])
				}
			}
			switch {
			case a == "truth.tif":
				return fixture("reference.tif")
			case (a == "scene.tif" || a == "in.jp2") && wholeScene:
				return fixture("observed.tif")
			case a == "scene.tif" || a == "in.jp2":
				return crop
			case a == "curves" || regexp.MustCompile(`^[\w.-]+(\.(tif|txt|json|arrows|png|html)|/)$`).MatchString(a):
				return filepath.Join(dir, a)
			}
			return a
		}
		runExample(t, line, mapFile)
	}
	if n < 12 {
		t.Fatalf("found %d commands in the README's examples, expected at least 12", n)
	}
}

// readmeCommands returns the limpid and GDAL command lines of the README's
// sh blocks, continuation lines joined.
func readmeCommands(t *testing.T) []string {
	t.Helper()
	var out []string
	in, cur := false, ""
	for _, l := range strings.Split(string(mustRead(t, filepath.Join("..", "..", "README.md"))), "\n") {
		switch {
		case strings.HasPrefix(l, "```sh"):
			in = true
			continue
		case strings.HasPrefix(l, "```"):
			in = false
			continue
		case !in:
			continue
		}
		if cur != "" {
			cur += " " + strings.TrimSpace(strings.TrimSuffix(l, "\\"))
		} else if strings.HasPrefix(l, "limpid ") || strings.HasPrefix(l, "gdal_translate ") {
			cur = strings.TrimSuffix(l, "\\")
		}
		if cur != "" && !strings.HasSuffix(l, "\\") {
			out = append(out, strings.Join(strings.Fields(cur), " "))
			cur = ""
		}
	}
	return out
}
