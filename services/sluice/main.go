// Command sluice turns the stream of tomography scans of a two-phase flow
// experiment into checked time series of saturation, capillary pressure,
// interfacial areas, contact angles and ganglia. See README.md.
package main

import (
	"fmt"
	"io"
	"os"
	"sluice/pkg/campaign"
	"strings"
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
		{"rig-log", "store a flow rig's CSV log for a campaign and set the series' experiment-log columns from it", runRigLog},
		{"queue-policy", "show or set the task delivery policy (--ack-wait, --max-deliver) of a deployment's queue", runQueuePolicy},
		{"status", "show a campaign's runs with done, pending and failed steps", runStatus},
		{"compare", "compare two runs of a campaign step by step, with overlaid plots", runCompare},
		{"accuracy", "estimate the bias and spread of S_w, a_wn, Pc and θ for a campaign's rock, resolution and parameters", runAccuracy},
		{"bench", "time each processing stage on a synthetic scan", runBench},
		{"version", "print the version", func([]string) int { fmt.Fprintln(stdout, "sluice", Version); return exitOK }},
	}
}

func run(args []string) int {
	if len(args) == 0 {
		usage(os.Stderr)
		return exitBadInput
	}
	switch args[0] {
	case "-h", "-help", "--help":
		usage(stdout)
		return exitOK
	case "-version", "--version":
		args = []string{"version"}
	case "help":
		// `sluice help CMD` is `sluice CMD -h`.
		if len(args) == 1 {
			usage(stdout)
			return exitOK
		}
		if args[1] == "bench" && len(args) > 2 {
			args = []string{"bench", args[2], "-h"}
		} else {
			args = []string{args[1], "-h"}
		}
	}
	for _, c := range commands() {
		if c.name == args[0] {
			runningCommand, userArgs = c.name, args[1:]
			return c.run(args[1:])
		}
	}
	names := make([]string, 0, len(commands()))
	for _, c := range commands() {
		names = append(names, c.name)
	}
	if near := campaign.Nearest(args[0], names); near != "" {
		return fail(exitBadInput, "unknown command %q; did you mean %s?", args[0], near)
	}
	return fail(exitBadInput, "unknown command %q (run `sluice help`)", args[0])
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: sluice COMMAND [flags] [args]\n\ncommands:")
	for _, c := range commands() {
		fmt.Fprintf(w, "  %-12s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "\nRun `sluice help COMMAND` (or `sluice COMMAND -h`) for the flags of a command.")
}

// help is the text `sluice CMD -h` prints above the flags: a synopsis
// line (after "sluice "), one sentence saying what the command does, and
// notes on its arguments.
type help struct{ synopsis, sentence, notes string }

// helpFor returns the help of the flag set named name (a command, or
// "bench stages" and the like for the modes of bench).
func helpFor(name string) (help, bool) {
	h, ok := helps[name]
	if !ok {
		return h, false
	}
	if h.sentence == "" {
		for _, c := range commands() {
			if c.name == name {
				h.sentence = strings.ToUpper(c.summary[:1]) + c.summary[1:] + "."
			}
		}
	}
	return h, true
}

// helps holds the synopsis and notes of each flag set; the sentence comes
// from the command's summary unless given here.
var helps = map[string]help{
	"measure": {synopsis: "measure [flags] FILE",
		notes: "FILE is a raw file, a TIFF stack (one multi-page file or a directory of slices) or a Zarr array."},
	"segment": {synopsis: "segment [flags] FILE OUT",
		notes: "FILE is a grey volume (raw, TIFF stack or Zarr); OUT is a label volume,\nwritten as Zarr when it ends in .zarr, else as raw uint8 with a .sluice.json header."},
	"reference": {synopsis: "reference --campaign C [--data DIR | --store LOC] [flags] FILE",
		notes: "FILE is the reference scan; the solid mask goes to campaigns/C/reference/solid.zarr, its grey values\n(what each step is registered to) to campaigns/C/reference/volume.zarr."},
	"run":       {synopsis: "run [flags]"},
	"ingest":    {synopsis: "ingest --campaign C --nats URL --store LOC [flags] (FILE | --watch DIR)"},
	"worker":    {synopsis: "worker --nats URL --store LOC [flags]"},
	"aggregate": {synopsis: "aggregate --nats URL --store LOC [flags]"},
	"demo":      {synopsis: "demo [flags]"},
	"plot":      {synopsis: "plot [flags] CAMPAIGN"},
	"report":    {synopsis: "report [flags] CAMPAIGN"},
	"reprocess": {synopsis: "reprocess CAMPAIGN [--steps 10-250] [--set key=value …] [--config FILE] [--from DIR] [--data DIR | --nats URL --store LOC]"},
	"switch":    {synopsis: "switch [flags] CAMPAIGN --run HASH"},
	"rig-log": {synopsis: "rig-log [flags] CAMPAIGN FILE",
		notes: "FILE is read with the campaign's rig_log mapping; a bad row is refused (exit 2) naming the file and line.\nThe series is rewritten: do not run it while the campaign's aggregator is writing (during a run use --rig-log)."},
	"queue-policy": {synopsis: "queue-policy --nats URL [--ack-wait D --max-deliver N]"},
	"status":       {synopsis: "status [flags] CAMPAIGN"},
	"compare":      {synopsis: "compare [flags] CAMPAIGN --runs A,B"},
	"accuracy": {synopsis: "accuracy [flags] CAMPAIGN  |  accuracy --mask FILE [flags]",
		notes: "Builds capillary-equilibrium states (level set, prescribed Pc and θ) in a region of the campaign's solid mask,\nrenders them as scans with the grey levels, noise and blur estimated from the step's own scan, segments and\nmeasures them with the current run's parameters, and stores the bias and spread at campaigns/C/runs/HASH/accuracy.json.\nImage-derived Pc and contact angles are estimates; so are these error figures."},
	"bench stages": {synopsis: "bench [stages] [flags]",
		sentence: "Time each processing stage on a synthetic scan on this machine.",
		notes:    "Other modes: `sluice bench compare -h`, `sluice bench campaign -h`."},
	"bench compare": {synopsis: "bench compare [flags]",
		sentence: "Time sluice's processing chain against a SciPy / scikit-image reference script on one synthetic scan, and check that both computed the same values."},
	"bench campaign": {synopsis: "bench campaign [flags]",
		sentence: "Run a synthetic campaign through the real pipeline and report throughput, latency percentiles and peak memory."},
}
