package main

import (
	"os"
	"os/exec"
	"strings"
	"testing"

	"limpid/step"
)

// childEnv, when set to 1, makes the test binary behave as limpid itself
// (main with the process's arguments): tests that need a separate process
// (exit codes after a crash, signals, TMPDIR per run) re-execute
// os.Args[0] with it instead of building the command.
const childEnv = "LIMPID_TEST_AS_COMMAND"

func TestMain(m *testing.M) {
	if os.Getenv(childEnv) == "1" {
		main()
		return
	}
	os.Exit(m.Run())
}

// The child mechanism runs limpid itself: the re-executed test binary
// answers --version on stdout with exit 0 and an unknown command with exit
// 2 and one "limpid:" line, as the built command does (README, "Exit
// codes"; the contract the corpus relies on). Source: the os/exec and
// testing package documentation (TestMain and re-executing os.Args[0] is the
// standard library's own pattern for subprocess tests).
func TestChildIsLimpid(t *testing.T) {
	code, stderr := runAsChild(t, nil, []string{"frobnicate"}, nil)
	if code != 2 || !strings.HasPrefix(stderr, "limpid: ") || strings.Count(stderr, "\n") != 1 {
		t.Errorf("unknown command: exit %d, stderr %q; want 2 and one limpid: line", code, stderr)
	}
	cmd := exec.Command(os.Args[0], "--version")
	cmd.Env = append(os.Environ(), childEnv+"=1")
	if out, err := cmd.Output(); err != nil || !strings.Contains(string(out), step.Version) {
		t.Errorf("--version as a child: %v, stdout %q; want the version %s", err, out, step.Version)
	}
}
