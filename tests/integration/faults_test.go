package integration

// Fault tests on real components (issue 8, part A): a process killed with
// SIGKILL (aggregator mid-step, the all-in-one node mid-campaign), the NATS
// server restarted, the MinIO server stopped for ten seconds, a poison tile
// that crashes every worker that takes it, and a burst of 200 small steps.
// Each asserts the outcome — rows, identical series, dead letters, metric
// values, error text — never a speed.

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"

	"sluice/internal/testenv"
	"sluice/pkg/campaign"
	"sluice/pkg/queue"
	"sluice/pkg/series"
	"sluice/pkg/store"
	pb "sluice/proto/sluicepb"
)

// tmpRoot holds what the tests of this package share (binaries, rendered
// scans, undisturbed reference runs); TestMain removes it.
var tmpRoot string

func TestMain(m *testing.M) {
	var err error
	if tmpRoot, err = os.MkdirTemp("", "sluice-integration-"); err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	code := m.Run()
	os.RemoveAll(tmpRoot)
	os.Exit(code)
}

var (
	sharedMu sync.Mutex
	binaries = map[string]string{}
	fixtures = map[string]*fixture{}
)

// binary builds sluice once per set of build tags.
func binary(t *testing.T, tags string) string {
	t.Helper()
	sharedMu.Lock()
	defer sharedMu.Unlock()
	if b, ok := binaries[tags]; ok {
		return b
	}
	bin := filepath.Join(tmpRoot, "sluice"+strings.ReplaceAll(tags, ",", "-"))
	args := []string{"build", "-o", bin}
	if tags != "" {
		args = append(args, "-tags", tags)
	}
	cmd := exec.Command("go", append(args, "sluice/services/sluice")...)
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("go build %s: %v\n%s", tags, err, out)
	}
	binaries[tags] = bin
	return bin
}

// fixture is a rendered campaign and its undisturbed all-in-one run.
type fixture struct {
	name    string // campaign name
	dir     string // scans (raw + header)
	paths   []string
	cfgPath string
	cfg     campaign.Config
	// want is series.json of the undisturbed run: every fault test must
	// end with these bytes (minus the steps it kills on purpose).
	want []byte
	rows []series.Row
}

