package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/urfave/cli/v2"

	"limpid/step"
)

// node is one command of the tree with its path below limpid.
type node struct {
	path []string
	cmd  *cli.Command
}

func (n node) name() string { return strings.Join(n.path, " ") }

// commandTree walks the prepared command tree, groups and leaves.
func commandTree(t *testing.T) (*cli.App, []node) {
	t.Helper()
	app := newApp(nil, io.Discard, io.Discard, nil)
	var out []node
	var walk func(parent []string, cmds []*cli.Command)
	walk = func(parent []string, cmds []*cli.Command) {
		for _, c := range cmds {
			p := append(append([]string{}, parent...), c.Name)
			out = append(out, node{p, c})
			walk(p, c.Subcommands)
		}
	}
	walk(nil, app.Commands)
	if len(out) < 10 {
		t.Fatalf("the tree has %d commands, expected at least 10", len(out))
	}
	return app, out
}

func isNumeric(f cli.Flag) (numeric, unsigned bool) {
	switch f.(type) {
	case *cli.IntFlag, *cli.Int64Flag, *cli.Float64Flag:
		return true, false
	case *cli.UintFlag, *cli.Uint64Flag:
		return true, true
	}
	return false, false
}

// usageCase is one command line that must be refused as a usage error.
type usageCase struct {
	name string
	args []string
	env  map[string]string
	want string // a part of the message
}

// usageCases covers every command: unknown flags, words and negative values
// for numbers, bad LIMPID_* values, missing flag values, wrong operand
// counts, unknown and missing commands.
func usageCases(t *testing.T, dir string) []usageCase {
	_, tree := commandTree(t)
	obs := fixture("observed.tif")
	// Flags and operands that make each command valid apart from the flag
	// under test (given last, so that it wins).
	valid := map[string][]string{
		"restore":      {"--psf", "gaussian:sigma=1.4", "--smooth", "0.2", "--stop", "change", "--iterations", "2"},
		"demo":         {"--out", filepath.Join(dir, "demo"), "--size", "64"},
		"psf measure":  {"--edge", "168,30,200,82"},
		"simulate":     {"--psf", "gaussian:sigma=1", "--noise", "none"},
		"tiles pack":   nil,
		"tiles unpack": nil,
		"noise":        nil,
		"psf build":    nil,
		"assess":       nil,
		"plan":         {"--psf", "gaussian:sigma=1.4"},
		"merge":        nil,
	}
	operands := map[string][]string{
		"restore":      {obs, filepath.Join(dir, "restored.tif")},
		"demo":         {},
		"psf measure":  {obs},
		"simulate":     {fixture("reference.tif"), filepath.Join(dir, "simulated.tif")},
		"tiles pack":   {obs, filepath.Join(dir, "packed.arrows")},
		"tiles unpack": {filepath.Join(dir, "packed.arrows"), filepath.Join(dir, "unpacked.tif")},
		"noise":        {obs},
		"psf build":    {"gaussian:sigma=1", filepath.Join(dir, "psf.txt")},
		"assess":       {obs, obs},
		"clean":        {},
		"plan":         {obs, filepath.Join(dir, "scene.plan.json")},
		"merge":        {filepath.Join(dir, "shards"), filepath.Join(dir, "merged.tif")},
	}
	cases := []usageCase{
		{"no command", nil, nil, "no command given"},
		{"unknown command", []string{"restor"}, nil, `unknown command "restor"`},
		{"unknown global flag", []string{"--bogus"}, nil, "unknown flag --bogus"},
		{"help of an unknown command", []string{"help", "nosuch"}, nil, `unknown command "nosuch"`},
	}
	for _, n := range tree {
		p := n.path
		if len(n.cmd.Subcommands) > 0 {
			cases = append(cases,
				usageCase{n.name() + " without command", p, nil, n.name() + " needs a command"},
				usageCase{n.name() + " unknown command", append(p, "nosuch"), nil, fmt.Sprintf("unknown command %q", n.name()+" nosuch")},
				usageCase{n.name() + " unknown flag", append(p, "--bogus"), nil, "unknown flag --bogus"})
			continue
		}
		ops, ok := operands[n.name()]
		if !ok {
			t.Fatalf("no operands for %s in the test table", n.name())
		}
		line := func(extra ...string) []string {
			args := append(append(append([]string{}, p...), valid[n.name()]...), extra...)
			return append(args, ops...)
		}
		cases = append(cases,
			usageCase{n.name() + " unknown flag", line("--no-such-flag"), nil, "unknown flag --no-such-flag"},
			usageCase{n.name() + " unknown short flag", line("-Z"), nil, "unknown flag -Z"},
		)
		if !strings.HasSuffix(n.cmd.ArgsUsage, "...]") {
			// [NAME...] takes any number of operands.
			cases = append(cases, usageCase{n.name() + " one operand too many", append(line(), "extra"), nil, "extra"})
		}
		if len(ops) > 0 {
			cases = append(cases,
				usageCase{n.name() + " no operands", append(append([]string{}, p...), valid[n.name()]...), nil, "got none"},
				usageCase{n.name() + " flag after the operands", append(line(), "--workers", "2"), nil, "flags go before the arguments (--workers came after them)"})
		}
		for _, f := range n.cmd.Flags {
			fl := f.Names()[0]
			if fl == "help" {
				continue
			}
			env := envName(p, fl)
			if _, isBool := f.(*cli.BoolFlag); isBool {
				cases = append(cases, usageCase{n.name() + " " + env + " not a boolean", line(), map[string]string{env: "maybe"}, env})
			} else {
				cases = append(cases, usageCase{n.name() + " --" + fl + " without value", append(append([]string{}, p...), "--"+fl), nil, "--" + fl + " needs a value"})
			}
			numeric, unsigned := isNumeric(f)
			if !numeric {
				continue
			}
			cases = append(cases,
				usageCase{n.name() + " --" + fl + " word", line("--"+fl, "many"), nil, fmt.Sprintf("--%s %q: expected", fl, "many")},
				usageCase{n.name() + " " + env + " word", line(), map[string]string{env: "many"}, env + `="many"`},
				usageCase{n.name() + " --" + fl + " negative", line("--"+fl, "-3"), nil, "--" + fl})
			if unsigned {
				cases = append(cases, usageCase{n.name() + " --" + fl + " -1", line("--"+fl, "-1"), nil, fmt.Sprintf("--%s %q: expected a whole number >= 0", fl, "-1")})
			}
		}
	}
	return cases
}

