package main

import (
	"bufio"
	"bytes"
	"context"
	"crypto/sha256"
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"testing"
	"time"
)

// The bad-input corpus: testdata/badinput/cases.tsv lists hostile command
// lines and files (its header gives the format). Each case runs limpid in a
// child process (the test binary re-executed as limpid, so that a crash or
// an out-of-memory death is a failed case, not a dead test run) with TMPDIR
// pointing at an empty directory, and checks the error contract README
// states: the exit code, exactly one stderr line starting "limpid: ", nothing
// at OUTPUT, no new file in the output directory or TMPDIR, every input
// byte-identical afterwards.
//
// Source: the contract follows POSIX.1-2017 XCU 1.4 (Utility Description
// Defaults: "CONSEQUENCES OF ERRORS" — a utility that fails leaves no partial
// output it created) and the exit status convention of XCU 2.8.2 (non-zero
// on failure); the 2-for-usage split is common practice, no source.

const badInputDir = "../../testdata/badinput"

// childTimeout bounds one corpus case; refusals take well under a second,
// and 30 s leaves room for a loaded CI machine (common practice, no source).
const childTimeout = 30 * time.Second

type corpusCase struct {
	name, fragment string
	exit           int
	env            []string
	args           []string
}

func readBadCases(t *testing.T) []corpusCase {
	t.Helper()
	f, err := os.Open(filepath.Join(badInputDir, "cases.tsv"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var cases []corpusCase
	sc := bufio.NewScanner(f)
	for line := 1; sc.Scan(); line++ {
		text := sc.Text()
		if strings.TrimSpace(text) == "" || strings.HasPrefix(text, "#") {
			continue
		}
		cols := strings.Split(text, "\t")
		if len(cols) != 4 {
			t.Fatalf("cases.tsv line %d: %d tab-separated columns, want 4", line, len(cols))
		}
		code, err := strconv.Atoi(cols[1])
		if err != nil {
			t.Fatalf("cases.tsv line %d: exit code %q: %v", line, cols[1], err)
		}
		c := corpusCase{name: cols[0], exit: code, fragment: cols[2]}
		for _, a := range strings.Fields(cols[3]) {
			if kv, ok := strings.CutPrefix(a, "env:"); ok && len(c.args) == 0 {
				c.env = append(c.env, kv)
				continue
			}
			c.args = append(c.args, a)
		}
		cases = append(cases, c)
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return cases
}

// snapshot maps every regular file under dir to its SHA-256 (FIPS 180-4).
func snapshot(t *testing.T, dir string) map[string][sha256.Size]byte {
	t.Helper()
	out := map[string][sha256.Size]byte{}
	err := filepath.WalkDir(dir, func(p string, d os.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		out[p] = sha256.Sum256(b)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func copyFile(t *testing.T, src, dst string) {
	t.Helper()
	b, err := os.ReadFile(src)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(dst, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// expand replaces the placeholders of one argument, copying inputs into in.
func expand(t *testing.T, arg, in, outdir string) string {
	t.Helper()
	for {
		i := strings.Index(arg, "{")
		if i < 0 {
			return arg
		}
		j := strings.Index(arg[i:], "}")
		if j < 0 {
			t.Fatalf("unclosed placeholder in %q", arg)
		}
		key := arg[i+1 : i+j]
		var val string
		switch {
		case key == "in":
			val = filepath.Join(in, "observed.tif")
			if _, err := os.Stat(val); err != nil {
				copyFile(t, fixture("observed.tif"), val)
			}
		case key == "out":
			val = filepath.Join(outdir, "out.tif")
		case key == "outdir":
			val = outdir
		case strings.HasPrefix(key, "b:"):
			name := key[2:]
			val = filepath.Join(in, name)
			if _, err := os.Stat(val); err != nil {
				copyFile(t, filepath.Join(badInputDir, name), val)
			}
		default:
			t.Fatalf("unknown placeholder {%s}", key)
		}
		arg = arg[:i] + val + arg[i+j+1:]
	}
}

// runAsChild runs limpid with args in a child process (see TestMain) and
// returns its exit code and stderr.
func runAsChild(t *testing.T, env, args []string, stdin io.Reader) (int, string) {
	t.Helper()
	// A bad input must be refused before any real work: a case that runs
	// longer than this has started restoring what it should have refused.
	ctx, cancel := context.WithTimeout(context.Background(), childTimeout)
	defer cancel()
	cmd := exec.CommandContext(ctx, os.Args[0], args...)
	cmd.Env = append(append(os.Environ(), childEnv+"=1"), env...)
	cmd.Stdin = stdin
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	cmd.Stdout = io.Discard
	err := cmd.Run()
	var ee *exec.ExitError
	switch {
	case err == nil:
		return 0, stderr.String()
	case ctx.Err() != nil:
		t.Errorf("limpid %v still ran after %v: killed", args, childTimeout)
		return -1, stderr.String()
	case errors.As(err, &ee):
		return ee.ExitCode(), stderr.String()
	}
	t.Fatalf("running limpid %v: %v", args, err)
	return 0, ""
}

func TestBadInputCorpus(t *testing.T) {
	cases := readBadCases(t)
	if len(cases) < 30 {
		t.Fatalf("cases.tsv holds %d cases; the corpus should not shrink below 30", len(cases))
	}
	seen := map[string]bool{}
	for _, c := range cases {
		if seen[c.name] {
			t.Fatalf("case %s appears twice", c.name)
		}
		seen[c.name] = true
		t.Run(c.name, func(t *testing.T) {
			root := t.TempDir()
			in, outdir, tmp := filepath.Join(root, "in"), filepath.Join(root, "out"), filepath.Join(root, "tmp")
			for _, d := range []string{in, outdir, tmp} {
				if err := os.Mkdir(d, 0o755); err != nil {
					t.Fatal(err)
				}
			}
			args := make([]string, len(c.args))
			for i, a := range c.args {
				args[i] = expand(t, a, in, outdir)
			}
			before := snapshot(t, in)
			outBefore := snapshot(t, outdir)
			env := append([]string{"TMPDIR=" + tmp}, c.env...)
			code, stderr := runAsChild(t, env, args, strings.NewReader(""))
			if code != c.exit {
				t.Errorf("exit %d, want %d; stderr:\n%s", code, c.exit, stderr)
			}
			lines := strings.Split(strings.TrimRight(stderr, "\n"), "\n")
			last := lines[len(lines)-1]
			if len(lines) != 1 || !strings.HasPrefix(last, "limpid: ") {
				t.Errorf("stderr is %d lines, want one line starting \"limpid: \":\n%s", len(lines), stderr)
			}
			if !strings.Contains(strings.ToLower(last), strings.ToLower(c.fragment)) {
				t.Errorf("error line %q does not name %q", last, c.fragment)
			}
			if _, err := os.Lstat(filepath.Join(outdir, "out.tif")); err == nil {
				t.Errorf("something was written at OUTPUT")
			}
			if after := snapshot(t, outdir); len(after) != len(outBefore) {
				t.Errorf("output directory gained files: %v", keys(after))
			}
			if left := snapshot(t, tmp); len(left) != 0 {
				t.Errorf("TMPDIR holds %v after the run", keys(left))
			}
			after := snapshot(t, in)
			for p, h := range before {
				if after[p] != h {
					t.Errorf("input %s changed", filepath.Base(p))
				}
			}
			if len(after) != len(before) {
				t.Errorf("input directory gained files: %v", keys(after))
			}
		})
	}
}

func keys[V any](m map[string]V) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, filepath.Base(k))
	}
	sort.Strings(out)
	return out
}
