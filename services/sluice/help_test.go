package main

import (
	"flag"
	"os"
	"path/filepath"
	"sluice/pkg/campaign"
	"strings"
	"testing"
)

// TestHelpOnStdout: `sluice CMD -h` and `sluice help CMD` print, on
// standard output with exit status 0, a synopsis line and one sentence
// before the flags; `sluice --version` prints the version.
func TestHelpOnStdout(t *testing.T) {
	for _, c := range commands() {
		if c.name == "version" {
			continue
		}
		for _, args := range [][]string{{c.name, "-h"}, {"help", c.name}} {
			code, out, errs := runCLI(t, args...)
			if code != exitOK {
				t.Errorf("%v: exit %d, want 0 (stderr %q)", args, code, errs)
				continue
			}
			lines := strings.Split(out, "\n")
			want := "usage: sluice " + c.name
			if len(lines) < 3 || !strings.HasPrefix(lines[0], want) {
				t.Errorf("%v: help starts %q, want a line starting %q", args, firstLine(out), want)
				continue
			}
			if s := lines[2]; !strings.HasSuffix(s, ".") || len(s) < 20 {
				t.Errorf("%v: third line %q is not a sentence saying what %s does", args, s, c.name)
			}
		}
	}
	for _, mode := range []string{"stages", "compare", "campaign"} {
		code, out, _ := runCLI(t, "help", "bench", mode)
		if code != exitOK || !strings.HasPrefix(out, "usage: sluice bench") {
			t.Errorf("help bench %s: exit %d, help %q", mode, code, firstLine(out))
		}
	}
	for _, args := range [][]string{{"--version"}, {"-version"}, {"version"}} {
		code, out, _ := runCLI(t, args...)
		if code != exitOK || strings.TrimSpace(out) != "sluice "+Version {
			t.Errorf("%v: exit %d, stdout %q, want %q", args, code, out, "sluice "+Version)
		}
	}
	if code, out, _ := runCLI(t, "help"); code != exitOK || !strings.Contains(out, "measure") {
		t.Errorf("sluice help: exit %d, stdout %q", code, firstLine(out))
	}
}

func firstLine(s string) string {
	l, _, _ := strings.Cut(s, "\n")
	return l
}

// TestMistypedFlag: a mistyped flag gets one line naming the closest flag
// and exit status 2, not the whole flag list.
func TestMistypedFlag(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"measure", "--voxelsize", "4um", "x.raw"}, "sluice measure: unknown flag --voxelsize; did you mean --voxel-size?"},
		{[]string{"measure", "--ifft", "0.035", "x.raw"}, "sluice measure: unknown flag --ifft; did you mean --ift?"},
		{[]string{"run", "--wacth", "scans"}, "sluice run: unknown flag --wacth; did you mean --watch?"},
		{[]string{"segment", "--no-such-thing", "a", "b"}, "sluice segment: unknown flag --no-such-thing (sluice help segment lists the flags)"},
		{[]string{"measure", "x.raw", "--voxel-size"}, "sluice measure: flag needs an argument: --voxel-size"},
		{[]string{"mesure", "x.raw"}, `sluice: unknown command "mesure"; did you mean measure?`},
	} {
		code, out, errs := runCLI(t, c.args...)
		if code != exitBadInput {
			t.Errorf("%v: exit %d, want 2", c.args, code)
		}
		if got := strings.TrimRight(errs, "\n"); got != c.want {
			t.Errorf("%v: stderr\n%q\nwant one line\n%q", c.args, got, c.want)
		}
		if out != "" {
			t.Errorf("%v: stdout %q, want nothing", c.args, out)
		}
	}
}

// TestNegativeIFTRefused: `--ift -0.035` is refused with exit 2 before any
// file is read, as the README promises.
func TestNegativeIFTRefused(t *testing.T) {
	code, _, errs := runCLI(t, "measure", "--ift", "-0.035", "--voxel-size", "4um", "no-such-file.raw")
	if code != exitBadInput || !strings.Contains(errs, "-0.035") || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
		t.Errorf("--ift -0.035: exit %d, stderr %q; want exit 2 and one line naming the value", code, errs)
	}
}

