package integration

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"sluice/internal/testenv"
	"sluice/pkg/store"
)

// TestSlurmWorkers: an archived campaign is reprocessed by workers that a
// batch scheduler runs. A private one-node Slurm cluster (Debian's
// slurm-wlm and munge; testenv.StartSlurm) gets deploy/slurm's job script
// as a job array of three workers after `sluice reprocess --no-wait` has
// queued the batch on a separate nats-server with MinIO as the store. The
// workers drain the queue, leave on their own once it has stayed empty
// (--exit-when-idle), every array task ends COMPLETED with exit 0, and the
// series is byte for byte the all-in-one reprocess of the same scans.
func TestSlurmWorkers(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	slurm := testenv.StartSlurm(t)
	bin := buildSluice(t)
	dir := t.TempDir()
	scanDir := filepath.Join(dir, "scans")
	os.MkdirAll(scanDir, 0o755)
	_, cfg := scans(t, scanDir)
	cfgPath := filepath.Join(dir, "campaign.json")
	b, _ := json.Marshal(cfg)
	os.WriteFile(cfgPath, b, 0o644)

	// Reference: the all-in-one reprocess of the same scans.
	ref := filepath.Join(dir, "ref")
	sluiceRun(t, bin, nil, "reprocess", "sl", "--from", scanDir, "--config", cfgPath, "--data", ref, "--workers", "2")
	refStore, err := store.Open(context.Background(), filepath.Join(ref, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	wantJSON, wantCSV := runSeries(t, refStore, "sl", cfg.Hash())

	minio := testenv.StartMinIO(t)
	nats := testenv.StartNATS(t)
	creds := []string{"SLUICE_S3_ACCESS_KEY=" + minio.AccessKey, "SLUICE_S3_SECRET_KEY=" + minio.SecretKey}
	loc := minio.URL("sluice-slurm")
	common := []string{"--nats", nats.URL, "--store", loc}
	sluiceRun(t, bin, nil, "queue-policy", "--nats", nats.URL, "--ack-wait", "10s", "--max-deliver", "5")
	start(t, "aggregate", bin, creds, append([]string{"aggregate", "--http", "off"}, common...)...)
	out := sluiceRun(t, bin, creds, append([]string{"reprocess", "sl", "--from", scanDir, "--config", cfgPath, "--no-wait"}, common...)...)
	t.Logf("queued: %s", strings.TrimSpace(out))

	script, err := filepath.Abs("../../deploy/slurm/sluice-workers.sbatch")
	if err != nil {
		t.Fatal(err)
	}
	logs := filepath.Join(dir, "joblogs")
	os.MkdirAll(logs, 0o755)
	env := append([]string{"SLUICE_BIN=" + bin, "SLUICE_NATS=" + nats.URL, "SLUICE_STORE=" + loc, "SLUICE_IDLE=4s"}, creds...)
	// One CPU per task so that two run at once on a 2-core machine and the
	// third waits for a free CPU (its queue may be empty by then: it must
	// still leave on its own).
	sb := slurm.Command(env, "sbatch", "--parsable", "--array=0-2", "--cpus-per-task=1", "--mem-per-cpu=300M",
		"--output="+filepath.Join(logs, "w-%A_%a.log"), script)
	jb, err := sb.CombinedOutput()
	if err != nil {
		t.Fatalf("sbatch: %v: %s\nslurmctld.log:\n%s", err, jb, slurm.Log("slurmctld.log"))
	}
	job := strings.TrimSpace(string(jb))
	t.Logf("job array %s submitted", job)

	s3, err := store.Open(context.Background(), loc, store.Credentials{AccessKey: store.Secret(minio.AccessKey), SecretKey: store.Secret(minio.SecretKey)})
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, 5*time.Minute, "the job array to end", func() bool {
		out, err := slurm.Command(nil, "squeue", "-h", "-j", job, "-o", "%i").Output()
		return err == nil && strings.TrimSpace(string(out)) == ""
	})
	info, err := slurm.Command(nil, "scontrol", "show", "job", job).CombinedOutput()
	if err != nil {
		t.Fatalf("scontrol show job %s: %v: %s", job, err, info)
	}
	states := regexp.MustCompile(`JobState=(\S+)`).FindAllStringSubmatch(string(info), -1)
	codes := regexp.MustCompile(`\bExitCode=(\S+)`).FindAllStringSubmatch(string(info), -1)
	if len(states) != 3 || len(codes) != 3 {
		t.Fatalf("scontrol shows %d job states and %d exit codes for array %s, want 3:\n%s", len(states), len(codes), job, info)
	}
	for i := range states {
		if states[i][1] != "COMPLETED" || codes[i][1] != "0:0" {
			t.Errorf("array task %d: JobState=%s ExitCode=%s, want COMPLETED 0:0", i, states[i][1], codes[i][1])
		}
	}
	files, _ := filepath.Glob(filepath.Join(logs, "w-*.log"))
	if len(files) != 3 {
		t.Errorf("%d worker logs, want 3", len(files))
	}
	for _, f := range files {
		b, _ := os.ReadFile(f)
		if !strings.Contains(string(b), "the task queue stayed empty for 4s; leaving") {
			t.Errorf("%s does not say the worker left on an empty queue:\n%s", filepath.Base(f), tail(string(b), 15))
		}
	}
	// The aggregator completes the last step after the last tile.
	waitFor(t, 2*time.Minute, "every step in the run's series", func() bool {
		return doneSteps(s3, "sl", cfg.Hash()) == steps
	})
	waitRows(t, s3, "sl", steps, time.Minute)
	gotJSON, gotCSV := runSeries(t, s3, "sl", cfg.Hash())
	checkRows(t, "slurm workers", gotJSON, steps)
	if !bytes.Equal(gotJSON, wantJSON) || !bytes.Equal(gotCSV, wantCSV) {
		t.Errorf("series from the Slurm workers differ from the all-in-one reprocess (json equal %v, csv equal %v)",
			bytes.Equal(gotJSON, wantJSON), bytes.Equal(gotCSV, wantCSV))
	}
	t.Logf("3 array tasks COMPLETED 0:0; series equal to all-in-one (%d bytes)", len(gotJSON))
}
