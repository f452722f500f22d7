package main

// runBenchCampaign is `sluice bench campaign`: a synthetic campaign through
// the real pipeline with throughput, latency percentiles and peak memory.
func runBenchCampaign(args []string) int {
	return fail(exitFailure, "bench campaign: not built yet")
}