// Every usage error on every command and nested subcommand exits 2 with one
// stderr line "limpid: ..." that ends with a pointer to the command's
// --help, and writes nothing to stdout (no help dump). Source: POSIX.1-2017
// XCU 1.4 Utility Description Defaults (CONSEQUENCES OF ERRORS: a
// diagnostic message to standard error, non-zero exit status); exit status 2
// for usage errors follows utilities such as diff and cmp (XCU: ">1 An error
// occurred") and the project's contract (README, "Exit codes"). The hint
// wording is common practice, no source.
func TestUsageErrors(t *testing.T) {
	dir := t.TempDir()
	hintRE := regexp.MustCompile(`\(see 'limpid( [a-z]+)* --help'\)$`)
	for _, c := range usageCases(t, dir) {
		t.Run(c.name, func(t *testing.T) {
			for k, v := range c.env {
				t.Setenv(k, v)
			}
			code, stdout, stderr := limpid(t, nil, c.args...)
			if code != exitUsage {
				t.Fatalf("%v: exit %d, want 2; stderr: %s", c.args, code, stderr)
			}
			lines := strings.Split(strings.TrimSuffix(stderr, "\n"), "\n")
			if len(lines) != 1 || !strings.HasPrefix(stderr, "limpid: ") || !strings.HasSuffix(stderr, "\n") {
				t.Fatalf("%v: want one line starting \"limpid: \", got %q", c.args, stderr)
			}
			if !strings.Contains(stderr, c.want) || !hintRE.MatchString(lines[0]) {
				t.Fatalf("%v: want %q and a --help hint in %q", c.args, c.want, stderr)
			}
			if stdout != "" {
				t.Fatalf("%v: stdout not empty: %q", c.args, stdout)
			}
		})
	}
}

