package queue

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"

	"sluice/internal/testenv"
	pb "sluice/proto/sluicepb"
)

// These tests run a real nats-server (embedded in the test process, or the
// nats-server binary as a separate process); nothing is mocked. Durations are
// protocol settings (AckWait, BackOff), never assertions about speed; waits
// for an outcome use a generous deadline.

var quiet = slog.New(slog.NewTextHandler(io.Discard, nil))

const patience = 30 * time.Second

func startServer(t testing.TB, dir string) *Server {
	t.Helper()
	srv, err := StartServer(ServerConfig{StoreDir: dir})
	if err != nil {
		t.Fatal(err)
	}
	return srv
}

func openQueue(t testing.TB, cfg Config) *Queue {
	t.Helper()
	if cfg.Logger == nil {
		cfg.Logger = quiet
	}
	q, err := Open(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { q.Close() })
	return q
}

// newQueue starts an embedded server in a temporary directory and opens a
// queue on it with the given policy.
func newQueue(t testing.TB, pol Policy) (*Server, *Queue) {
	t.Helper()
	srv := startServer(t, t.TempDir())
	t.Cleanup(srv.Shutdown)
	return srv, openQueue(t, Config{Server: srv, Policy: pol})
}

func task(campaign, step string, tile int32, p pb.Priority) *pb.TileTask {
	return &pb.TileTask{Campaign: campaign, Step: step, Tile: tile, TileCount: 64, ParamHash: "c0ffee", Priority: p,
		Core: &pb.Box{MaxZ: 32, MaxY: 32, MaxX: 32}, Halo: 4, TimeS: 30}
}

