package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"image/png"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/scenario"
	"sluice/pkg/series"
	"sluice/pkg/store"
)

// archive renders a small drainage campaign (64³ scans, tile 32: 8 tiles a
// step) into dir as raw files with markers, and writes its config.
func archive(t *testing.T, dir string, steps int) (string, campaign.Config) {
	t.Helper()
	sc := &scenario.Campaign{Shape: [3]int{64, 64, 64}, Steps: steps, Seed: 3, SteadySteps: min(5, steps/2)}
	if err := sc.Prepare(); err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	cyl := demoCylinder(sc)
	for i := 0; i < steps; i++ {
		if err := writeScan(dir, sc, i, cyl); err != nil {
			t.Fatal(err)
		}
	}
	cfg := singleScanConfig(sc, 32)
	path := filepath.Join(t.TempDir(), "campaign.json")
	if err := writeDemoConfig(path, cfg); err != nil {
		t.Fatal(err)
	}
	return path, cfg
}

// sluiceCLI runs a sluice command in-process and returns its exit code and
// standard output (standard error, with the node's log, is left alone).
func sluiceCLI(t *testing.T, args ...string) (int, string) {
	t.Helper()
	var buf bytes.Buffer
	old := stdout
	stdout = &buf
	defer func() { stdout = old }()
	code := run(args)
	return code, buf.String()
}

