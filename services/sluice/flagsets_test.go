package main

import (
	"flag"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"testing"
)

// Flag groups as the commands read them (see nodeFlags.register, inputFlags,
// measureFlags, segFlags, ingestFlags, campaignFlags).
var (
	storeGroup    = []string{"store", "s3-credentials-file"}
	natsGroup     = []string{"nats", "nats-creds", "nats-user", "nats-password-file", "nats-token-file", "nats-tls-ca", "nats-tls-cert", "nats-tls-key", "nats-replicas"}
	httpGroup     = []string{"http", "http-token-file"}
	policyGroup   = []string{"ack-wait", "max-deliver"}
	embedGroup    = []string{"data", "expose-nats", "nats-users-file", "expose-nats-tls-cert", "expose-nats-tls-key", "expose-nats-tls-client-ca"}
	inputGroup    = []string{"shape", "dtype", "byte-order", "voxel-size", "dataset", "max-voxels"}
	segGroup      = append([]string{"config"}, segOnlyFlags...)
	measureGroup  = []string{"solid", "wetting", "nonwetting", "ift", "connectivity", "flow-axis", "exclude", "curvature-sigma", "tile", "workers"}
	watchGroup    = []string{"campaign", "config", "watch", "create-watch", "settle", "times", "time-from-mtime", "rig-log"}
	campaignGroup = []string{"data", "store"}
)

func join(groups ...[]string) []string {
	var out []string
	for _, g := range groups {
		out = append(out, g...)
	}
	return out
}

// commandFlags is what each command reads, established by reading each
// run function (which flag values reach its work): the flags its help
// must list, no more and no less.
var commandFlags = map[string][]string{
	"measure":   join(inputGroup, measureGroup, segGroup, []string{"labels", "json"}),
	"segment":   join(inputGroup, segGroup, []string{"tile"}),
	"reference": join(inputGroup, campaignGroup, []string{"campaign", "config", "filter", "threshold", "solid-darker", "sample"}),
	// run: the embedded node serves HTTP, owns the delivery policy, and
	// connects to --nats instead when given.
	"run": join(embedGroup, storeGroup, natsGroup, httpGroup, policyGroup, inputGroup, watchGroup, []string{"workers"}),
	// ingest works no tasks: no delivery policy. HTTP with --watch.
	"ingest":    join(storeGroup, natsGroup, httpGroup, inputGroup, watchGroup, []string{"step", "time", "batch"}),
	"worker":    join(storeGroup, natsGroup, httpGroup, policyGroup, []string{"concurrency", "id", "exit-when-idle"}),
	"aggregate": join(storeGroup, natsGroup, httpGroup, policyGroup),
	"demo":      {"size", "steps", "data", "http", "workers", "tile", "seed", "serve", "v"},
	"plot":      join(campaignGroup, []string{"out"}),
	"report":    join(campaignGroup, []string{"out"}),
	"reprocess": join(embedGroup, storeGroup, natsGroup, httpGroup, policyGroup, inputGroup,
		[]string{"steps", "set", "config", "from", "times", "no-wait", "switch", "workers"}),
	"switch": join(campaignGroup, []string{"run", "partial"}),
	// rig-log reads and rewrites the store only.
	"rig-log": campaignGroup,
	// queue-policy talks to NATS only: no store, no HTTP.
	"queue-policy": join(natsGroup, policyGroup),
	// status reads the store (and dead letters from NATS): it serves no
	// HTTP and works no tasks.
	"status":  join(storeGroup, natsGroup, []string{"data"}),
	"compare": join(campaignGroup, []string{"runs", "out"}),
	// accuracy: a campaign (store) or a mask file (input flags, config,
	// the scan's levels, noise and blur).
	"accuracy": join(campaignGroup, inputGroup, []string{"step", "region", "theta", "states", "min-radius", "seed", "workers", "json", "mask", "config", "levels", "noise", "blur"}),
	// The modes of bench.
	"bench stages":   {"size", "tile", "workers", "nlm"},
	"bench compare":  {"size", "repeat", "python", "script", "json", "cpuprofile"},
	"bench campaign": {"size", "steps", "tile", "workers", "procs", "proc-cores", "base", "ahead", "seed", "data", "keep", "json", "timeout", "set"},
}

// helpFlags returns the flag names `sluice CMD -h` lists.
func helpFlags(t *testing.T, cmd string) []string {
	t.Helper()
	code, out, errs := runCLI(t, append([]string{"help"}, strings.Fields(cmd)...)...)
	if code != exitOK {
		t.Fatalf("%s -h: exit %d, %s", cmd, code, errs)
	}
	_, list, ok := strings.Cut(out, "\nflags:\n")
	if !ok {
		return nil
	}
	var names []string
	for _, l := range strings.Split(list, "\n") {
		if rest, ok := strings.CutPrefix(l, "  -"); ok {
			names = append(names, strings.Fields(rest)[0])
		}
	}
	sort.Strings(names)
	return names
}