func waitFor(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(patience)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("gave up waiting for %s after %v", what, patience)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// runWork runs q.Work in the background until the test ends.
func runWork(t *testing.T, q *Queue, h Handler, opts WorkOptions) (stop func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	if opts.IdleWait == 0 {
		opts.IdleWait = 100 * time.Millisecond
	}
	go func() { done <- q.Work(ctx, h, opts) }()
	var once sync.Once
	stop = func() {
		once.Do(func() {
			cancel()
			if err := <-done; err != nil && !strings.Contains(err.Error(), "connection closed") {
				t.Errorf("Work: %v", err)
			}
		})
	}
	t.Cleanup(stop)
	return stop
}

// recorder collects what handlers saw.
type recorder struct {
	mu   sync.Mutex
	seen []string
}

func (r *recorder) add(s string) {
	r.mu.Lock()
	r.seen = append(r.seen, s)
	r.mu.Unlock()
}

func (r *recorder) list() []string {
	r.mu.Lock()
	defer r.mu.Unlock()
	return append([]string(nil), r.seen...)
}

func TestDuplicateTaskIsStoredOnce(t *testing.T) {
	_, q := newQueue(t, Policy{})
	ctx := context.Background()
	tk := task("drainage.a", "0001", 5, pb.Priority_PRIORITY_LIVE)
	dup, err := q.PublishTask(ctx, tk)
	if err != nil || dup {
		t.Fatalf("first publish: duplicate=%v err=%v", dup, err)
	}
	dup, err = q.PublishTask(ctx, proto.CloneOf(tk))
	if err != nil || !dup {
		t.Fatalf("republish: duplicate=%v err=%v, want a duplicate", dup, err)
	}
	// A different parameter hash is different work.
	other := proto.CloneOf(tk)
	other.ParamHash = "beef"
	if dup, err := q.PublishTask(ctx, other); err != nil || dup {
		t.Fatalf("other hash: duplicate=%v err=%v", dup, err)
	}
	lag, err := q.Lag(ctx)
	if err != nil || lag.Live != 2 {
		t.Fatalf("Lag = %+v, %v; want 2 live tasks", lag, err)
	}
	var rec recorder
	stop := runWork(t, q, func(_ context.Context, tk *pb.TileTask) error { rec.add(TaskID(tk)); return nil }, WorkOptions{})
	waitFor(t, "two tasks handled", func() bool { return len(rec.list()) >= 2 })
	stop()
	got := rec.list()
	if len(got) != 2 || got[0] == got[1] {
		t.Fatalf("handled %q, want the two distinct tasks once each", got)
	}
	if lag, _ := q.Lag(ctx); lag != (Lag{}) {
		t.Fatalf("after work, Lag = %+v", lag)
	}
}

func TestRedeliveryAfterWorkerDies(t *testing.T) {
	srv, q := newQueue(t, Policy{AckWait: time.Second, MaxDeliver: 3})
	ctx := context.Background()
	if _, err := q.PublishTask(ctx, task("c", "0001", 0, pb.Priority_PRIORITY_LIVE)); err != nil {
		t.Fatal(err)
	}
	// Worker 1 takes the tile and dies mid-tile: its connection drops and
	// it never acknowledges.
	w1 := openQueue(t, Config{Server: srv, Policy: q.Policy()})
	took := make(chan uint32, 1)
	release := make(chan struct{})
	runWork(t, w1, func(_ context.Context, tk *pb.TileTask) error {
		took <- tk.Attempt
		<-release
		return nil
	}, WorkOptions{})
	t.Cleanup(func() { close(release) }) // runs before the worker is stopped
	if a := <-took; a != 1 {
		t.Fatalf("first delivery has attempt %d", a)
	}
	w1.nc.Close()

	// Worker 2 gets the same tile again after AckWait, as attempt 2.
	var rec recorder
	runWork(t, q, func(_ context.Context, tk *pb.TileTask) error {
		rec.add(fmt.Sprintf("%s#%d", TaskID(tk), tk.Attempt))
		return nil
	}, WorkOptions{})
	waitFor(t, "redelivery", func() bool { return len(rec.list()) == 1 })
	if got := rec.list()[0]; got != "c/0001/0/c0ffee#2" {
		t.Fatalf("redelivered %s, want c/0001/0/c0ffee#2", got)
	}
	waitFor(t, "empty queue", func() bool { l, _ := q.Lag(ctx); return l == Lag{} })
}

func TestDeadLetterAfterMaxDeliver(t *testing.T) {
	_, q := newQueue(t, Policy{MaxDeliver: 3, BackOff: []time.Duration{300 * time.Millisecond, 300 * time.Millisecond}})
	ctx := context.Background()
	if _, err := q.PublishTask(ctx, task("c", "0007", 3, pb.Priority_PRIORITY_BATCH)); err != nil {
		t.Fatal(err)
	}
	var rec recorder
	runWork(t, q, func(_ context.Context, tk *pb.TileTask) error {
		rec.add(fmt.Sprint(tk.Attempt))
		return fmt.Errorf("segmentation failed on attempt %d", tk.Attempt)
	}, WorkOptions{})
	var dead []*pb.DeadLetter
	waitFor(t, "dead letter", func() bool {
		var err error
		dead, err = q.DeadLetters(ctx, "c")
		return err == nil && len(dead) > 0
	})
	d := dead[0]
	if len(dead) != 1 || d.Deliveries != 3 || d.MsgId != "c/0007/3/c0ffee" || d.Task.GetTile() != 3 ||
		!strings.Contains(d.Reason, "segmentation failed on attempt 3") {
		t.Fatalf("dead letters = %v", dead)
	}
	if got := strings.Join(rec.list(), ","); got != "1,2,3" {
		t.Fatalf("attempts %s, want 1,2,3", got)
	}
	waitFor(t, "empty queue", func() bool { l, _ := q.Lag(ctx); return l == Lag{} })
	if got := strings.Join(rec.list(), ","); got != "1,2,3" {
		t.Fatalf("attempts after dead letter %s, want 1,2,3", got)
	}
}

// TestReadingDeadLettersLeavesNoConsumer: each DeadLetters call reads
// through an ephemeral consumer; polling it (status, the web API, tests
// waiting for a dead letter) must not leave consumers behind on the server,
// which refuses new ones once its limit is reached.
func TestReadingDeadLettersLeavesNoConsumer(t *testing.T) {
	_, q := newQueue(t, Policy{})
	ctx := context.Background()
	count := func() int {
		s, err := q.js.Stream(ctx, StreamDead)
		if err != nil {
			t.Fatal(err)
		}
		info, err := s.Info(ctx)
		if err != nil {
			t.Fatal(err)
		}
		return info.State.Consumers
	}
	before := count()
	for i := 0; i < 20; i++ {
		if _, err := q.DeadLetters(ctx, ""); err != nil {
			t.Fatal(err)
		}
	}
	if after := count(); after != before {
		t.Fatalf("20 reads of the dead letters left %d consumers on %s (before: %d)", after, StreamDead, before)
	}
}

func TestDeadLetterWhenLastDeliveryIsNeverAcked(t *testing.T) {
	_, q := newQueue(t, Policy{AckWait: 500 * time.Millisecond, MaxDeliver: 2})
	ctx := context.Background()
	if _, err := q.PublishTask(ctx, task("c", "0002", 9, pb.Priority_PRIORITY_LIVE)); err != nil {
		t.Fatal(err)
	}
	// Stuck handlers without heartbeats: both deliveries time out. A third
	// slot keeps pulling, so the server notices the exhausted task.
	var rec recorder
	runWork(t, q, func(ctx context.Context, tk *pb.TileTask) error {
		rec.add(fmt.Sprint(tk.Attempt))
		<-ctx.Done()
		return ctx.Err()
	}, WorkOptions{Concurrency: 3, Heartbeat: -1, DrainTimeout: time.Millisecond})
	var dead []*pb.DeadLetter
	waitFor(t, "dead letter from the max-deliveries advisory", func() bool {
		dead, _ = q.DeadLetters(ctx, "")
		return len(dead) > 0
	})
	d := dead[0]
	if d.Task.GetStep() != "0002" || d.MsgId != "c/0002/9/c0ffee" || d.Deliveries != 2 || !strings.Contains(d.Reason, "no acknowledgement") {
		t.Fatalf("dead letter = %v", d)
	}
	info, err := q.tasks.Info(ctx)
	if err != nil || info.State.Msgs != 0 {
		t.Fatalf("task stream still holds %d messages (%v)", info.State.Msgs, err)
	}
	if got := strings.Join(rec.list(), ","); got != "1,2" {
		t.Fatalf("attempts %s, want 1,2", got)
	}
}

func TestPoisonAndPermanentFailures(t *testing.T) {
	_, q := newQueue(t, Policy{MaxDeliver: 5})
	ctx := context.Background()
	// Not a TileTask at all, and a task with a path-trick campaign name.
	if _, err := q.js.Publish(ctx, TaskSubject(pb.Priority_PRIORITY_LIVE, "x"), []byte{0xff, 0xff, 0xff}); err != nil {
		t.Fatal(err)
	}
	bad, _ := proto.Marshal(&pb.TileTask{Campaign: "../etc", Step: "1", ParamHash: "ab"})
	if _, err := q.js.Publish(ctx, TaskSubject(pb.Priority_PRIORITY_LIVE, "x"), bad); err != nil {
		t.Fatal(err)
	}
	if _, err := q.PublishTask(ctx, task("c", "0003", 1, pb.Priority_PRIORITY_LIVE)); err != nil {
		t.Fatal(err)
	}
	var rec recorder
	runWork(t, q, func(_ context.Context, tk *pb.TileTask) error {
		rec.add(TaskID(tk))
		return Permanent(errors.New("volume chunk is corrupt"))
	}, WorkOptions{})
	var dead []*pb.DeadLetter
	waitFor(t, "three dead letters", func() bool { dead, _ = q.DeadLetters(ctx, ""); return len(dead) >= 3 })
	var poison, permanent int
	for _, d := range dead {
		switch {
		case strings.HasPrefix(d.Reason, "poison") && d.Deliveries == 1:
			poison++
		case d.Reason == "volume chunk is corrupt" && d.Deliveries == 1 && d.MsgId == "c/0003/1/c0ffee":
			permanent++
		}
	}
	if poison != 2 || permanent != 1 {
		t.Fatalf("dead letters %v: %d poison, %d permanent; want 2 and 1", dead, poison, permanent)
	}
	if got := rec.list(); len(got) != 1 {
		t.Fatalf("handler saw %q; poison must never reach it and permanent failures run once", got)
	}
	// The publisher refuses invalid tasks outright.
	for _, tk := range []*pb.TileTask{{Campaign: "C", Step: "1", ParamHash: "a"}, {Campaign: "c", Step: "1", ParamHash: ""},
		{Campaign: "c", Step: "1", Tile: 70, TileCount: 64, ParamHash: "a"}} {
		if _, err := q.PublishTask(ctx, tk); err == nil {
			t.Errorf("PublishTask(%v) accepted", tk)
		}
	}
}

func TestLiveBeforeBatch(t *testing.T) {
	_, q := newQueue(t, Policy{})
	ctx := context.Background()
	for i := int32(0); i < 4; i++ {
		if _, err := q.PublishTask(ctx, task("c", "batch", i, pb.Priority_PRIORITY_BATCH)); err != nil {
			t.Fatal(err)
		}
	}
	for i := int32(0); i < 4; i++ {
		if _, err := q.PublishTask(ctx, task("c", "live", i, pb.Priority_PRIORITY_LIVE)); err != nil {
			t.Fatal(err)
		}
	}
	// The server tells a consumer about new messages asynchronously, a few
	// milliseconds after the publish is acknowledged; the guarantee is about
	// tasks the consumers can see, so wait for that.
	waitVisible := func(c jetstream.Consumer, n uint64) {
		waitFor(t, "consumer to see published tasks", func() bool {
			info, err := c.Info(ctx)
			return err == nil && info.NumPending >= n
		})
	}
	waitVisible(q.live, 4)
	waitVisible(q.batch, 4)
	var rec recorder
	var once sync.Once
	runWork(t, q, func(hctx context.Context, tk *pb.TileTask) error {
		rec.add(tk.Step)
		if tk.Step == "batch" {
			// A live scan arrives while a batch tile is in progress: it must
			// be the very next tile taken.
			once.Do(func() {
				if _, err := q.PublishTask(hctx, task("c", "late-live", 0, pb.Priority_PRIORITY_LIVE)); err != nil {
					t.Error(err)
				}
				waitVisible(q.live, 1)
			})
		}
		return nil
	}, WorkOptions{Concurrency: 1})
	waitFor(t, "nine tiles", func() bool { return len(rec.list()) == 9 })
	got := strings.Join(rec.list(), ",")
	want := "live,live,live,live,batch,late-live,batch,batch,batch"
	if got != want {
		t.Fatalf("order %s\nwant  %s", got, want)
	}
}

func TestHeartbeatsKeepSlowTile(t *testing.T) {
	for _, c := range []struct {
		name      string
		heartbeat time.Duration
		wantCalls int // handler calls for the one task
	}{
		{"with heartbeats", 0, 1},
		// Negative control: the same slow handler without heartbeats is
		// redelivered to the idle second slot, so the check above can fail.
		{"without heartbeats", -1, 2},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, q := newQueue(t, Policy{AckWait: time.Second, MaxDeliver: 5})
			ctx := context.Background()
			if _, err := q.PublishTask(ctx, task("c", "slow", 0, pb.Priority_PRIORITY_LIVE)); err != nil {
				t.Fatal(err)
			}
			var rec recorder
			stop := runWork(t, q, func(ctx context.Context, tk *pb.TileTask) error {
				rec.add(fmt.Sprint(tk.Attempt))
				if tk.Attempt == 1 {
					time.Sleep(3500 * time.Millisecond) // 3.5 × AckWait
				}
				return nil
			}, WorkOptions{Concurrency: 2, Heartbeat: c.heartbeat})
			waitFor(t, "empty queue", func() bool {
				l, _ := q.Lag(ctx)
				return l == Lag{} && len(rec.list()) >= 1
			})
			stop()
			if got := rec.list(); len(got) != c.wantCalls {
				t.Fatalf("handler called for attempts %q, want %d call(s)", got, c.wantCalls)
			}
		})
	}
}

