package main

import (
	"context"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"sluice/pkg/campaign"
	"sluice/pkg/queue"
	"sluice/pkg/telemetry"
	"sluice/pkg/web"
)

// helperArgsEnv, when set, makes TestHelperSluiceProcess run sluice with
// the arguments it holds (separated by line breaks): the test binary
// doubles as a `sluice` process that a test can kill.
const helperArgsEnv = "SLUICE_TEST_HELPER_ARGS"

// helperBeatEnv sets the worker beat interval of such a process.
const helperBeatEnv = "SLUICE_TEST_HELPER_BEAT"

func TestHelperSluiceProcess(t *testing.T) {
	args := os.Getenv(helperArgsEnv)
	if args == "" {
		t.Skip("runs only as a helper process")
	}
	if d, err := time.ParseDuration(os.Getenv(helperBeatEnv)); err == nil {
		workerBeat = d
	}
	os.Exit(run(strings.Split(args, "\n")))
}

// TestHealthCountsWorkers: /api/health of an all-in-one node without
// workers of its own counts the worker processes that join it over NATS
// (one in this process, one a separate `sluice worker` process), lists each
// with its host and the tiles it did (they add up to the tiles of the step
// measured), and forgets a worker that stops: at once when it stops in
// order, and within three beat intervals when its process is killed
// (SIGKILL: no last word). The live page's health line and the
// sluice_workers metric say the same.
func TestHealthCountsWorkers(t *testing.T) {
	const beat = 200 * time.Millisecond
	workerBeat = beat
	defer func() { workerBeat = 0 }()
	data := t.TempDir()
	cfg := campaign.Default()
	cfg.DetectSample = false
	cfg.Tile = 20 // 40³ scan: 8 tiles
	cfg.Measure.SkipContact = true
	cfg.Measure.SkipCurvature = true // keeps the halo (curvature 14 + segmentation 6) within 20-voxel tiles
	cfgPath := filepath.Join(data, "c.json")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	nf := nodeFlags{data: data, http: "127.0.0.1:0", exposeNATS: "127.0.0.1:0", ackWait: 30 * time.Second, maxDeliver: 3}
	f := ingestFlags{campaign: "hc", config: cfgPath, watch: filepath.Join(data, "incoming"), createWatch: true}
	node, err := startAll(ctx, nf, inputFlags{}, f, 0, quietLog())
	if err != nil {
		cancel()
		t.Fatal(err)
	}
	defer func() { cancel(); node.wg.Wait() }()
	base := "http://" + node.url
	health := func() web.Health {
		t.Helper()
		var h web.Health
		if err := json.Unmarshal(httpGet(t, base+"/api/health"), &h); err != nil {
			t.Fatal(err)
		}
		return h
	}
	ids := func(h web.Health) []string {
		var out []string
		for _, w := range h.WorkerList {
			out = append(out, w.ID)
		}
		return out
	}
	// until polls /api/health with a generous deadline (no timing claim:
	// the expected drop-out is three beats, 0.6 s).
	until := func(what string, cond func(web.Health) bool) web.Health {
		t.Helper()
		deadline := time.Now().Add(time.Minute)
		for {
			h := health()
			if cond(h) {
				return h
			}
			if time.Now().After(deadline) {
				t.Fatalf("gave up waiting for %s; /api/health: %+v", what, h)
			}
			time.Sleep(50 * time.Millisecond)
		}
	}
	if h := health(); h.Workers != 0 || len(h.WorkerList) != 0 {
		t.Fatalf("node without workers: /api/health counts %d (%v)", h.Workers, ids(h))
	}

	// Worker A: this process, its own NATS connection, stopped in order.
	st, err := nf.openStore(ctx)
	if err != nil {
		t.Fatal(err)
	}
	qa, err := queue.Open(ctx, queue.Config{URL: node.nats, Logger: quietLog()})
	if err != nil {
		t.Fatal(err)
	}
	defer qa.Close()
	actx, stopA := context.WithCancel(ctx)
	aDone := make(chan error, 1)
	go func() {
		aDone <- runWorkers(actx, qa, st, telemetry.NewWorker(prometheus.NewRegistry()), "w-a", 1, quietLog())
	}()
	defer stopA()

	// Worker B: a separate `sluice worker` process.
	cmd := exec.Command(os.Args[0], "-test.run=^TestHelperSluiceProcess$")
	cmd.Env = append(os.Environ(), helperBeatEnv+"="+beat.String(), helperArgsEnv+"="+strings.Join([]string{
		"worker", "--nats", node.nats, "--store", filepath.Join(data, "store"), "--http", "off", "--id", "w-b", "--concurrency", "2"}, "\n"))
	var bLog syncBuffer
	cmd.Stderr = &bLog
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer func() { cmd.Process.Kill(); cmd.Wait() }()

	h := until("workers w-a and w-b", func(h web.Health) bool { return slices.Equal(ids(h), []string{"w-a", "w-b"}) })
	host, _ := os.Hostname()
	if h.Workers != 2 || h.WorkerSlots != 3 {
		t.Errorf("workers %d, slots %d; want 2 and 3 (concurrency 1 + 2)", h.Workers, h.WorkerSlots)
	}
	for _, w := range h.WorkerList {
		if w.Host != host || w.PID <= 0 || w.BeatS != beat.Seconds() || w.StartedAt == "" || w.LastSeen == "" {
			t.Errorf("worker %s: %+v", w.ID, w)
		}
	}
	if w := h.WorkerList[1]; w.PID != int64(cmd.Process.Pid) {
		t.Errorf("w-b has pid %d, its process %d", w.PID, cmd.Process.Pid)
	}

	// One step of 8 tiles: the workers' tiles_done add up to 8.
	writeScanFile(t, f.watch, "scan-0001", pipelineScene(t, [3]int{40, 40, 40}, 9), 0)
	waitRows(t, st, "hc", 1, 2*time.Minute)
	h = until("8 tiles done in the beats", func(h web.Health) bool {
		n := uint64(0)
		for _, w := range h.WorkerList {
			n += w.TilesDone
		}
		return n >= 8
	})
	n := uint64(0)
	for _, w := range h.WorkerList {
		n += w.TilesDone
		if len(w.Current) != 0 || w.TilesFailed != 0 {
			t.Errorf("worker %s after the step: in hand %v, %d failed", w.ID, w.Current, w.TilesFailed)
		}
	}
	if n != 8 || len(h.WorkerList) != 2 {
		t.Errorf("the beats count %d tiles done by %v; the step has 8", n, ids(h))
	}
	if !regexp.MustCompile(`(?m)^sluice_workers 2$`).MatchString(string(httpGet(t, base+"/metrics"))) {
		t.Error("/metrics lacks sluice_workers 2")
	}

	// A stops in order: its last beat takes it out of the count.
	stopA()
	if err := <-aDone; err != nil {
		t.Fatalf("worker w-a: %v", err)
	}
	until("w-b alone after w-a stopped", func(h web.Health) bool { return slices.Equal(ids(h), []string{"w-b"}) && h.Workers == 1 })

	// B is killed: no last beat; it drops out after three missed beats.
	if err := cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	cmd.Wait()
	until("no worker after w-b was killed", func(h web.Health) bool { return h.Workers == 0 && len(h.WorkerList) == 0 })
	if !regexp.MustCompile(`(?m)^sluice_workers 0$`).MatchString(string(httpGet(t, base+"/metrics"))) {
		t.Error("/metrics lacks sluice_workers 0")
	}
}
