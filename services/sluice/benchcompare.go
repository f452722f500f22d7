package main

// runBenchCompare is `sluice bench compare`: the same processing chain in
// sluice and in a scipy / scikit-image reference script, side by side.
func runBenchCompare(args []string) int {
	return fail(exitFailure, "bench compare: not built yet")
}