func TestRestartKeepsStreamsAndProgress(t *testing.T) {
	dir := t.TempDir()
	ctx := context.Background()
	srv := startServer(t, dir)
	q, err := Open(ctx, Config{Server: srv, Logger: quiet})
	if err != nil {
		t.Fatal(err)
	}
	tk := task("co2.run", "0004", 2, pb.Priority_PRIORITY_LIVE)
	if _, err := q.PublishTask(ctx, tk); err != nil {
		t.Fatal(err)
	}
	key := ProgressKey("co2.run", "0004")
	if _, err := q.PutProgress(ctx, key, []byte("tiles 0-1 of 64")); err != nil {
		t.Fatal(err)
	}
	q.Close()
	srv.Shutdown()

	srv = startServer(t, dir)
	t.Cleanup(srv.Shutdown)
	q = openQueue(t, Config{Server: srv})
	val, _, err := q.GetProgress(ctx, key)
	if err != nil || string(val) != "tiles 0-1 of 64" {
		t.Fatalf("progress after restart = %q, %v", val, err)
	}
	if lag, err := q.Lag(ctx); err != nil || lag.Live != 1 {
		t.Fatalf("Lag after restart = %+v, %v; want the one task", lag, err)
	}
	// The duplicate window survived too.
	if dup, err := q.PublishTask(ctx, tk); err != nil || !dup {
		t.Fatalf("republish after restart: duplicate=%v err=%v", dup, err)
	}
	var rec recorder
	runWork(t, q, func(_ context.Context, tk *pb.TileTask) error { rec.add(TaskID(tk)); return nil }, WorkOptions{})
	waitFor(t, "the task", func() bool { return len(rec.list()) == 1 })
	if got := rec.list()[0]; got != "co2.run/0004/2/c0ffee" {
		t.Fatalf("handled %s", got)
	}
}

