package integration

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"sluice/internal/testenv"
	"sluice/pkg/campaign"
	"sluice/pkg/series"
	"sluice/pkg/store"
)

// runSeries returns the bytes of a run's series.json and series.csv.
func runSeries(t *testing.T, st store.Store, c, hash string) ([]byte, []byte) {
	t.Helper()
	ctx := context.Background()
	dir := "campaigns/" + c + "/runs/" + hash + "/"
	j, err := st.Get(ctx, dir+"series.json")
	if err != nil {
		t.Fatal(err)
	}
	cs, err := st.Get(ctx, dir+"series.csv")
	if err != nil {
		t.Fatal(err)
	}
	return j, cs
}

// doneSteps counts the steps with a run result under hash.
func doneSteps(st store.Store, c, hash string) int {
	keys, err := st.List(context.Background(), "campaigns/"+c+"/steps/")
	if err != nil {
		return 0
	}
	n := 0
	for _, k := range keys {
		if strings.HasSuffix(k, "/runs/"+hash+"/result.json") {
			n++
		}
	}
	return n
}

func sluiceRun(t *testing.T, bin string, env []string, args ...string) string {
	t.Helper()
	cmd := exec.Command(bin, args...)
	cmd.Env = append(os.Environ(), env...)
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("sluice %s: %v\n%s", strings.Join(args, " "), err, tail(string(out), 30))
	}
	return string(out)
}

