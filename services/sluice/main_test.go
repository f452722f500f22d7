package main

import (
	"os"
	"testing"
)

// TestMain lets a test start this test binary as `sluice` (as `sluice
// bench campaign --procs` starts `sluice worker` processes from its own
// executable): with SLUICE_TEST_AS_CLI=1 in its environment the binary
// runs the command line instead of the tests.
func TestMain(m *testing.M) {
	if os.Getenv("SLUICE_TEST_AS_CLI") == "1" {
		os.Exit(run(os.Args[1:]))
	}
	os.Exit(m.Run())
}