func TestResultsStepsEventsAndProgress(t *testing.T) {
	_, q := newQueue(t, Policy{})
	ctx := context.Background()
	done := &pb.TileDone{Campaign: "c", Step: "0001", Tile: 4, TileCount: 8, ParamHash: "ab", ResultKey: "campaigns/c/steps/0001/tiles/ab/4.json",
		Stages: []*pb.StageTiming{{Stage: "segment"}}, BytesRead: 1 << 20}
	for i, wantDup := range []bool{false, true} {
		dup, err := q.PublishResult(ctx, done)
		if err != nil || dup != wantDup {
			t.Fatalf("PublishResult #%d: duplicate=%v err=%v", i, dup, err)
		}
	}
	if _, err := q.PublishStepReady(ctx, &pb.StepReady{Campaign: "c", Step: "0001", TileCount: 8, ParamHash: "ab"}); err != nil {
		t.Fatal(err)
	}
	var rec recorder
	rctx, cancel := context.WithCancel(ctx)
	defer cancel()
	fails := 1
	go q.Results(rctx, func(_ context.Context, d *pb.TileDone) error {
		rec.add(fmt.Sprintf("result %d %s", d.Tile, d.ResultKey))
		if fails > 0 { // the aggregator's store hiccups once: retried, not lost
			fails--
			return errors.New("store unavailable")
		}
		return nil
	})
	go q.StepsReady(rctx, func(_ context.Context, r *pb.StepReady) error {
		rec.add(fmt.Sprintf("ready %s %d", r.Step, r.TileCount))
		return nil
	})
	waitFor(t, "result retried and step ready", func() bool { return len(rec.list()) == 3 })
	got := strings.Join(rec.list(), "|")
	for _, want := range []string{"result 4 campaigns/c/steps/0001/tiles/ab/4.json", "ready 0001 8"} {
		if !strings.Contains(got, want) {
			t.Errorf("saw %s, missing %s", got, want)
		}
	}
	if strings.Count(got, "result 4") != 2 {
		t.Errorf("result deliveries %s, want 2 (one failure, one retry)", got)
	}

	// Events: replay sees events published before subscribing; an event
	// published again with its id is stored once; one without an id is
	// refused.
	for _, again := range []bool{false, true} {
		for _, k := range []pb.StepEvent_Kind{pb.StepEvent_KIND_COMPLETED, pb.StepEvent_KIND_BREAKTHROUGH} {
			dup, err := q.PublishEvent(ctx, "c/0001/"+k.String(), &pb.StepEvent{Campaign: "c", Step: "0001", Kind: k, Values: map[string]float64{"saturation_nw": 0.41}})
			if err != nil || dup != again {
				t.Fatalf("event %v (again %v): duplicate %v, err %v", k, again, dup, err)
			}
		}
	}
	if _, err := q.PublishEvent(ctx, "", &pb.StepEvent{Campaign: "c", Step: "0001", Kind: pb.StepEvent_KIND_COMPLETED}); err == nil {
		t.Fatal("an event without a message id was published")
	}
	var ev recorder
	ectx, ecancel := context.WithCancel(ctx)
	evDone := make(chan error)
	go func() {
		evDone <- q.Events(ectx, "c", true, func(e *pb.StepEvent) { ev.add(e.Kind.String()) })
	}()
	waitFor(t, "two events", func() bool { return len(ev.list()) == 2 })
	ecancel()
	if err := <-evDone; err != nil {
		t.Fatal(err)
	}
	if got := strings.Join(ev.list(), ","); got != "KIND_COMPLETED,KIND_BREAKTHROUGH" {
		t.Fatalf("events %s", got)
	}

	// Progress: compare-and-set.
	key := ProgressKey("c", "0001")
	if _, _, err := q.GetProgress(ctx, key); !errors.Is(err, ErrNoProgress) {
		t.Fatalf("GetProgress of a new key: %v", err)
	}
	r1, err := q.UpdateProgress(ctx, key, []byte("a"), 0)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := q.UpdateProgress(ctx, key, []byte("b"), 0); !errors.Is(err, ErrConflict) {
		t.Fatalf("second create: %v, want ErrConflict", err)
	}
	r2, err := q.UpdateProgress(ctx, key, []byte("b"), r1)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := q.UpdateProgress(ctx, key, []byte("c"), r1); !errors.Is(err, ErrConflict) {
		t.Fatalf("update at a stale revision: %v, want ErrConflict", err)
	}
	if v, rev, _ := q.GetProgress(ctx, key); string(v) != "b" || rev != r2 {
		t.Fatalf("progress = %q rev %d, want b rev %d", v, rev, r2)
	}
}

