package integration

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"sluice/internal/testenv"
	"sluice/pkg/store"
)

// startOn starts a sluice process inside test host h (network namespace).
func startOn(t *testing.T, h *testenv.Host, name, bin string, env []string, args ...string) *proc {
	t.Helper()
	return start(t, name+"@"+h.Name, "ip", env, append([]string{"netns", "exec", h.NS, bin}, args...)...)
}

// alive reports whether p's process runs (not exited, not a zombie).
func alive(p *proc) bool {
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", p.cmd.Process.Pid))
	if err != nil {
		return false
	}
	_, rest, ok := strings.Cut(string(b), ") ")
	return ok && len(rest) > 0 && rest[0] != 'Z'
}

// TestNATSClusterFaults: sluice across hosts. Twelve network namespaces on
// a bridge (testenv.Net): a three-node NATS JetStream cluster (streams and
// KV bucket with 3 replicas, chosen by sluice itself on a cluster), a
// four-node erasure-coded MinIO, two aggregator hosts, three workers; a 28-step campaign queued by reprocess from
// the test's own namespace in seven batches, six of them just before a fault:
//   - the JetStream meta leader is killed (SIGKILL) and restarted later;
//   - the task stream's leader is killed and restarted later;
//   - the aggregator is killed and started on another host;
//   - one of the four MinIO nodes is stopped for 30 s;
//   - two of the three NATS nodes are killed for 20 s: every process waits
//     and says so in its log, none exits, and the work resumes when they
//     are back;
//   - one worker host is cut off for 20 s mid-campaign, then restored.
//
// Every step completes once, and the series is byte for byte the
// all-in-one reprocess of the same scans. Recovery times are logged.
func TestNATSClusterFaults(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-host test")
	}
	const n = 28
	nw := testenv.NewNet(t)
	natsHosts := []*testenv.Host{nw.Host("nats-1"), nw.Host("nats-2"), nw.Host("nats-3")}
	storeHosts := []*testenv.Host{nw.Host("store-1"), nw.Host("store-2"), nw.Host("store-3"), nw.Host("store-4")}
	aggA, aggB := nw.Host("agg-a"), nw.Host("agg-b")
	workHosts := []*testenv.Host{nw.Host("work-1"), nw.Host("work-2"), nw.Host("work-3")}

	bin := buildSluice(t)
	dir := t.TempDir()
	scanDir := filepath.Join(dir, "scans")
	os.MkdirAll(scanDir, 0o755)
	_, cfg := renderScans(t, scanDir, 96, 32, n)
	cfgPath := filepath.Join(dir, "campaign.json")
	b, _ := json.Marshal(cfg)
	os.WriteFile(cfgPath, b, 0o644)
	ref := filepath.Join(dir, "ref")
	sluiceRun(t, bin, nil, "reprocess", "cl", "--from", scanDir, "--config", cfgPath, "--data", ref, "--workers", "2")
	refStore, err := store.Open(context.Background(), filepath.Join(ref, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	wantJSON, wantCSV := runSeries(t, refStore, "cl", cfg.Hash())

	cluster := testenv.StartNATSCluster(t, natsHosts...)
	minio := testenv.StartMinIOCluster(t, storeHosts...)
	creds := []string{"SLUICE_S3_ACCESS_KEY=" + minio.AccessKey, "SLUICE_S3_SECRET_KEY=" + minio.SecretKey}
	loc := minio.URL("sluice-cl")
	common := []string{"--nats", cluster.URLs(), "--store", loc}
	// A short ack wait: tiles held by the worker that is cut off come back
	// after 6 s.
	sluiceRun(t, bin, nil, "queue-policy", "--nats", cluster.URLs(), "--ack-wait", "6s", "--max-deliver", "20")
	agg := startOn(t, aggA, "aggregate", bin, creds, append([]string{"aggregate", "--http", "off"}, common...)...)
	var workers []*proc
	for i, h := range workHosts {
		workers = append(workers, startOn(t, h, "worker", bin, creds, append([]string{"worker", "--http", "off", "--concurrency", "1", "--id", "w" + string(rune('1'+i))}, common...)...))
	}
	// The steps are queued in seven batches of four: the first to start
	// the campaign, each of the others just before its fault, so every fault
	// meets work in flight however fast the workers are (with all steps
	// queued at once they finished during the MinIO stop; with the first
	// fault waiting on the first batch, that batch was done before it).
	const batch = n / 7
	queued := 0
	queue := func() {
		t.Helper()
		args := []string{"reprocess", "cl", "--config", cfgPath, "--no-wait", "--steps", fmt.Sprintf("%d-%d", queued, queued+batch-1)}
		if queued == 0 {
			args = append(args, "--from", scanDir)
		}
		out := sluiceRun(t, bin, creds, append(args, common...)...)
		queued += batch
		t.Logf("queued: %s", strings.TrimSpace(out))
	}
	queue()
	if l := cluster.StreamLeader("SLUICE_TASKS"); l == nil {
		t.Fatal("no leader known for stream SLUICE_TASKS")
	}
	// sluice picks 3 replicas on a cluster by itself (queue.Config.Replicas
	// auto); with 1 the loss of the stream's node would stop the campaign.
	for _, s := range []string{"SLUICE_TASKS", "SLUICE_RESULTS", "SLUICE_STEPS", "SLUICE_EVENTS", "SLUICE_DEAD", "KV_sluice_progress"} {
		if r := cluster.StreamReplicas(s); r != 3 {
			t.Errorf("stream %s has %d replicas, want 3", s, r)
		}
	}

	s3, err := store.Open(context.Background(), loc, store.Credentials{AccessKey: store.Secret(minio.AccessKey), SecretKey: store.Secret(minio.SecretKey)})
	if err != nil {
		t.Fatal(err)
	}
	done := func() int { return doneSteps(s3, "cl", cfg.Hash()) }
	// next queues the next batch; the fault that follows meets its tiles.
	next := func(what string) {
		t.Helper()
		queue()
		if d := done(); d >= queued {
			t.Fatalf("the steps queued for %s were done before it could be tested (%d steps done)", what, d)
		}
	}
	// progressAfter returns how long after t0 the next step completed.
	progressAfter := func(t0 time.Time, what string) time.Duration {
		t.Helper()
		from := done()
		waitFor(t, 4*time.Minute, "a step completed after "+what, func() bool { return done() > from || done() >= n })
		return time.Since(t0)
	}

	// 1. The JetStream meta leader dies; it comes back 10 s later.
	waitFor(t, 4*time.Minute, "the first step", func() bool { return done() >= 1 })
	next("the meta leader's death")
	meta := cluster.MetaLeader()
	if meta == nil {
		t.Fatal("no meta leader")
	}
	t0 := time.Now()
	meta.Kill()
	elect := cluster.WaitLeader(time.Minute)
	prog := progressAfter(t0, "the meta leader died")
	t.Logf("meta leader %s killed at %d steps done: new leader %s after %.1f s, next step done after %.1f s",
		meta.Name, done(), cluster.MetaLeader().Name, elect.Seconds(), prog.Seconds())
	time.Sleep(max(0, 10*time.Second-time.Since(t0)))
	meta.Start()

	// 2. The leader of the task stream dies; it comes back 10 s later.
	next("the task stream leader's death")
	sl := cluster.StreamLeader("SLUICE_TASKS")
	if sl == nil {
		t.Fatal("no task stream leader")
	}
	t0 = time.Now()
	sl.Kill()
	prog = progressAfter(t0, "the task stream leader died")
	t.Logf("task stream leader %s killed: next step done after %.1f s", sl.Name, prog.Seconds())
	time.Sleep(max(0, 10*time.Second-time.Since(t0)))
	sl.Start()

	// 3. The aggregator dies and is started on another host.
	next("the aggregator's move")
	kill(agg)
	t0 = time.Now()
	agg2 := startOn(t, aggB, "aggregate", bin, creds, append([]string{"aggregate", "--http", "off"}, common...)...)
	prog = progressAfter(t0, "the aggregator moved")
	t.Logf("aggregator killed on %s, started on %s: next step done after %.1f s", aggA.Name, aggB.Name, prog.Seconds())

	// 4. One MinIO node of four is stopped for 30 s (erasure coding: 3
	// drives keep reads and writes going).
	next("the MinIO node's stop")
	t0 = time.Now()
	minio.Stop(3)
	prog = progressAfter(t0, "a MinIO node stopped")
	t.Logf("MinIO node 4 stopped at %d steps done: next step done after %.1f s", done(), prog.Seconds())
	time.Sleep(max(0, 30*time.Second-time.Since(t0)))
	minio.Start(3)

	// 5. A majority of NATS is gone for 20 s: JetStream has no quorum.
	next("the loss of the NATS majority")
	var others []*testenv.NATSNode
	for _, nd := range cluster.Nodes {
		if nd != cluster.MetaLeader() && len(others) < 1 {
			others = append(others, nd)
		}
	}
	others = append(others, cluster.MetaLeader())
	before := done()
	for _, nd := range others {
		nd.Kill()
	}
	time.Sleep(20 * time.Second)
	during := done()
	var exited []string
	for _, p := range append([]*proc{agg2}, workers...) {
		if !alive(p) {
			exited = append(exited, p.name)
		}
	}
	if len(exited) > 0 {
		t.Errorf("with 2 of 3 NATS nodes gone, %v exited; they must wait", exited)
	}
	for _, nd := range others {
		nd.Start()
	}
	t0 = time.Now()
	prog = progressAfter(t0, "the NATS majority came back")
	t.Logf("NATS nodes %s and %s killed for 20 s at %d steps done (%d done at the end of the outage); next step done %.1f s after their restart",
		others[0].Name, others[1].Name, before, during, prog.Seconds())
	for _, p := range append([]*proc{agg2}, workers...) {
		if l := p.String(); !strings.Contains(l, "retrying") && !strings.Contains(l, "waiting") {
			t.Errorf("%s logged nothing about waiting for NATS during the outage:\n%s", p.name, tail(l, 10))
		}
	}

	// 6. A worker host is cut off for 20 s.
	next("the worker host cut")
	t0 = time.Now()
	workHosts[0].Cut()
	prog = progressAfter(t0, "a worker host was cut off")
	t.Logf("host %s cut off at %d steps done: next step done after %.1f s", workHosts[0].Name, done(), prog.Seconds())
	time.Sleep(max(0, 20*time.Second-time.Since(t0)))
	workHosts[0].Restore()
	if queued != n {
		t.Fatalf("queued %d of %d steps", queued, n)
	}

	waitFor(t, 5*time.Minute, "every step", func() bool { return done() >= n })
	waitRows(t, s3, "cl", n, time.Minute)
	waitFor(t, time.Minute, "the run's series", func() bool {
		_, err := s3.Get(context.Background(), "campaigns/cl/runs/"+cfg.Hash()+"/series.json")
		return err == nil
	})
	gotJSON, gotCSV := runSeries(t, s3, "cl", cfg.Hash())
	checkRows(t, "cluster", gotJSON, n)
	if !bytes.Equal(gotJSON, wantJSON) || !bytes.Equal(gotCSV, wantCSV) {
		t.Errorf("series after the faults differ from the all-in-one reprocess (json equal %v, csv equal %v)",
			bytes.Equal(gotJSON, wantJSON), bytes.Equal(gotCSV, wantCSV))
	}
}