func TestEditDistance(t *testing.T) {
	// Source: Levenshtein distances worked by hand (kitten→sitting is the
	// textbook example, 3); "ab"→"ba" is 1 with transpositions (optimal
	// string alignment).
	for _, c := range []struct {
		a, b string
		d    int
	}{{"kitten", "sitting", 3}, {"", "abc", 3}, {"ab", "ba", 1}, {"voxelsize", "voxelsize", 0}, {"flaw", "lawn", 2}} {
		if got := campaign.EditDistance(c.a, c.b); got != c.d {
			t.Errorf("editDistance(%q, %q) = %d, want %d", c.a, c.b, got, c.d)
		}
	}
}

// TestConfigUnknownKeyOneLine: a misspelt key in --config reaches the user
// as one line in the config's own words, exit 2.
func TestConfigUnknownKeyOneLine(t *testing.T) {
	cfg := filepath.Join(t.TempDir(), "camp.yaml")
	if err := os.WriteFile(cfg, []byte("segment:\n  treshold: otsu\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	code, _, errs := runCLI(t, "measure", "--config", cfg, "--voxel-size", "4um", "no-such-file.raw")
	want := "sluice: measure: config: " + cfg + " line 2: unknown key segment.treshold (did you mean segment.threshold?)"
	if code != exitBadInput || strings.TrimRight(errs, "\n") != want {
		t.Errorf("exit %d, stderr %q; want exit 2 and %q", code, errs, want)
	}
}

// TestOffDefaultsSayWhatTheyMean: --min-island and --hysteresis-band show
// what leaving them out means, not the sentinel -1; a negative value is
// refused (it was silently taken as "not given"); 0 given on the command
// line turns the step off over a config that sets it.
func TestOffDefaultsSayWhatTheyMean(t *testing.T) {
	for _, cmd := range []string{"measure", "segment"} {
		_, out, _ := runCLI(t, cmd, "-h")
		if strings.Contains(out, "(default -1)") {
			t.Errorf("%s -h shows a sentinel default:\n%s", cmd, out)
		}
		for _, f := range []string{"min-island", "hysteresis-band"} {
			if !strings.Contains(out, "-"+f) {
				t.Errorf("%s -h lacks --%s", cmd, f)
			}
		}
	}
	if _, out, _ := runCLI(t, "ingest", "-h"); strings.Contains(out, "(default -1)") || !strings.Contains(out, "-time") {
		t.Errorf("ingest -h shows a sentinel default for --time or lacks it:\n%s", out)
	}
	code, _, errs := runCLI(t, "ingest", "--time", "-3", "--campaign", "c", "no-such-file.raw")
	if want := `sluice ingest: invalid value "-3" for flag --time: must be 0 or more`; code != exitBadInput || strings.TrimRight(errs, "\n") != want {
		t.Errorf("ingest --time -3: exit %d, stderr %q; want exit 2 and %q", code, errs, want)
	}
	code, _, errs = runCLI(t, "measure", "--min-island", "-5", "--voxel-size", "4um", "no-such-file.raw")
	if want := `sluice measure: invalid value "-5" for flag --min-island: must be 0 or more`; code != exitBadInput || strings.TrimRight(errs, "\n") != want {
		t.Errorf("--min-island -5: exit %d, stderr %q; want exit 2 and %q", code, errs, want)
	}
	cfg := filepath.Join(t.TempDir(), "camp.yaml")
	if err := os.WriteFile(cfg, []byte("segment:\n  min_island: 50\n  hysteresis:\n    band: 300\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	fs := flag.NewFlagSet("segment", flag.ContinueOnError)
	var sf segFlags
	sf.register(fs)
	if _, code, ok := parseOrUsage(fs, []string{"--config", cfg, "--min-island", "0", "--hysteresis-band", "0"}); !ok {
		t.Fatalf("parse: exit %d", code)
	}
	c, err := sf.campaignConfig()
	if err != nil {
		t.Fatal(err)
	}
	if c.Segment.MinIsland != 0 || c.Segment.Hysteresis.Band != 0 {
		t.Errorf("--min-island 0 --hysteresis-band 0 over a config of 50 and 300: got %d and %g, want 0 and 0", c.Segment.MinIsland, c.Segment.Hysteresis.Band)
	}
	fs = flag.NewFlagSet("segment", flag.ContinueOnError)
	sf = segFlags{}
	sf.register(fs)
	parseOrUsage(fs, []string{"--config", cfg})
	if c, err = sf.campaignConfig(); err != nil || c.Segment.MinIsland != 50 || c.Segment.Hysteresis.Band != 300 {
		t.Errorf("without the flags the config's 50 and 300 should hold: got %d, %g, %v", c.Segment.MinIsland, c.Segment.Hysteresis.Band, err)
	}
}