func TestRemoteWorkerOverTCP(t *testing.T) {
	// The all-in-one exposes its embedded server; a worker in another
	// process joins over the network with a token.
	srv, err := StartServer(ServerConfig{StoreDir: t.TempDir(), Listen: "127.0.0.1:-1", Token: "s3cret-token"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	if !strings.HasPrefix(srv.ClientURL(), "nats://127.0.0.1:") {
		t.Fatalf("ClientURL = %q", srv.ClientURL())
	}
	ctx := context.Background()
	if _, err := Open(ctx, Config{URL: srv.ClientURL(), Logger: quiet}); err == nil {
		t.Fatal("connected without the token")
	}
	local := openQueue(t, Config{Server: srv})
	remote := openQueue(t, Config{URL: srv.ClientURL(), Token: "s3cret-token"})
	if _, err := local.PublishTask(ctx, task("c", "0001", 1, pb.Priority_PRIORITY_LIVE)); err != nil {
		t.Fatal(err)
	}
	var rec recorder
	runWork(t, remote, func(_ context.Context, tk *pb.TileTask) error { rec.add(TaskID(tk)); return nil }, WorkOptions{})
	waitFor(t, "remote worker", func() bool { return len(rec.list()) == 1 })
}

func TestSeparateNATSServerProcess(t *testing.T) {
	n := testenv.StartNATS(t)
	ctx := context.Background()
	q, err := Open(ctx, Config{URL: n.URL, Logger: quiet})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := q.PublishTask(ctx, task("c", "0001", 1, pb.Priority_PRIORITY_BATCH)); err != nil {
		t.Fatal(err)
	}
	if _, err := q.PutProgress(ctx, ProgressKey("c", "0001"), []byte("1")); err != nil {
		t.Fatal(err)
	}
	q.Close()
	n.Restart() // same port, same store directory

	q = openQueue(t, Config{URL: n.URL})
	if v, _, err := q.GetProgress(ctx, ProgressKey("c", "0001")); err != nil || string(v) != "1" {
		t.Fatalf("progress after server restart = %q, %v", v, err)
	}
	var rec recorder
	runWork(t, q, func(_ context.Context, tk *pb.TileTask) error { rec.add(TaskID(tk)); return nil }, WorkOptions{})
	waitFor(t, "task after server restart", func() bool { return len(rec.list()) == 1 })
}

func TestGracefulDrainFinishesInFlightTile(t *testing.T) {
	_, q := newQueue(t, Policy{AckWait: time.Second})
	ctx := context.Background()
	for i := int32(0); i < 3; i++ {
		if _, err := q.PublishTask(ctx, task("c", "0001", i, pb.Priority_PRIORITY_LIVE)); err != nil {
			t.Fatal(err)
		}
	}
	started := make(chan int32, 3)
	finish := make(chan struct{})
	var rec recorder
	wctx, cancel := context.WithCancel(ctx)
	done := make(chan error, 1)
	go func() {
		done <- q.Work(wctx, func(hctx context.Context, tk *pb.TileTask) error {
			started <- tk.Tile
			<-finish
			if hctx.Err() != nil {
				return hctx.Err()
			}
			rec.add(fmt.Sprint(tk.Tile))
			return nil
		}, WorkOptions{IdleWait: 100 * time.Millisecond})
	}()
	first := <-started
	cancel() // SIGTERM while a tile is in progress
	close(finish)
	if err := <-done; err != nil {
		t.Fatalf("Work after drain: %v", err)
	}
	if got := rec.list(); len(got) != 1 || got[0] != fmt.Sprint(first) {
		t.Fatalf("drained worker completed %q, want only the in-flight tile %d", got, first)
	}
	// The in-flight tile was acknowledged; the other two still wait.
	lag, err := q.Lag(ctx)
	if err != nil || lag.Live != 2 || lag.LiveInFlight != 0 {
		t.Fatalf("Lag after drain = %+v, %v; want 2 unfinished, none in flight", lag, err)
	}
}

// TestFollowDeadLettersResumes: the aggregator's dead-letter consumer
// delivers each record once per acknowledgement: a record whose handler
// fails comes again, and a follower started again resumes after the last
// record it acknowledged instead of re-reading the stream.
func TestFollowDeadLettersResumes(t *testing.T) {
	_, q := newQueue(t, Policy{})
	ctx := context.Background()
	record := func(tile int32) {
		q.deadLetter(ctx, &pb.DeadLetter{Task: task("c", "0001", tile, pb.Priority_PRIORITY_LIVE), StreamSeq: uint64(100 + tile), Reason: "test"})
	}
	follow := func(handler func(*pb.DeadLetter) error) (stop func()) {
		fctx, cancel := context.WithCancel(ctx)
		done := make(chan error, 1)
		go func() {
			done <- q.FollowDeadLetters(fctx, func(_ context.Context, d *pb.DeadLetter) error { return handler(d) })
		}()
		return func() {
			cancel()
			if err := <-done; err != nil {
				t.Errorf("FollowDeadLetters: %v", err)
			}
		}
	}
	settled := func() bool {
		ci, err := q.js.Consumer(ctx, StreamDead, ConsumerDead)
		if err != nil {
			return false
		}
		info, err := ci.Info(ctx)
		return err == nil && info.NumPending == 0 && info.NumAckPending == 0 && info.NumRedelivered == 0
	}

	record(1)
	record(2)
	var first recorder
	failed := false
	stop := follow(func(d *pb.DeadLetter) error {
		first.add(fmt.Sprint(d.Task.Tile))
		if d.Task.Tile == 2 && !failed {
			failed = true
			return errors.New("store unavailable")
		}
		return nil
	})
	waitFor(t, "both records handled, the failed one again", func() bool { return len(first.list()) == 3 && settled() })
	stop()
	if got := strings.Join(first.list(), ","); got != "1,2,2" {
		t.Fatalf("first follower handled tiles %s, want 1,2,2", got)
	}

	record(3)
	var second recorder
	stop = follow(func(d *pb.DeadLetter) error { second.add(fmt.Sprint(d.Task.Tile)); return nil })
	waitFor(t, "the new record handled and nothing pending", func() bool { return len(second.list()) > 0 && settled() })
	stop()
	if got := strings.Join(second.list(), ","); got != "3" {
		t.Fatalf("restarted follower handled tiles %s, want only the new 3", got)
	}
}

// TestConsumersStopWhenDeleted: a durable consumer deleted on the server
// (by an operator, say) leaves pulls that come back empty for ever; the
// aggregator's consumers and the workers stop with an error naming it
// instead of idling without a word, so their process exits and its restart
// creates the consumer again.
func TestConsumersStopWhenDeleted(t *testing.T) {
	_, q := newQueue(t, Policy{})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	results := make(chan error, 1)
	go func() {
		results <- q.Results(ctx, func(context.Context, *pb.TileDone) error { return nil })
	}()
	work := make(chan error, 1)
	go func() {
		work <- q.Work(ctx, func(context.Context, *pb.TileTask) error { return nil }, WorkOptions{IdleWait: 100 * time.Millisecond})
	}()
	waitFor(t, "the results consumer", func() bool {
		_, err := q.js.Consumer(ctx, StreamResults, ConsumerResults)
		return err == nil
	})
	for _, c := range []struct{ stream, name string }{{StreamResults, ConsumerResults}, {StreamTasks, ConsumerLive}} {
		if err := q.js.DeleteConsumer(ctx, c.stream, c.name); err != nil {
			t.Fatal(err)
		}
	}
	for _, c := range []struct {
		what string
		errc chan error
		want string
	}{
		{"Results", results, "queue: consumer aggregator-results is gone from the server"},
		{"Work", work, "queue: task consumer is gone from the server"},
	} {
		select {
		case err := <-c.errc:
			if err == nil || !strings.HasPrefix(err.Error(), c.want) {
				t.Errorf("%s returned %v, want %q…", c.what, err, c.want)
			}
		case <-time.After(patience): // a liveness guard
			t.Errorf("%s still runs after its consumer was deleted", c.what)
		}
	}
}

// TestPullOnConsumerDeletedBeforehand: a consumer deleted before a pull is
// made (not while one waits) answers the pull with "no responders", not
// "consumer deleted"; consumerGone asks the server and sees it is gone, so
// the loops stop instead of pulling nothing for ever. A consumer that is
// there is not taken for gone on the same error.
func TestPullOnConsumerDeletedBeforehand(t *testing.T) {
	_, q := newQueue(t, Policy{})
	ctx := context.Background()
	mk := func(name string) jetstream.Consumer {
		c, err := q.js.CreateOrUpdateConsumer(ctx, StreamResults, jetstream.ConsumerConfig{Durable: name,
			FilterSubject: subjectResult + name + ".>", AckPolicy: jetstream.AckExplicitPolicy})
		if err != nil {
			t.Fatal(err)
		}
		return c
	}
	gone, kept := mk("deleted-beforehand"), mk("still-there")
	if err := q.js.DeleteConsumer(ctx, StreamResults, "deleted-beforehand"); err != nil {
		t.Fatal(err)
	}
	b, err := gone.Fetch(1, jetstream.FetchMaxWait(time.Second))
	if err == nil {
		for range b.Messages() {
		}
		err = b.Error()
	}
	if err == nil {
		t.Fatal("a pull on a deleted consumer reported no error")
	}
	if isConsumerGone(err) {
		t.Logf("the client now names the deletion itself: %v", err)
	}
	if !consumerGone(err, gone) {
		t.Errorf("pull on a deleted consumer failed with %q and was not taken for gone", err)
	}
	if consumerGone(err, kept) {
		t.Errorf("a consumer that is there was taken for gone on %q", err)
	}
}

// TestDeadLettersOfTwoStreamsBothKept: sequence numbers are per stream, so a
// poisoned result and a task of the same sequence are two dead letters, not
// one record dropped as a duplicate.
func TestDeadLettersOfTwoStreamsBothKept(t *testing.T) {
	_, q := newQueue(t, Policy{})
	ctx := context.Background()
	q.deadLetter(ctx, &pb.DeadLetter{Task: task("c", "0001", 1, pb.Priority_PRIORITY_LIVE), Subject: subjectLive + "c", StreamSeq: 7, Reason: "task"})
	q.deadLetter(ctx, &pb.DeadLetter{Subject: subjectResult + "c", StreamSeq: 7, Reason: "poison: result"})
	q.deadLetter(ctx, &pb.DeadLetter{Subject: subjectReady + "c", StreamSeq: 7, Reason: "poison: ready"})
	dead, err := q.DeadLetters(ctx, "")
	if err != nil {
		t.Fatal(err)
	}
	if len(dead) != 3 {
		t.Fatalf("%d dead letters recorded, want 3 (one per stream)", len(dead))
	}
}