// Messages name what the user typed and say what is expected. Project
// contract (issue: "psf psf: bad specification", "got 1 arguments", sigma
// reported as sx), no outside source; English number agreement.
func TestUsageMessages(t *testing.T) {
	dir := t.TempDir()
	out := filepath.Join(dir, "o.tif")
	obs := fixture("observed.tif")
	for _, c := range []struct {
		args      []string
		want, not []string
	}{
		{[]string{"restore", "--psf", "bogus", obs, out}, []string{`--psf "bogus": expected NAME:PARAMETERS`}, []string{"psf psf", "bad specification"}},
		{[]string{"simulate", "--psf", "bogus", "--noise", "none", obs, out}, []string{`--psf "bogus"`}, []string{"psf psf", "bad specification"}},
		{[]string{"psf", "build", "bogus", filepath.Join(dir, "k.txt")}, []string{`SPEC "bogus"`}, []string{"psf psf", "bad specification"}},
		{[]string{"restore", "--psf", "gaussian:sigma=-1", obs, out}, []string{"sigma=-1"}, []string{"sx=", "invalid kernel"}},
		{[]string{"simulate", "--psf", "gaussian:sigma=-1", "--noise", "none", obs, out}, []string{"sigma=-1"}, []string{"sx="}},
		{[]string{"psf", "build", "gaussian:sigma=-1*motion:length=1", filepath.Join(dir, "k.txt")}, []string{"sigma=-1"}, []string{"sx="}},
		{[]string{"restore", "--iterations", "0", "--psf", "gaussian:sigma=1", obs, out}, []string{"--iterations 0"}, []string{"bad parameter"}},
		{[]string{"restore", obs}, []string{"restore needs INPUT and OUTPUT, got 1 argument (" + obs + ")"}, []string{"arguments"}},
		{[]string{"noise"}, []string{"noise needs one INPUT, got none"}, nil},
		{[]string{"assess", obs, obs, obs}, []string{"assess needs OBSERVED and RESTORED, got 3 arguments"}, nil},
		{[]string{"demo", "x"}, []string{"demo takes no arguments, got 1 argument (x)"}, nil},
	} {
		code, _, stderr := limpid(t, nil, c.args...)
		if code != exitUsage {
			t.Errorf("%v: exit %d, want 2: %s", c.args, code, stderr)
		}
		for _, w := range c.want {
			if !strings.Contains(stderr, w) {
				t.Errorf("%v: %q lacks %q", c.args, stderr, w)
			}
		}
		for _, w := range c.not {
			if strings.Contains(stderr, w) {
				t.Errorf("%v: %q contains %q", c.args, stderr, w)
			}
		}
	}
	// A bad value from the environment names the variable.
	t.Setenv("LIMPID_FORMAT", "bogus")
	if _, _, stderr := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1", obs, out); !strings.Contains(stderr, "(from LIMPID_FORMAT)") {
		t.Errorf("LIMPID_FORMAT=bogus: %q does not name the variable", stderr)
	}
}

// --help and -h on every command, `limpid help COMMAND...` and --version
// print to standard output and exit 0, with nothing on stderr. Source: GNU
// Coding Standards 4.8.2 "--help" and 4.8.1 "--version": print on standard
// output, then exit successfully.
func TestHelpAndVersionOnStdout(t *testing.T) {
	_, tree := commandTree(t)
	lines := [][]string{{"--help"}, {"-h"}, {"help"}}
	for _, n := range tree {
		lines = append(lines, append(n.path, "--help"), append(n.path, "-h"), append([]string{"help"}, n.path...))
	}
	// Help is printed when asked for, whatever else the line holds.
	lines = append(lines, []string{"restore", "--help", "in.tif", "out.tif"}, []string{"tiles", "help", "pack"},
		[]string{"tiles", "--help", "pack"}, []string{"--help", "restore"})
	for _, args := range lines {
		code, stdout, stderr := limpid(t, nil, args...)
		if code != 0 || stderr != "" || !strings.HasPrefix(stdout, "NAME:\n   limpid") || !strings.Contains(stdout, "--help, -h") {
			t.Errorf("%v: exit %d, stderr %q, stdout %.80q", args, code, stderr, stdout)
		}
	}
	// The help shown is the command's own: its full name heads it.
	for _, n := range tree {
		_, stdout, _ := limpid(t, nil, append(n.path, "--help")...)
		if !strings.HasPrefix(stdout, "NAME:\n   limpid "+n.name()+" - ") {
			t.Errorf("%s --help starts %.60q", n.name(), stdout)
		}
	}
	code, stdout, stderr := limpid(t, nil, "--version")
	if want := "limpid version " + step.Version + "\n"; code != 0 || stdout != want || stderr != "" {
		t.Errorf("--version: exit %d, stdout %q (want %q), stderr %q", code, stdout, want, stderr)
	}
}

// Variables reserved for the test and benchmark switches (LIMPID_LONG,
// LIMPID_BENCH_*), which no flag may take.
var reservedEnv = []string{"LIMPID_LONG", "LIMPID_BENCH_SCENE", "LIMPID_BENCH_STREAM"}