func copyTree(t *testing.T, src, dst string) {
	t.Helper()
	err := filepath.WalkDir(src, func(p string, d os.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(src, p)
		to := filepath.Join(dst, rel)
		if d.IsDir() {
			return os.MkdirAll(to, 0o755)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		return os.WriteFile(to, b, 0o644)
	})
	if err != nil {
		t.Fatal(err)
	}
}

// checkRows: one row per step, every step present.
func checkRows(t *testing.T, label string, b []byte, steps int) {
	t.Helper()
	rows, err := series.Decode(b)
	if err != nil {
		t.Fatalf("%s: %v", label, err)
	}
	seen := map[string]bool{}
	for _, r := range rows {
		if seen[r.Step] {
			t.Errorf("%s: step %s has two rows", label, r.Step)
		}
		seen[r.Step] = true
	}
	if len(seen) != steps {
		t.Errorf("%s: %d steps in the series, want %d", label, len(seen), steps)
	}
}

// TestReprocessCrashResume: a 10-step campaign is processed, then
// reprocessed with another threshold; the all-in-one reprocess process is
// killed with SIGKILL in the middle and the same command run again. The
// run completes with one row per step and its series.json and series.csv
// are byte for byte those of an uninterrupted reprocess. The same is done
// in the multi-process form (MinIO, a separate nats-server, worker and
// aggregator processes), killing the reprocess process while it queues,
// and its series must again be the same bytes.
func TestReprocessCrashResume(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	bin := buildSluice(t)
	dir := t.TempDir()
	scanDir := filepath.Join(dir, "scans")
	os.MkdirAll(scanDir, 0o755)
	_, cfg := scans(t, scanDir)
	cfgPath := filepath.Join(dir, "campaign.json")
	b, _ := json.Marshal(cfg)
	os.WriteFile(cfgPath, b, 0o644)
	set := fmt.Sprintf("segment.fixed=[%g, %g]", cfg.Segment.Fixed[0]+1500, cfg.Segment.Fixed[1])
	cfg2, err := cfg.Set([]string{set})
	if err != nil {
		t.Fatal(err)
	}
	hash := cfg2.Hash()

	// Reference: the campaign, then an uninterrupted reprocess.
	ref := filepath.Join(dir, "ref")
	sluiceRun(t, bin, nil, "reprocess", "rc", "--from", scanDir, "--config", cfgPath, "--data", ref, "--workers", "2")
	crash := filepath.Join(dir, "crash")
	copyTree(t, filepath.Join(ref, "store"), filepath.Join(crash, "store"))
	t0 := time.Now()
	out := sluiceRun(t, bin, nil, "reprocess", "rc", "--set", set, "--data", ref, "--workers", "2")
	t.Logf("uninterrupted reprocess (%.1f s): %s", time.Since(t0).Seconds(), strings.TrimSpace(out))
	refStore, err := store.Open(context.Background(), filepath.Join(ref, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	wantJSON, wantCSV := runSeries(t, refStore, "rc", hash)
	checkRows(t, "uninterrupted", wantJSON, steps)

	// All-in-one, killed in the middle.
	crashStore, err := store.Open(context.Background(), filepath.Join(crash, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	// --ack-wait 4s: the tiles in flight when the process died come back
	// after 4 s instead of the default 30 s.
	p := start(t, "reprocess-killed", bin, nil, "reprocess", "rc", "--set", set, "--data", crash, "--workers", "2", "--ack-wait", "4s")
	deadline := time.Now().Add(3 * time.Minute)
	killedAt := -1
	for time.Now().Before(deadline) {
		if n := doneSteps(crashStore, "rc", hash); n >= 2 {
			p.cmd.Process.Kill()
			p.cmd.Wait()
			killedAt = n
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	if killedAt < 0 || killedAt >= steps {
		t.Fatalf("reprocess not killed in the middle (steps done when killed: %d of %d)\n%s", killedAt, steps, tail(p.String(), 20))
	}
	after := doneSteps(crashStore, "rc", hash)
	out = sluiceRun(t, bin, nil, "reprocess", "rc", "--set", set, "--data", crash, "--workers", "2", "--ack-wait", "4s")
	t.Logf("killed with %d of %d steps done (%d on disk after the kill); rerun: %s", killedAt, steps, after, strings.TrimSpace(out))
	if !strings.Contains(out, fmt.Sprintf("%d of %d steps done, 0 failed", steps, steps)) {
		t.Errorf("rerun did not finish every step: %s", out)
	}
	gotJSON, gotCSV := runSeries(t, crashStore, "rc", hash)
	checkRows(t, "after the crash", gotJSON, steps)
	if !bytes.Equal(gotJSON, wantJSON) || !bytes.Equal(gotCSV, wantCSV) {
		t.Errorf("series after crash and rerun differ from the uninterrupted run (json equal %v, csv equal %v)",
			bytes.Equal(gotJSON, wantJSON), bytes.Equal(gotCSV, wantCSV))
	}

	// Multi-process: MinIO, nats-server, one worker, one aggregator.
	minio := testenv.StartMinIO(t)
	nats := testenv.StartNATS(t)
	env := []string{"SLUICE_S3_ACCESS_KEY=" + minio.AccessKey, "SLUICE_S3_SECRET_KEY=" + minio.SecretKey}
	loc := minio.URL("sluice-rp")
	common := []string{"--nats", nats.URL, "--store", loc, "--ack-wait", "4s", "--max-deliver", "5"}
	start(t, "aggregate", bin, env, append([]string{"aggregate", "--http", "off"}, common...)...)
	start(t, "worker", bin, env, append([]string{"worker", "--http", "off", "--concurrency", "2", "--id", "w1"}, common...)...)
	sluiceRun(t, bin, env, append([]string{"reprocess", "rc", "--from", scanDir, "--config", cfgPath}, common...)...)
	s3, err := store.Open(context.Background(), loc, store.Credentials{AccessKey: store.Secret(minio.AccessKey), SecretKey: store.Secret(minio.SecretKey)})
	if err != nil {
		t.Fatal(err)
	}
	firstJSON, _ := runSeries(t, s3, "rc", cfg.Hash())
	refFirst, _ := runSeries(t, refStore, "rc", cfg.Hash())
	if !bytes.Equal(firstJSON, refFirst) {
		t.Error("first run: multi-process series differs from the all-in-one series")
	}
	mp := start(t, "reprocess-mp-killed", bin, env, append([]string{"reprocess", "rc", "--set", set}, common...)...)
	phase := "never"
	for deadline := time.Now().Add(time.Minute); time.Now().Before(deadline); time.Sleep(5 * time.Millisecond) {
		var rec campaign.Record
		if b, err := s3.Get(context.Background(), "campaigns/rc/campaign.json"); err == nil && json.Unmarshal(b, &rec) == nil && len(rec.Runs) == 2 {
			mp.cmd.Process.Kill()
			mp.cmd.Wait()
			phase = fmt.Sprintf("after the run was recorded, %d steps done", doneSteps(s3, "rc", hash))
			break
		}
	}
	out = sluiceRun(t, bin, env, append([]string{"reprocess", "rc", "--set", set}, common...)...)
	t.Logf("multi-process: reprocess killed %s; rerun: %s", phase, strings.TrimSpace(out))
	gotJSON, gotCSV = runSeries(t, s3, "rc", hash)
	checkRows(t, "multi-process", gotJSON, steps)
	if !bytes.Equal(gotJSON, wantJSON) || !bytes.Equal(gotCSV, wantCSV) {
		t.Errorf("multi-process series after the crash differs from the all-in-one uninterrupted run")
	}
}
