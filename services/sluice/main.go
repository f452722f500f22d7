// Command sluice turns the stream of tomography scans of a two-phase flow
// experiment into checked time series of saturation, capillary pressure,
// interfacial areas, contact angles and ganglia. See README.md.
package main

import (
	"fmt"
	"io"
	"os"
)

// defaultData is the data directory of every command that reads or writes
// a campaign's store (run, reprocess, status, plot, report, switch,
// compare, reference): one default, so the commands find each other's
// campaigns without --data. The demo keeps its own directory, which it
// resets, and prints the --data to pass.
const defaultData = "sluice-data"

// stdout receives command output (tests replace it).
var stdout io.Writer = os.Stdout

func main() {
	os.Exit(run(os.Args[1:]))
}

// command is one subcommand of sluice.
type command struct {
	name, summary string
	run           func(args []string) int
}

func commands() []command {
	return []command{
		{"measure", "measure a label or grey volume (raw, TIFF stack, Zarr)", runMeasure},
		{"segment", "segment a grey volume into solid / wetting / nonwetting labels", runSegment},
		{"reference", "store a campaign's solid mask from a high-quality reference scan (reference-scan mode)", runReference},
		{"run", "all-in-one: embedded NATS, local store, watched directory, workers, aggregator, live page", runAll},
		{"ingest", "store a scan (or watch a directory) as steps of a campaign and queue their tiles", runIngest},
		{"worker", "process tile tasks from NATS (stateless; run as many as you like)", runWorker},
		{"aggregate", "merge tile results into step results, series, events, metrics and the live page", runAggregate},
		{"demo", "run a synthetic displacement campaign through the whole pipeline", runDemo},
		{"plot", "write a campaign's plots as PNG and SVG", runPlot},
		{"report", "write a campaign's self-contained HTML report", runReport},
		{"reprocess", "reprocess a stored campaign (or a directory of volumes) with new parameters as batch work", runReprocess},
		{"switch", "make a reprocessed run the campaign's current series", runSwitch},
		{"queue-policy", "show or set the task delivery policy (--ack-wait, --max-deliver) of a deployment's queue", runQueuePolicy},
		{"status", "show a campaign's runs with done, pending and failed steps", runStatus},
		{"compare", "compare two runs of a campaign step by step, with overlaid plots", runCompare},
		{"bench", "time each processing stage on a synthetic scan", runBench},
		{"version", "print the version", func([]string) int { fmt.Println("sluice", Version); return 0 }},
	}
}

func run(args []string) int {
	if len(args) == 0 || args[0] == "-h" || args[0] == "--help" || args[0] == "help" {
		usage()
		if len(args) == 0 {
			return 2
		}
		return 0
	}
	for _, c := range commands() {
		if c.name == args[0] {
			return c.run(args[1:])
		}
	}
	fmt.Fprintf(os.Stderr, "sluice: unknown command %q (run `sluice help`)\n", args[0])
	return 2
}

func usage() {
	fmt.Fprintln(os.Stderr, "usage: sluice COMMAND [flags] [args]\n\ncommands:")
	for _, c := range commands() {
		fmt.Fprintf(os.Stderr, "  %-12s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(os.Stderr, "\nRun `sluice COMMAND -h` for the flags of a command.")
}