// Every flag of every command has exactly one environment variable, shown
// in its help; no name is shared by two commands' flags (exporting one for
// one command must not change another); restore keeps the short names
// LIMPID_<FLAG> it always had and every other command's names start with
// LIMPID_<COMMAND>_. Project contract (README, "Environment"), no outside
// source.
func TestEnvNames(t *testing.T) {
	_, tree := commandTree(t)
	owner := map[string]string{}
	for _, r := range reservedEnv {
		owner[r] = "a test switch"
	}
	for _, n := range tree {
		for _, f := range n.cmd.Flags {
			fl := f.Names()[0]
			if fl == "help" {
				continue
			}
			where := n.name() + " --" + fl
			ev := f.(cli.DocGenerationFlag).GetEnvVars()
			if len(ev) != 1 {
				t.Errorf("%s: environment variables %v, want one", where, ev)
				continue
			}
			name := ev[0]
			prefix := "LIMPID_" + strings.ToUpper(strings.ReplaceAll(strings.Join(n.path, "_"), "-", "_")) + "_"
			if n.name() == "restore" {
				prefix = "LIMPID_"
			}
			if want := prefix + strings.ToUpper(strings.ReplaceAll(fl, "-", "_")); name != want {
				t.Errorf("%s: variable %s, want %s", where, name, want)
			}
			if prev, dup := owner[name]; dup {
				t.Errorf("%s and %s share %s", prev, where, name)
			}
			owner[name] = where
			if !strings.Contains(fmt.Sprint(f), "[$"+name+"]") {
				t.Errorf("%s: help does not show $%s: %s", where, name, f)
			}
		}
	}
	// README's "Environment" table gives each command's rule.
	readme, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	for _, n := range tree {
		if len(n.cmd.Flags) < 2 { // --help only
			continue
		}
		rule := "`" + envName(n.path, "<FLAG>") + "`"
		if !strings.Contains(string(readme), rule) {
			t.Errorf("README does not give %s's variables %s", n.name(), rule)
		}
	}
	// The names users of restore already export.
	for _, name := range []string{"LIMPID_PSF", "LIMPID_WORKERS", "LIMPID_OUTPUT_TYPE", "LIMPID_NOISE", "LIMPID_SMOOTH", "LIMPID_STOP"} {
		if owner[name] != "restore --"+strings.ToLower(strings.ReplaceAll(strings.TrimPrefix(name, "LIMPID_"), "_", "-")) {
			t.Errorf("%s belongs to %q, want restore", name, owner[name])
		}
	}
}

// restore's variables do not reach simulate, whose --psf and --noise have
// another syntax, and simulate reads its own. Project contract (issue 16:
// exporting one broke the other), no outside source.
func TestEnvPerCommand(t *testing.T) {
	out := filepath.Join(t.TempDir(), "o.tif")
	t.Setenv("LIMPID_NOISE", "a=0.4,b=9")
	t.Setenv("LIMPID_PSF", "gaussian:sigma=1")
	code, _, stderr := limpid(t, nil, "simulate", "--psf", "gaussian:sigma=1", fixture("reference.tif"), out)
	if code != exitUsage || !strings.Contains(stderr, "--noise is required") {
		t.Errorf("simulate read LIMPID_NOISE: exit %d, %s", code, stderr)
	}
	t.Setenv("LIMPID_SIMULATE_NOISE", "bogus:x=1")
	code, _, stderr = limpid(t, nil, "simulate", "--psf", "gaussian:sigma=1", fixture("reference.tif"), out)
	if code != exitUsage || !strings.Contains(stderr, "bogus:x=1") {
		t.Errorf("simulate did not read LIMPID_SIMULATE_NOISE: exit %d, %s", code, stderr)
	}
	// A flag on the command line wins over its variable: --noise none is
	// read, so the next check (--format) is the one that fails.
	code, _, stderr = limpid(t, nil, "simulate", "--psf", "gaussian:sigma=1", "--noise", "none", "--format", "bogus", fixture("reference.tif"), out)
	if code != exitUsage || !strings.Contains(stderr, `--format "bogus"`) {
		t.Errorf("--noise none did not win over LIMPID_SIMULATE_NOISE: exit %d, %s", code, stderr)
	}
}

// Each flag's help states at most one default: either urfave/cli's
// "(default: X)" or the usage text's own, never both. Project contract
// (issue 16: "--iterations" showed two), no outside source.
func TestOneDefaultPerFlag(t *testing.T) {
	app, tree := commandTree(t)
	flags := map[string][]cli.Flag{"limpid": app.Flags}
	for _, n := range tree {
		flags[n.name()] = n.cmd.Flags
	}
	for cmd, fs := range flags {
		for _, f := range fs {
			rendered := fmt.Sprint(f)
			usage := f.(cli.DocGenerationFlag).GetUsage()
			firstLine, _, _ := strings.Cut(usage, "\n")
			appended := strings.Count(rendered, "(default:") - strings.Count(usage, "(default:")
			own := strings.Count(firstLine, "default")
			if appended+own > 1 || strings.Count(rendered, "(default:") > 1 {
				t.Errorf("%s --%s states %d defaults: %s", cmd, f.Names()[0], appended+own, rendered)
			}
		}
	}
}
