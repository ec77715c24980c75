package main

import (
	"os"
	"testing"
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