// snapshot hashes every file of a store directory.
func snapshot(t *testing.T, root string) map[string][32]byte {
	t.Helper()
	out := map[string][32]byte{}
	err := filepath.WalkDir(root, func(p string, d os.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(root, p)
		out[filepath.ToSlash(rel)] = sha256.Sum256(b)
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

func record(t *testing.T, st store.Store, name string) campaign.Record {
	t.Helper()
	c, _ := layout.NewCampaign(name)
	var r campaign.Record
	if err := campaign.GetJSON(context.Background(), st, c.Config(), &r); err != nil {
		t.Fatal(err)
	}
	return r
}

func runRows(t *testing.T, st store.Store, name, hash string) ([]series.Row, []byte) {
	t.Helper()
	c, _ := layout.NewCampaign(name)
	jk, _ := campaign.RunSeriesKeys(c, hash)
	b, err := st.Get(context.Background(), jk)
	if err != nil {
		t.Fatal(err)
	}
	rows, err := series.Decode(b)
	if err != nil {
		t.Fatal(err)
	}
	return rows, b
}

// TestReprocessTwoRuns: a campaign processed (ingested from a directory,
// all-in-one), then reprocessed with a different threshold: two runs are
// stored, every file of the first run is byte for byte as before, a second
// identical reprocess does nothing, compare reports B − A as found in the
// two series, status counts the runs' steps, and switching to the new run
// and back restores the campaign's series byte for byte.
func TestReprocessTwoRuns(t *testing.T) {
	if testing.Short() {
		t.Skip("pipeline test")
	}
	const steps = 3
	dir := t.TempDir()
	scans := filepath.Join(dir, "scans")
	cfgPath, cfg := archive(t, scans, steps)
	data := filepath.Join(dir, "data")
	code, out := sluiceCLI(t, "reprocess", "rp", "--from", scans, "--config", cfgPath, "--data", data, "--workers", "2")
	if code != 0 {
		t.Fatalf("first run: exit %d\n%s", code, out)
	}
	st, err := storeAt(filepath.Join(data, "store"))
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	first := record(t, st, "rp")
	if first.Current != cfg.Hash() || len(first.Runs) != 1 {
		t.Fatalf("campaign.json after the first run: current %s runs %v (want %s)", first.Current, first.Runs, cfg.Hash())
	}
	seriesBefore, err := st.Get(ctx, "campaigns/rp/series.json")
	if err != nil {
		t.Fatal(err)
	}
	before := snapshot(t, filepath.Join(data, "store"))

	// Raise the wetting/nonwetting threshold by 1500 grey values: more
	// voxels become nonwetting, S_w falls.
	thr := fmt.Sprintf("segment.fixed=[%g, %g]", cfg.Segment.Fixed[0]+1500, cfg.Segment.Fixed[1])
	code, out = sluiceCLI(t, "reprocess", "rp", "--set", thr, "--data", data, "--workers", "2")
	if code != 0 {
		t.Fatalf("reprocess: exit %d\n%s", code, out)
	}
	t.Logf("reprocess output:\n%s", out)
	rec := record(t, st, "rp")
	if rec.Current != first.Current || len(rec.Runs) != 2 {
		t.Fatalf("after reprocess: current %s runs %v", rec.Current, rec.Runs)
	}
	hashA, hashB := rec.Runs[0], rec.Runs[1]
	after := snapshot(t, filepath.Join(data, "store"))
	for k, h := range before {
		if k == "campaigns/rp/campaign.json" {
			continue
		}
		if after[k] != h {
			t.Errorf("first run's file %s changed or vanished", k)
		}
	}
	rowsA, _ := runRows(t, st, "rp", hashA)
	rowsB, bytesB := runRows(t, st, "rp", hashB)
	if len(rowsA) != steps || len(rowsB) != steps {
		t.Fatalf("run series: %d and %d rows, want %d", len(rowsA), len(rowsB), steps)
	}
	for i := range rowsA {
		if !(series.F(rowsB[i].SatWetting) < series.F(rowsA[i].SatWetting)) {
			t.Errorf("step %s: S_w %g with the higher threshold, %g before: want lower", rowsA[i].Step, series.F(rowsB[i].SatWetting), series.F(rowsA[i].SatWetting))
		}
	}

	// The same command again: nothing left to do, nothing changes.
	code, out = sluiceCLI(t, "reprocess", "rp", "--set", thr, "--data", data)
	if code != 0 || !strings.Contains(out, fmt.Sprintf("%d already done, 0 tiles queued", steps)) {
		t.Errorf("repeated reprocess: exit %d, output %q", code, out)
	}
	if _, again := runRows(t, st, "rp", hashB); !bytes.Equal(again, bytesB) {
		t.Error("repeated reprocess changed the run's series")
	}

	// compare reports, for each step, B − A as the two series say.
	plotsDir := filepath.Join(dir, "cmp")
	code, out = sluiceCLI(t, "compare", "rp", "--runs", hashA[:6]+","+hashB, "--data", data, "--out", plotsDir)
	if code != 0 {
		t.Fatalf("compare: exit %d\n%s", code, out)
	}
	t.Logf("compare output:\n%s", out)
	for _, r := range rowsA {
		var rb series.Row
		for _, x := range rowsB {
			if x.Step == r.Step {
				rb = x
			}
		}
		re := regexp.MustCompile(`(?m)^\s*` + regexp.QuoteMeta(r.Step) + `\s+\S+\s+(\S+)`)
		m := re.FindStringSubmatch(out)
		if m == nil {
			t.Errorf("compare: no row for step %s", r.Step)
			continue
		}
		got, err := strconv.ParseFloat(m[1], 64)
		want := series.F(rb.SatWetting) - series.F(r.SatWetting)
		// The table prints 4 significant digits.
		if err != nil || math.Abs(got-want) > 5e-4*math.Abs(want) {
			t.Errorf("compare: step %s ΔS_w printed %q, series give %.6g", r.Step, m[1], want)
		}
	}
	for _, q := range compared {
		b, err := os.ReadFile(filepath.Join(plotsDir, q.name+".png"))
		if err != nil {
			t.Fatal(err)
		}
		if img, err := png.Decode(bytes.NewReader(b)); err != nil || img.Bounds().Dx() < 100 {
			t.Errorf("%s.png: %v", q.name, err)
		}
		svg, err := os.ReadFile(filepath.Join(plotsDir, q.name+".svg"))
		if err != nil || !bytes.Contains(svg, []byte("<svg")) || !bytes.Contains(svg, []byte(hashB)) {
			t.Errorf("%s.svg: not an SVG naming run B (%v)", q.name, err)
		}
	}

	// status: both runs, all steps done.
	code, out = sluiceCLI(t, "status", "rp", "--data", data)
	if code != 0 || strings.Count(out, fmt.Sprintf("done %d  pending 0  failed 0", steps)) != 2 || !strings.Contains(out, "segment.fixed") {
		t.Errorf("status: exit %d\n%s", code, out)
	}

	// switch to B and back to A.
	if code, out = sluiceCLI(t, "switch", "rp", "--run", hashB, "--data", data); code != 0 {
		t.Fatalf("switch: exit %d\n%s", code, out)
	}
	if b, _ := st.Get(ctx, "campaigns/rp/series.json"); !bytes.Equal(b, bytesB) {
		t.Error("after switch the campaign series is not run B's series")
	}
	step0, _ := layout.NewStep("rp", rowsB[0].Step)
	rb, _ := st.Get(ctx, campaign.RunResultKey(step0, hashB))
	if b, _ := st.Get(ctx, step0.Result()); !bytes.Equal(b, rb) {
		t.Error("after switch result.json is not run B's result")
	}
	if r := record(t, st, "rp"); r.Current != hashB || r.Config.Hash() != hashB {
		t.Errorf("after switch campaign.json current %s config hash %s, want %s", r.Current, r.Config.Hash(), hashB)
	}
	if code, out = sluiceCLI(t, "switch", "rp", "--run", "current", "--data", data); code != 0 {
		t.Errorf("switch to the current run: exit %d\n%s", code, out)
	}
	if code, out = sluiceCLI(t, "switch", "rp", "--run", hashA, "--data", data); code != 0 {
		t.Fatalf("switch back: exit %d\n%s", code, out)
	}
	if b, _ := st.Get(ctx, "campaigns/rp/series.json"); !bytes.Equal(b, seriesBefore) {
		t.Error("switching back did not restore the campaign series byte for byte")
	}
	var r campaign.Record
	b, _ := st.Get(ctx, "campaigns/rp/campaign.json")
	json.Unmarshal(b, &r)
	if r.Current != hashA {
		t.Errorf("current %s after switching back", r.Current)
	}
}

func TestReprocessErrorsAreOneLine(t *testing.T) {
	data := t.TempDir()
	for _, args := range [][]string{
		{"reprocess", "nosuch", "--data", data},
		{"reprocess", "Bad/Name", "--data", data},
		{"switch", "nosuch", "--run", "abc", "--data", data},
		{"compare", "nosuch", "--runs", "a,b", "--data", data},
		{"status", "nosuch", "--data", data},
	} {
		code, _, errOut := runCLI(t, args...)
		msg := strings.TrimSpace(errOut)
		lines := strings.Split(msg, "\n")
		last := lines[len(lines)-1]
		if code == 0 || !strings.HasPrefix(last, "sluice: ") || !(strings.Contains(last, "nosuch") || strings.Contains(last, "Bad/Name")) {
			t.Errorf("%v: exit %d, last line %q", args, code, last)
		}
	}
}

func TestStepSelection(t *testing.T) {
	sel, err := parseSteps("10-12, 20,30-")
	if err != nil {
		t.Fatal(err)
	}
	for name, want := range map[string]bool{"scan-0010": true, "scan-0012": true, "scan-0013": false, "s20": true, "s19": false,
		"x-9999": true, "noumber": false, "scan-0009": false} {
		if sel.has(name) != want {
			t.Errorf("%s selected %v", name, !want)
		}
	}
	for _, bad := range []string{"a", "3-1", "-4", "1,,2"} {
		if _, err := parseSteps(bad); err == nil {
			t.Errorf("--steps %q accepted", bad)
		}
	}
	var all stepSelection
	if !all.has("anything") {
		t.Error("no --steps must select every step")
	}
}