// TestCommandsOfferOnlyTheirFlags: each command's help lists exactly the
// flags it reads (commandFlags), so that e.g. `status` offers no
// --ack-wait nor --http.
func TestCommandsOfferOnlyTheirFlags(t *testing.T) {
	var names []string
	for _, c := range commands() {
		switch c.name {
		case "version":
		case "bench":
			names = append(names, "bench stages", "bench compare", "bench campaign")
		default:
			names = append(names, c.name)
		}
	}
	for _, name := range names {
		want, ok := commandFlags[name]
		if !ok {
			t.Errorf("command %s has no entry in commandFlags", name)
			continue
		}
		want = slices.Clone(want)
		sort.Strings(want)
		want = slices.Compact(want)
		got := helpFlags(t, name)
		for _, n := range got {
			if !slices.Contains(want, n) {
				t.Errorf("%s offers --%s, which it does not read", name, n)
			}
		}
		for _, n := range want {
			if !slices.Contains(got, n) {
				t.Errorf("%s lacks --%s", name, n)
			}
		}
	}
	// segOnlyFlags is segFlags without --config.
	fs := flag.NewFlagSet("x", flag.ContinueOnError)
	var sf segFlags
	sf.register(fs)
	var all []string
	fs.VisitAll(func(f *flag.Flag) { all = append(all, f.Name) })
	want := slices.Clone(segGroup)
	sort.Strings(want)
	if !slices.Equal(all, want) {
		t.Errorf("segFlags register %v; segOnlyFlags + config is %v", all, want)
	}
}

// TestRemovedFlagsRefused: flags a command used to offer without reading
// them are now refused with the one-line unknown-flag message, exit 2.
func TestRemovedFlagsRefused(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"status", "--ack-wait", "10s", "c1"}, "sluice status: unknown flag --ack-wait (sluice help status lists the flags)"},
		{[]string{"status", "--http", "127.0.0.1:0", "c1"}, "sluice status: unknown flag --http (sluice help status lists the flags)"},
		{[]string{"status", "--max-deliver", "3", "c1"}, "sluice status: unknown flag --max-deliver (sluice help status lists the flags)"},
		{[]string{"queue-policy", "--store", "s", "--nats", "nats://127.0.0.1:1"}, "sluice queue-policy: unknown flag --store (sluice help queue-policy lists the flags)"},
		{[]string{"ingest", "--ack-wait", "4s", "--campaign", "c", "x.raw"}, "sluice ingest: unknown flag --ack-wait (sluice help ingest lists the flags)"},
	} {
		code, out, errs := runCLI(t, c.args...)
		if code != exitBadInput || strings.TrimRight(errs, "\n") != c.want || out != "" {
			t.Errorf("%v: exit %d, stdout %q, stderr %q; want exit 2 and %q", c.args, code, out, errs, c.want)
		}
	}
}

// TestMeasureLabelsRefusesSegmentFlags: with --labels FILE is not
// segmented, so a segmentation flag would be silently ignored: refused.
func TestMeasureLabelsRefusesSegmentFlags(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "lab.raw")
	if err := os.WriteFile(path, make([]byte, 8), 0o644); err != nil {
		t.Fatal(err)
	}
	code, _, errs := runCLI(t, "measure", "--labels", "--filter", "gaussian", "--shape", "2,2,2", "--dtype", "uint8", path)
	want := "sluice: measure: --filter segments grey input; with --labels " + path + " is already segmented (leave --filter out)"
	if code != exitBadInput || strings.TrimRight(errs, "\n") != want {
		t.Errorf("exit %d, stderr %q; want exit 2 and %q", code, errs, want)
	}
}

// TestIngestModeFlags: ingest's flags for one FILE (--step, --time,
// --batch) are refused with --watch, and those of --watch (--http with an
// address, --settle) with one FILE, instead of being ignored.
func TestIngestModeFlags(t *testing.T) {
	dir := t.TempDir()
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--watch", dir, "--time", "30"}, "sluice: ingest: --time dates one FILE; with --watch scans take their times from --times, their markers or headers"},
		{[]string{"--watch", dir, "--step", "s1"}, "sluice: ingest: --step names the step of one FILE; with --watch each scan's step comes from its file name"},
		{[]string{"--watch", dir, "--batch"}, "sluice: ingest: --batch queues one FILE as batch work; with --watch scans are queued live"},
		{[]string{"--http", "127.0.0.1:0", "x.raw"}, "sluice: ingest: --http serves metrics while watching (--watch); one FILE serves nothing (--http off is accepted)"},
		{[]string{"--settle", "30s", "x.raw"}, "sluice: ingest: --settle is for --watch (scans without a marker); one FILE is taken as it is"},
	} {
		code, _, errs := runCLI(t, append([]string{"ingest", "--campaign", "c", "--nats", "nats://127.0.0.1:1", "--store", dir}, c.args...)...)
		if code != exitBadInput || strings.TrimRight(errs, "\n") != c.want {
			t.Errorf("%v: exit %d, stderr %q; want exit 2 and %q", c.args, code, errs, c.want)
		}
	}
}

// TestRunWithoutWatchRefusesIngestFlags: `run` without --watch ingests
// nothing, so --campaign, --config, --times … would be ignored: refused.
func TestRunWithoutWatchRefusesIngestFlags(t *testing.T) {
	dir := t.TempDir()
	for _, name := range []string{"campaign", "config", "times", "voxel-size"} {
		code, _, errs := runCLI(t, "run", "--data", dir, "--http", "off", "--"+name, "x")
		want := "sluice: run: --" + name + " applies to the scans of --watch DIR, and none is given"
		if code != exitBadInput || strings.TrimRight(errs, "\n") != want {
			t.Errorf("run --%s without --watch: exit %d, stderr %q; want %q", name, code, errs, want)
		}
	}
}