// prepare renders n scans of size³ (tile edge tile) and runs them once,
// undisturbed, through `sluice reprocess --from` (all-in-one, embedded NATS,
// local store).
func prepare(t *testing.T, name string, size, tile, n int) *fixture {
	t.Helper()
	key := fmt.Sprint(name, size, tile, n)
	sharedMu.Lock()
	f, ok := fixtures[key]
	sharedMu.Unlock()
	if ok {
		return f
	}
	bin := binary(t, "")
	f = &fixture{name: name, dir: filepath.Join(tmpRoot, key, "scans")}
	os.MkdirAll(f.dir, 0o755)
	f.paths, f.cfg = renderScans(t, f.dir, size, tile, n)
	f.cfgPath = filepath.Join(tmpRoot, key, "campaign.json")
	b, _ := json.Marshal(f.cfg)
	if err := os.WriteFile(f.cfgPath, b, 0o644); err != nil {
		t.Fatal(err)
	}
	ref := filepath.Join(tmpRoot, key, "ref")
	sluiceRun(t, bin, nil, "reprocess", name, "--from", f.dir, "--config", f.cfgPath, "--data", ref, "--workers", "2")
	st, err := store.Open(context.Background(), filepath.Join(ref, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	if f.want, err = seriesJSON(st, name); err != nil {
		t.Fatal(err)
	}
	if f.rows, err = series.Decode(f.want); err != nil || len(f.rows) != n {
		t.Fatalf("undisturbed run: %d rows for %d steps (%v)", len(f.rows), n, err)
	}
	sharedMu.Lock()
	fixtures[key] = f
	sharedMu.Unlock()
	return f
}

func seriesJSON(st store.Store, c string) ([]byte, error) {
	return st.Get(context.Background(), "campaigns/"+c+"/series.json")
}

// waitFor polls cond every 50 ms until it holds; after limit (a liveness
// guard, not a speed check) the test fails naming what.
func waitFor(t *testing.T, limit time.Duration, what string, cond func() bool) {
	t.Helper()
	for deadline := time.Now().Add(limit); !cond(); time.Sleep(50 * time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatalf("still waiting after %v for %s", limit, what)
		}
	}
}

// rowCount returns the number of rows in a campaign's series (0 when none).
func rowCount(st store.Store, c string) int {
	rows, err := series.Load(context.Background(), st, c)
	if err != nil {
		return 0
	}
	return len(rows)
}

// sameSeries checks that the series equals the undisturbed one byte for
// byte, and that it has one row per step.
func sameSeries(t *testing.T, st store.Store, f *fixture, label string) {
	t.Helper()
	got, err := seriesJSON(st, f.name)
	if err != nil {
		t.Fatalf("%s: %v", label, err)
	}
	checkRows(t, label, got, len(f.paths))
	if !bytes.Equal(got, f.want) {
		rows, _ := series.Decode(got)
		compareRows(t, rows, f.rows)
		t.Errorf("%s: series.json is not byte for byte the undisturbed run's (%d vs %d bytes)", label, len(got), len(f.want))
	}
}

// cluster is a distributed deployment on loopback: a separate nats-server,
// an object store (MinIO or a shared directory), and sluice processes.
type cluster struct {
	t      *testing.T
	bin    string
	nats   *testenv.NATS
	minio  *testenv.MinIO // nil: local directory store
	loc    string
	env    []string
	common []string
	// conn is common without the delivery policy flags, for the
	// commands that work no tasks (ingest, status).
	conn   []string
	policy queue.Policy
	st     store.Store
}

// newCluster starts nats-server and, with useMinIO, MinIO (else the store
// is a shared directory); the services get --ack-wait ackWait and
// --max-deliver maxDeliver.
func newCluster(t *testing.T, bin string, useMinIO bool, ackWait time.Duration, maxDeliver int) *cluster {
	t.Helper()
	c := &cluster{t: t, bin: bin, nats: testenv.StartNATS(t), policy: queue.Policy{AckWait: ackWait, MaxDeliver: maxDeliver}}
	creds := store.Credentials{}
	if useMinIO {
		c.minio = testenv.StartMinIO(t)
		c.env = []string{"SLUICE_S3_ACCESS_KEY=" + c.minio.AccessKey, "SLUICE_S3_SECRET_KEY=" + c.minio.SecretKey}
		c.loc = c.minio.URL("sluice-faults")
		creds = store.Credentials{AccessKey: store.Secret(c.minio.AccessKey), SecretKey: store.Secret(c.minio.SecretKey)}
	} else {
		c.loc = filepath.Join(t.TempDir(), "store")
	}
	c.conn = []string{"--nats", c.nats.URL, "--store", c.loc}
	c.common = append(append([]string{}, c.conn...), "--ack-wait", ackWait.String(), "--max-deliver", fmt.Sprint(maxDeliver))
	// MinIO can answer "Server not initialized yet" for a moment after its
	// readiness endpoint says ready; the services start only once a store
	// operation has succeeded here.
	waitFor(t, 30*time.Second, "the store to answer", func() bool {
		var err error
		c.st, err = store.Open(context.Background(), c.loc, creds)
		return err == nil
	})
	// The delivery policy is the deployment's: set it once, as an operator
	// does, before any service opens the queue. Otherwise whichever process
	// opens it first (ingest takes no policy flags) creates the task
	// consumers with the default 30 s / 5, and the services keep that.
	if out, err := exec.Command(bin, "queue-policy", "--nats", c.nats.URL, "--ack-wait", ackWait.String(), "--max-deliver", fmt.Sprint(maxDeliver)).CombinedOutput(); err != nil {
		t.Fatalf("sluice queue-policy: %v\n%s", err, out)
	}
	return c
}

func (c *cluster) addr() string { return fmt.Sprintf("127.0.0.1:%d", testenv.FreePort(c.t)) }

// service starts `sluice <cmd>` with the cluster's flags plus args.
func (c *cluster) service(name, cmd string, args ...string) *proc {
	flags := c.common
	if cmd == "ingest" {
		flags = c.conn
	}
	return start(c.t, name, c.bin, c.env, append(append([]string{cmd}, args...), flags...)...)
}

// ingest stores one scan and queues its tiles (`sluice ingest FILE`).
func (c *cluster) ingest(f *fixture, i int) error {
	cmd := exec.Command(c.bin, append([]string{"ingest", "--campaign", f.name, "--config", f.cfgPath, f.paths[i]}, c.conn...)...)
	cmd.Env = append(os.Environ(), c.env...)
	out, err := cmd.CombinedOutput()
	if err != nil {
		return fmt.Errorf("ingest %s: %v\n%s", filepath.Base(f.paths[i]), err, tail(string(out), 20))
	}
	return nil
}

// queue opens the cluster's queue with the services' delivery policy: a
// queue opened with another policy rewrites the task consumers' (the last
// process to open wins), which would change MaxDeliver under a running test.
func (c *cluster) queue() *queue.Queue {
	q, err := queue.Open(context.Background(), queue.Config{URL: c.nats.URL, Policy: c.policy})
	if err != nil {
		c.t.Fatal(err)
	}
	c.t.Cleanup(func() { q.Close() })
	return q
}

// completions counts the step-completed events of a campaign stored on
// NATS, once every one of its steps has at least one (so an upper bound on
// the count cannot pass because nothing had arrived yet).
func completions(t *testing.T, q *queue.Queue, name string, steps int) map[string]int {
	t.Helper()
	var n map[string]int
	waitFor(t, time.Minute, fmt.Sprintf("a completion event for each of %d steps", steps), func() bool {
		n = map[string]int{}
		for _, e := range storedEvents(t, q, name) {
			if e.Kind == pb.StepEvent_KIND_COMPLETED {
				n[e.Step]++
			}
		}
		return len(n) >= steps
	})
	return n
}

// storedEvents reads the step events of campaign c stored on the events
// stream now, oldest first, to the last one: an exact read rather than
// listening for a while. The subject is the wire format of pkg/queue
// (sluice.event.<campaign token>); if it changed, nothing would match and
// the callers' waits would fail, not pass.
func storedEvents(t *testing.T, q *queue.Queue, c string) []*pb.StepEvent {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	js, err := jetstream.New(q.Conn())
	if err != nil {
		t.Fatal(err)
	}
	cons, err := js.OrderedConsumer(ctx, queue.StreamEvents, jetstream.OrderedConsumerConfig{
		FilterSubjects: []string{"sluice.event." + queue.Token(c)}})
	if err != nil {
		t.Fatalf("events of %s: %v", c, err)
	}
	info, err := cons.Info(ctx)
	if err != nil {
		t.Fatalf("events of %s: %v", c, err)
	}
	// Callers poll: remove each reader when done, or the ephemeral
	// consumers pile up until the server refuses new ones. (An ordered
	// consumer makes a new server-side consumer for a fetch, so the name
	// is read at the end.)
	defer func() { js.DeleteConsumer(context.Background(), queue.StreamEvents, cons.CachedInfo().Name) }()
	var out []*pb.StepEvent
	for uint64(len(out)) < info.NumPending {
		b, err := cons.Fetch(int(min(info.NumPending-uint64(len(out)), 256)), jetstream.FetchMaxWait(30*time.Second))
		if err != nil {
			t.Fatalf("events of %s: %v", c, err)
		}
		got := 0
		for m := range b.Messages() {
			got++
			e := new(pb.StepEvent)
			if err := proto.Unmarshal(m.Data(), e); err != nil {
				t.Fatalf("events of %s: undecodable message on %s: %v", c, m.Subject(), err)
			}
			out = append(out, e)
		}
		if got == 0 {
			t.Fatalf("events of %s: %d of %d stored events read (%v)", c, len(out), info.NumPending, b.Error())
		}
	}
	return out
}

// metricSum adds the samples of a metric over all its label values on a
// /metrics endpoint (-1 if the endpoint does not answer).
func metricSum(addr, name string) float64 {
	resp, err := http.Get("http://" + addr + "/metrics")
	if err != nil {
		return -1
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	re := regexp.MustCompile(`(?m)^` + regexp.QuoteMeta(name) + `(\{[^}]*\})? ([0-9.e+-]+)$`)
	sum := 0.0
	for _, m := range re.FindAllStringSubmatch(string(b), -1) {
		v, _ := strconv.ParseFloat(m[2], 64)
		sum += v
	}
	return sum
}

// dropScan copies scan i of f into a watched directory, marker last.
func dropScan(t *testing.T, f *fixture, i int, dir string) {
	t.Helper()
	p := f.paths[i]
	for _, ext := range []string{"", ".sluice.json"} {
		b, err := os.ReadFile(p + ext)
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dir, filepath.Base(p)+ext), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	os.WriteFile(filepath.Join(dir, filepath.Base(p)+".done"), nil, 0o644)
}

var stepComplete = regexp.MustCompile(`msg="step complete" campaign=\S+ step=(\S+)`)

// completedSteps counts, per step, the "step complete" lines in the logs of
// the given processes: a step merged and recorded twice shows twice.
func completedSteps(procs ...*proc) map[string]int {
	n := map[string]int{}
	for _, p := range procs {
		for _, m := range stepComplete.FindAllStringSubmatch(p.String(), -1) {
			n[m[1]]++
		}
	}
	return n
}

// onceAtMost fails the test for a step completed more than once.
func onceAtMost(t *testing.T, n map[string]int) {
	t.Helper()
	for s, k := range n {
		if k > 1 {
			t.Errorf("step %s completed %d times", s, k)
		}
	}
}

// logged tells whether one line of p's output holds every one of parts.
func logged(p *proc, parts ...string) bool {
	for _, l := range strings.Split(p.String(), "\n") {
		all := true
		for _, s := range parts {
			all = all && strings.Contains(l, s)
		}
		if all {
			return true
		}
	}
	return false
}

// count counts the lines of a process log holding s.
func count(p *proc, s string) int { return strings.Count(p.String(), s) }

func kill(p *proc) {
	p.cmd.Process.Kill()
	p.cmd.Wait()
}

// TestKillAggregatorMidStep: the aggregator process is killed with SIGKILL
// while a step has some of its tile results and not all, then started
// again. Its state is the store and the durable results consumer, so every
// step completes, once, and series.json is the undisturbed run's, byte for
// byte.
func TestKillAggregatorMidStep(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	f := prepare(t, "faults", 48, 24, 6)
	c := newCluster(t, binary(t, ""), true, 4*time.Second, 5)
	aggAddr := c.addr()
	agg := c.service("aggregate-1", "aggregate", "--http", aggAddr)
	c.service("worker", "worker", "--http", "off", "--concurrency", "2", "--id", "w1")
	for i := range f.paths {
		if err := c.ingest(f, i); err != nil {
			t.Fatal(err)
		}
	}
	const tiles = 8 // 48³ in 24³ tiles
	var received float64
	waitFor(t, 3*time.Minute, "the aggregator to hold part of a step", func() bool {
		received = metric(aggAddr, "sluice_tile_results_received_total")
		return received > tiles && int(received)%tiles != 0
	})
	kill(agg)
	rowsAtKill := rowCount(c.st, f.name)
	t.Logf("aggregator killed after %g tile results (%d rows stored)", received, rowsAtKill)
	if rowsAtKill >= len(f.paths) {
		t.Fatalf("aggregator killed after the last step (%d rows)", rowsAtKill)
	}
	agg2Addr := c.addr()
	agg2 := c.service("aggregate-2", "aggregate", "--http", agg2Addr)
	waitFor(t, 3*time.Minute, "every step after the restart", func() bool { return rowCount(c.st, f.name) >= len(f.paths) })
	sameSeries(t, c.st, f, "after the aggregator restart")
	done := completedSteps(agg, agg2)
	t.Logf("restarted aggregator received %g tile results (redelivered or new); steps completed by the first %d, by the second %d",
		metric(agg2Addr, "sluice_tile_results_received_total"), len(completedSteps(agg)), len(completedSteps(agg2)))
	onceAtMost(t, done)
	// Completion events on NATS: one per step, except that a step whose
	// event went out just before the kill (result not yet acknowledged)
	// may be announced by both.
	for s, n := range completions(t, c.queue(), f.name, len(f.paths)) {
		if n > 1 {
			t.Logf("step %s announced complete %d times", s, n)
		}
		if n > 2 {
			t.Errorf("step %s announced complete %d times", s, n)
		}
	}
}

// TestKillAllInOneMidCampaign: `sluice run` (embedded NATS, local store,
// workers, aggregator, watcher) is killed with SIGKILL with part of the
// campaign done and started again on the same directories; the watcher
// skips measured scans, redelivered tiles finish the rest, and series.json
// is the undisturbed run's, byte for byte.
func TestKillAllInOneMidCampaign(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	f := prepare(t, "faults", 48, 24, 6)
	bin := binary(t, "")
	data := t.TempDir()
	incoming := filepath.Join(data, "incoming")
	os.MkdirAll(incoming, 0o755)
	args := []string{"run", "--data", data, "--watch", incoming, "--campaign", f.name, "--config", f.cfgPath,
		"--workers", "2", "--ack-wait", "4s", "--http", "off"}
	run := start(t, "run-1", bin, nil, args...)
	for _, p := range f.paths {
		for _, ext := range []string{"", ".sluice.json"} {
			b, err := os.ReadFile(p + ext)
			if err != nil {
				t.Fatal(err)
			}
			os.WriteFile(filepath.Join(incoming, filepath.Base(p)+ext), b, 0o644)
		}
		os.WriteFile(filepath.Join(incoming, filepath.Base(p)+".done"), nil, 0o644)
	}
	st, err := store.Open(context.Background(), filepath.Join(data, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	waitFor(t, 3*time.Minute, "two steps done", func() bool { return rowCount(st, f.name) >= 2 })
	kill(run)
	at := rowCount(st, f.name)
	t.Logf("all-in-one killed with %d of %d steps in the series", at, len(f.paths))
	if at >= len(f.paths) {
		t.Fatalf("killed after the last step")
	}
	run2 := start(t, "run-2", bin, nil, args...)
	waitFor(t, 3*time.Minute, "every step after the restart", func() bool { return rowCount(st, f.name) >= len(f.paths) })
	sameSeries(t, st, f, "after the all-in-one restart")
	onceAtMost(t, completedSteps(run, run2))
	t.Logf("steps completed before the kill %d, after the restart %d; scans skipped as measured on restart %d",
		len(completedSteps(run)), len(completedSteps(run2)), count(run2, "scan already measured"))
}

// TestNATSRestart: the separate nats-server is stopped while a worker
// holds a tile and started again on the same port with the same JetStream
// store directory once the ingest of a scan arriving during the outage has
// failed. Worker, aggregator and the watching ingest reconnect and go on;
// the failed scan is ingested once NATS is back; nothing is lost and
// series.json is the undisturbed run's.
func TestNATSRestart(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	f := prepare(t, "faults", 48, 24, 6)
	c := newCluster(t, binary(t, ""), true, 4*time.Second, 5)
	wAddr := c.addr()
	agg := c.service("aggregate", "aggregate", "--http", "off")
	wk := c.service("worker", "worker", "--http", wAddr, "--concurrency", "1", "--id", "w1")
	incoming := t.TempDir()
	ing := c.service("ingest", "ingest", "--http", "off", "--campaign", f.name, "--config", f.cfgPath, "--watch", incoming)
	drop := func(i int) { dropScan(t, f, i, incoming) }
	for i := 0; i < 3; i++ {
		drop(i)
	}
	waitFor(t, 2*time.Minute, "the worker to hold a tile", func() bool { return metric(wAddr, "sluice_worker_tiles_in_flight") >= 1 })
	before := metricSum(wAddr, "sluice_tiles_processed_total")
	c.nats.Stop()
	down := time.Now()
	drop(3) // arrives while NATS is down
	// NATS stays down until the ingest of scan 3 has failed (its task
	// publish gets no acknowledgement) and the watcher has put the scan
	// back: the event itself, not a guess at how long the publish waits.
	scan3 := filepath.Base(f.paths[3])
	waitFor(t, 2*time.Minute, "the ingest of "+scan3+" to fail and be put back while NATS is down", func() bool {
		return logged(ing, "will try the scan again", scan3)
	})
	t.Logf("the ingest of %s failed and was put back %.1f s into the outage", scan3, time.Since(down).Seconds())
	c.nats.Start()
	up := time.Now()
	waitFor(t, 2*time.Minute, "a tile processed after the restart", func() bool {
		return metricSum(wAddr, "sluice_tiles_processed_total") > before+1
	})
	t.Logf("NATS down %.1f s; first tiles processed again %.1f s after it came back",
		up.Sub(down).Seconds(), time.Since(up).Seconds())
	for i := 4; i < len(f.paths); i++ {
		drop(i)
	}
	waitFor(t, 3*time.Minute, "every step after the NATS restart", func() bool { return rowCount(c.st, f.name) >= len(f.paths) })
	sameSeries(t, c.st, f, "after the NATS restart")
	if dls, err := c.queue().DeadLetters(context.Background(), f.name); err != nil || len(dls) != 0 {
		t.Errorf("dead letters after a NATS restart: %d (%v)", len(dls), err)
	}
	onceAtMost(t, completedSteps(agg))
	processed := metricSum(wAddr, "sluice_tiles_processed_total")
	t.Logf("worker: %g tiles processed, %g redelivered; failed pulls retried: worker %d, aggregator %d; ingests retried %d",
		processed, metric(wAddr, "sluice_tiles_redelivered_total"), count(wk, "pull failed"), count(agg, "pull failed"),
		count(ing, "will try the scan again"))

}

// TestMinIOOutage: the MinIO server is stopped while a worker holds a tile
// and a scan arrives at the watching ingest — until both have met the
// outage, and for at least ten seconds — then started again on the same
// address and data directory. Store operations fail, are retried with
// backoff (sluice_store_retries_total rises on the worker and the ingest),
// nothing is dead-lettered, and series.json is the undisturbed run's.
func TestMinIOOutage(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	f := prepare(t, "faults", 48, 24, 6)
	c := newCluster(t, binary(t, ""), true, 4*time.Second, 3)
	wAddr, aAddr := c.addr(), c.addr()
	c.service("aggregate", "aggregate", "--http", aAddr)
	c.service("worker", "worker", "--http", wAddr, "--concurrency", "1", "--id", "w1")
	iAddr := c.addr()
	incoming := t.TempDir()
	c.service("ingest", "ingest", "--http", iAddr, "--campaign", f.name, "--config", f.cfgPath, "--watch", incoming)
	for i := 0; i < 4; i++ {
		dropScan(t, f, i, incoming)
	}
	waitFor(t, 2*time.Minute, "the worker to hold a tile", func() bool { return metric(wAddr, "sluice_worker_tiles_in_flight") >= 1 })
	before := metricSum(wAddr, "sluice_tiles_processed_total")
	c.minio.Stop()
	down := time.Now()
	dropScan(t, f, 4, incoming) // a scan that arrives during the outage
	// The events: the worker (holding a tile) and the ingest (storing scan
	// 4) have each had a store operation fail and retried it.
	waitFor(t, 2*time.Minute, "the worker and the ingest to retry a store operation during the outage", func() bool {
		return metricSum(wAddr, "sluice_store_retries_total") >= 1 && metricSum(iAddr, "sluice_store_retries_total") >= 1
	})
	// The outage itself lasts at least 10 s, more than two ack waits (4 s):
	// the tile held across it is kept by heartbeats, not by finishing in
	// time (a scenario length, not a wait for an event; well inside the
	// store's one-minute retry budget).
	if rest := 10*time.Second - time.Since(down); rest > 0 {
		time.Sleep(rest)
	}
	during := metricSum(wAddr, "sluice_tiles_processed_total")
	c.minio.Start()
	up := time.Now()
	waitFor(t, 2*time.Minute, "a tile processed after MinIO is back", func() bool {
		return metricSum(wAddr, "sluice_tiles_processed_total") > during
	})
	t.Logf("MinIO down %.1f s; tiles processed during the outage %g; first tile done %.1f s after it came back",
		up.Sub(down).Seconds(), during-before, time.Since(up).Seconds())
	for i := 5; i < len(f.paths); i++ {
		dropScan(t, f, i, incoming)
	}
	waitFor(t, 3*time.Minute, "every step after the outage", func() bool { return rowCount(c.st, f.name) >= len(f.paths) })
	sameSeries(t, c.st, f, "after the MinIO outage")
	retries := metricSum(wAddr, "sluice_store_retries_total")
	if retries < 1 {
		t.Errorf("worker sluice_store_retries_total = %g, want > 0 after a 10 s outage", retries)
	}
	if r := metricSum(iAddr, "sluice_store_retries_total"); r < 1 {
		t.Errorf("ingest sluice_store_retries_total = %g, want > 0: the scan arriving during the outage met it", r)
	}
	for _, a := range []string{wAddr, aAddr, iAddr} {
		if g := metricSum(a, "sluice_store_gave_up_total"); g != 0 {
			t.Errorf("%s gave up on %g store operations", a, g)
		}
	}
	if n := metric(wAddr, "sluice_tiles_dead_letter_total"); n != 0 {
		t.Errorf("%g tiles dead-lettered", n)
	}
	if dls, err := c.queue().DeadLetters(context.Background(), f.name); err != nil || len(dls) != 0 {
		t.Errorf("dead letters after the outage: %d (%v)", len(dls), err)
	}
	t.Logf("worker: store errors %g, retries %g, tiles redelivered %g; aggregator: store errors %g, retries %g; ingest: store errors %g, retries %g",
		metricSum(wAddr, "sluice_store_errors_total"), retries, metric(wAddr, "sluice_tiles_redelivered_total"),
		metricSum(aAddr, "sluice_store_errors_total"), metricSum(aAddr, "sluice_store_retries_total"),
		metricSum(iAddr, "sluice_store_errors_total"), metricSum(iAddr, "sluice_store_retries_total"))
	out := sluiceRun(t, c.bin, c.env, append([]string{"status", f.name}, c.conn...)...)
	if !strings.Contains(out, fmt.Sprintf("done %d", len(f.paths))) || !strings.Contains(out, "failed 0") {
		t.Errorf("sluice status after the outage:\n%s", out)
	}
}

// TestPoisonTile: one tile kills every worker process that takes it (a
// fault-injection hook compiled only with -tags faultinject). A supervisor
// restarts the worker, as systemd or Kubernetes would — after the third
// crash only after a pause. The tile is delivered MaxDeliver = 3 times, then
// recorded as a dead letter from the server's max-deliveries advisory (sent
// when a worker next asks for work) by the worker or the aggregator,
// whichever hears it first; its step is failed with that reason on
// the aggregator's API and in `sluice status`; every other step, before and
// after it, completes with the undisturbed run's values.
func TestPoisonTile(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	f := prepare(t, "faults", 48, 24, 6)
	bin := binary(t, "faultinject")
	// Production builds carry no hook: the variable's name is in the
	// fault-injection binary only.
	for b, want := range map[string]bool{bin: true, binary(t, ""): false} {
		exe, err := os.ReadFile(b)
		if err != nil {
			t.Fatal(err)
		}
		if got := bytes.Contains(exe, []byte("SLUICE_FAULT_CRASH_TILE")); got != want {
			t.Fatalf("%s: fault-injection hook present %v, want %v", filepath.Base(b), got, want)
		}
	}
	c := newCluster(t, bin, false, 2*time.Second, 3)
	poisonStep := strings.TrimSuffix(filepath.Base(f.paths[2]), ".raw")
	const poisonTile = 5
	aAddr := c.addr()
	c.service("aggregate", "aggregate", "--http", aAddr)

	// The supervisor: one worker process at a time, restarted on exit.
	ctx, cancel := context.WithCancel(context.Background())
	var crashes int
	var mu sync.Mutex
	var wg sync.WaitGroup
	wg.Add(1)
	go func() {
		defer wg.Done()
		for i := 1; ctx.Err() == nil; i++ {
			w := exec.Command(bin, append([]string{"worker", "--http", "off", "--concurrency", "1", "--id", fmt.Sprintf("w%d", i)}, c.common...)...)
			w.Env = append(os.Environ(), "SLUICE_FAULT_CRASH_TILE="+f.name+"/"+poisonStep+"/"+fmt.Sprint(poisonTile))
			var log bytes.Buffer
			w.Stdout, w.Stderr = &log, &log
			if w.Start() != nil {
				return
			}
			done := make(chan struct{})
			go func() { w.Wait(); close(done) }()
			select {
			case <-done:
				mu.Lock()
				if w.ProcessState.ExitCode() == 86 {
					crashes++
				}
				n := crashes
				mu.Unlock()
				if n == 3 {
					// Restart late, as a crash-looping pod is. The server
					// notices that the tile ran out of deliveries only
					// when a worker next asks for work, so the dead letter
					// is recorded by whichever process hears the advisory
					// first: the restarted worker or the aggregator.
					select {
					case <-ctx.Done():
					case <-time.After(3 * time.Second):
					}
				}
			case <-ctx.Done():
				w.Process.Signal(os.Interrupt)
				<-done
			}
		}
	}()
	t.Cleanup(func() { cancel(); wg.Wait() })

	for i := range f.paths {
		if err := c.ingest(f, i); err != nil {
			t.Fatal(err)
		}
	}
	waitFor(t, 3*time.Minute, "every other step", func() bool { return rowCount(c.st, f.name) >= len(f.paths)-1 })
	q := c.queue()
	var dls []*pb.DeadLetter
	waitFor(t, time.Minute, "the dead letter", func() bool {
		dls, _ = q.DeadLetters(context.Background(), f.name)
		return len(dls) > 0
	})
	mu.Lock()
	t.Logf("worker crashes: %d", crashes)
	if crashes != 3 {
		t.Errorf("the poison tile crashed %d worker processes, want MaxDeliver = 3", crashes)
	}
	mu.Unlock()
	if len(dls) != 1 {
		t.Fatalf("%d dead letters, want 1", len(dls))
	}
	dl := dls[0]
	t.Logf("dead letter: task %s, %d deliveries, recorded by %s, reason %q", dl.MsgId, dl.Deliveries, dl.WorkerId, dl.Reason)
	if dl.Task == nil || dl.Task.Step != poisonStep || dl.Task.Tile != poisonTile || dl.Deliveries != 3 ||
		!strings.Contains(dl.Reason, "no acknowledgement on any of 3 deliveries") {
		t.Errorf("dead letter %v", dl)
	}
	if !strings.HasPrefix(dl.WorkerId, "aggregator@") && !regexp.MustCompile(`^w[0-9]+$`).MatchString(dl.WorkerId) {
		t.Errorf("dead letter recorded by %q, want the aggregator or one of the test's workers", dl.WorkerId)
	}

	// The series: every step but the poisoned one, with the undisturbed values.
	rows, err := series.Load(context.Background(), c.st, f.name)
	if err != nil {
		t.Fatal(err)
	}
	var want []series.Row
	for _, r := range f.rows {
		if r.Step != poisonStep {
			want = append(want, r)
		}
	}
	// The front velocity is a difference between consecutive rows of the
	// series (series.FrontVelocities): with the poisoned step missing, the
	// step after it is measured against the one before it.
	series.FrontVelocities(want)
	compareRows(t, rows, want)

	// The aggregator's API and `sluice status` name the reason.
	wantReason := fmt.Sprintf("tile %d: no acknowledgement on any of 3 deliveries", poisonTile)
	var steps []struct{ Step, Status, Reason string }
	waitFor(t, 30*time.Second, "the step failed on the aggregator's API", func() bool {
		resp, err := http.Get("http://" + aAddr + "/api/campaigns/" + f.name + "/steps")
		if err != nil {
			return false
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		if json.Unmarshal(b, &steps) != nil {
			return false
		}
		for _, s := range steps {
			if s.Step == poisonStep {
				return s.Status == "failed"
			}
		}
		return false
	})
	for _, s := range steps {
		if s.Step == poisonStep && !strings.Contains(s.Reason, wantReason) {
			t.Errorf("aggregator API: step %s failed with reason %q, want it to contain %q", s.Step, s.Reason, wantReason)
		}
		if s.Step != poisonStep && s.Status != "done" {
			t.Errorf("aggregator API: step %s is %s", s.Step, s.Status)
		}
	}
	if n := metricSum(aAddr, "sluice_steps_failed_total"); n != 1 {
		t.Errorf("sluice_steps_failed_total = %g, want 1", n)
	}
	out := sluiceRun(t, bin, c.env, append([]string{"status", f.name}, c.conn...)...)
	t.Logf("sluice status:\n%s", out)
	wantStatus := fmt.Sprintf("failed:  step %s: tile %d dead-lettered after 3 deliveries: no acknowledgement", poisonStep, poisonTile)
	if !strings.Contains(out, wantStatus) || !strings.Contains(out, "failed 1") {
		t.Errorf("sluice status does not show the failed step (want %q)", wantStatus)
	}
}

// TestBurst: 200 single-tile 16³ steps dropped into a watched directory at
// once, two worker processes: 200 rows, no step twice, each tile processed
// once, and the queue lag back to 0.
func TestBurst(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	const distinct, copies = 10, 20
	f := prepare(t, "burst", 16, 32, distinct) // one tile per step (tile edge above the 20-voxel halo)
	c := newCluster(t, binary(t, ""), false, 30*time.Second, 5)
	aAddr, w1, w2 := c.addr(), c.addr(), c.addr()
	c.service("aggregate", "aggregate", "--http", aAddr)
	c.service("worker-1", "worker", "--http", w1, "--concurrency", "1", "--id", "w1")
	c.service("worker-2", "worker", "--http", w2, "--concurrency", "1", "--id", "w2")
	incoming := t.TempDir()
	// Each scan written 20 times under new names and times: 200 steps.
	for k := 0; k < copies; k++ {
		for i, p := range f.paths {
			raw, err := os.ReadFile(p)
			if err != nil {
				t.Fatal(err)
			}
			hdr, err := os.ReadFile(p + ".sluice.json")
			if err != nil {
				t.Fatal(err)
			}
			name := filepath.Join(incoming, fmt.Sprintf("b%03d.raw", k*distinct+i))
			os.WriteFile(name, raw, 0o644)
			os.WriteFile(name+".sluice.json", hdr, 0o644)
			os.WriteFile(name+".done", []byte(fmt.Sprintf(`{"time_s": %d}`, k*distinct+i)), 0o644)
		}
	}
	c.service("ingest", "ingest", "--http", "off", "--campaign", f.name, "--config", f.cfgPath, "--watch", incoming)
	const total = distinct * copies
	waitFor(t, 5*time.Minute, "200 rows", func() bool { return rowCount(c.st, f.name) >= total })
	b, err := seriesJSON(c.st, f.name)
	if err != nil {
		t.Fatal(err)
	}
	checkRows(t, "burst", b, total)
	rows, _ := series.Decode(b)
	for _, r := range rows {
		var i int
		fmt.Sscanf(r.Step, "b%03d", &i)
		w := f.rows[i%distinct]
		if *r.SatNonwetting != *w.SatNonwetting || *r.Porosity != *w.Porosity {
			t.Errorf("step %s: S_n %v porosity %v, its scan gave %v %v", r.Step, *r.SatNonwetting, *r.Porosity, *w.SatNonwetting, *w.Porosity)
		}
	}
	processed := metricSum(w1, "sluice_tiles_processed_total") + metricSum(w2, "sluice_tiles_processed_total")
	redelivered := metric(w1, "sluice_tiles_redelivered_total") + metric(w2, "sluice_tiles_redelivered_total")
	t.Logf("tiles processed %g (w1 %g, w2 %g), redelivered %g", processed, metricSum(w1, "sluice_tiles_processed_total"),
		metricSum(w2, "sluice_tiles_processed_total"), redelivered)
	if processed != total || redelivered != 0 {
		t.Errorf("%g tiles processed, %g redelivered; want each of %d tiles once", processed, redelivered, total)
	}
	if n := metricSum(aAddr, "sluice_steps_completed_total"); n != total {
		t.Errorf("sluice_steps_completed_total = %g, want %d", n, total)
	}
	q := c.queue()
	lag, err := q.Lag(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if lag != (queue.Lag{}) {
		t.Errorf("queue lag after the burst: %+v", lag)
	}
	waitFor(t, 30*time.Second, "sluice_queue_lag_tasks back to 0", func() bool {
		return metric(aAddr, `sluice_queue_lag_tasks{priority="live"}`) == 0
	})
}
