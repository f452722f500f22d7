package aggregator

import (
	"context"
	"encoding/json"
	"errors"
	"io"
	"io/fs"
	"log/slog"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/nats-io/nats.go/jetstream"
	"google.golang.org/protobuf/proto"

	"sluice/pkg/campaign"
	"sluice/pkg/events"
	"sluice/pkg/layout"
	"sluice/pkg/measure"
	"sluice/pkg/queue"
	"sluice/pkg/store"
	"sluice/pkg/volume"
	"sluice/proto/sluicepb"
)

// These tests run the aggregator over a local store and publish its events
// through a real JetStream server (embedded, port -1); faults are a missing
// events stream and store writes made to fail, as an outage would.

// faultyStore is a local store whose Put of a given key fails a given
// number of times.
type faultyStore struct {
	store.Store
	mu   sync.Mutex
	fail map[string]int
}

var errInjected = errors.New("injected store failure")

func (f *faultyStore) Put(ctx context.Context, key string, data []byte) error {
	f.mu.Lock()
	n := f.fail[key]
	if n > 0 {
		f.fail[key] = n - 1
	}
	f.mu.Unlock()
	if n > 0 {
		return errInjected
	}
	return f.Store.Put(ctx, key, data)
}

type eventsEnv struct {
	st   *faultyStore
	srv  *queue.Server
	q    *queue.Queue
	a    *Aggregator
	hash string
	c    layout.Campaign
}

// newEventsEnv stores campaign "c" with two one-tile steps measured from
// 16³ label volumes: in s1 the nonwetting phase is a blob touching neither
// end of the flow axis (z), in s2 a column from inlet to outlet — so s2 is
// the breakthrough (the definition in package events).
func newEventsEnv(t *testing.T) *eventsEnv {
	t.Helper()
	ctx := context.Background()
	loc, err := store.Open(ctx, t.TempDir(), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	e := &eventsEnv{st: &faultyStore{Store: loc, fail: map[string]int{}}}
	e.c, _ = layout.NewCampaign("c")
	cfg := campaign.Default()
	cfg.Tile = 16
	cfg.Measure.SkipCurvature, cfg.Measure.SkipContact = true, true
	e.hash = cfg.Hash()
	if err := campaign.PutJSON(ctx, loc, e.c.Config(), campaign.Record{Name: "c", Current: e.hash, Config: cfg, Runs: []string{e.hash}}); err != nil {
		t.Fatal(err)
	}
	mo, err := cfg.MeasureOptions()
	if err != nil {
		t.Fatal(err)
	}
	for i, z := range [][2]int{{4, 12}, {0, 16}} {
		name := []string{"s1", "s2"}[i]
		step, _ := e.c.Step(name)
		lab := volume.NewShape[uint8](16, 16, 16, 1e-6)
		for zz := 0; zz < 16; zz++ {
			for y := 0; y < 16; y++ {
				for x := 0; x < 16; x++ {
					v := uint8(1) // wetting
					switch {
					case x < 2:
						v = 0 // solid wall
					case zz >= z[0] && zz < z[1] && y >= 6 && y < 10 && x >= 6 && x < 10:
						v = 2 // nonwetting
					}
					lab.Set(zz, y, x, v)
				}
			}
		}
		whole := volume.BoxOf(16, 16, 16)
		part, err := measure.MeasureTile(lab, whole, whole, mo)
		if err != nil {
			t.Fatal(err)
		}
		rk, _ := step.TileResult(0, e.hash)
		man := campaign.Manifest{Campaign: "c", Step: name, Shape: [3]int{16, 16, 16}, DType: "uint8", VoxelSize: 1e-6, TimeS: float64(10 * (i + 1))}
		plan := campaign.Plan{Campaign: "c", Step: name, ParamHash: e.hash, Config: cfg, Tile: 16, Tiles: 1}
		for key, v := range map[string]any{step.Manifest(): man, campaign.PlanKey(step, e.hash): plan, rk: part} {
			if err := campaign.PutJSON(ctx, loc, key, v); err != nil {
				t.Fatal(err)
			}
		}
	}
	e.srv, err = queue.StartServer(queue.ServerConfig{StoreDir: t.TempDir()})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(e.srv.Shutdown)
	e.q = e.openQueue(t)
	e.a = &Aggregator{Store: e.st, Publisher: queuePublisher{e.q}, Log: slog.New(slog.NewTextHandler(io.Discard, nil))}
	if err := e.a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	return e
}

// openQueue opens the queue (creating any missing stream).
func (e *eventsEnv) openQueue(t *testing.T) *queue.Queue {
	t.Helper()
	q, err := queue.Open(context.Background(), queue.Config{Server: e.srv, Role: queue.PolicyBystander, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { q.Close() })
	return q
}

// queuePublisher is the event publisher sluice's aggregator process uses.
type queuePublisher struct{ q *queue.Queue }

func (p queuePublisher) PublishEvent(ctx context.Context, id string, e *sluicepb.StepEvent) error {
	_, err := p.q.PublishEvent(ctx, id, e)
	return err
}

// done delivers the result of the one tile of step.
func (e *eventsEnv) done(step string) error {
	s, _ := e.c.Step(step)
	rk, _ := s.TileResult(0, e.hash)
	return e.a.TileDone(context.Background(), &sluicepb.TileDone{Campaign: "c", Step: step, Tile: 0, TileCount: 1, ParamHash: e.hash, ResultKey: rk})
}

// stored lists the events stored in the events stream as "KIND step".
func (e *eventsEnv) stored(t *testing.T) []string {
	t.Helper()
	ctx := context.Background()
	js, err := jetstream.New(e.q.Conn())
	if err != nil {
		t.Fatal(err)
	}
	cons, err := js.OrderedConsumer(ctx, queue.StreamEvents, jetstream.OrderedConsumerConfig{})
	if err != nil {
		t.Fatal(err)
	}
	info, err := cons.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	var out []string
	if info.NumPending == 0 {
		return out
	}
	b, err := cons.Fetch(int(info.NumPending), jetstream.FetchMaxWait(10*time.Second))
	if err != nil {
		t.Fatal(err)
	}
	for m := range b.Messages() {
		var ev sluicepb.StepEvent
		if err := proto.Unmarshal(m.Data(), &ev); err != nil {
			t.Fatal(err)
		}
		out = append(out, strings.TrimPrefix(ev.Kind.String(), "KIND_")+" "+ev.Step)
	}
	if uint64(len(out)) != info.NumPending {
		t.Fatalf("read %d of %d stored events", len(out), info.NumPending)
	}
	return out
}

// recorded returns the events recorded in events.json ("KIND step").
func (e *eventsEnv) recorded(t *testing.T) []string {
	t.Helper()
	b, err := e.st.Get(context.Background(), campaign.EventsKey(e.c))
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		t.Fatal(err)
	}
	var evs []events.Event
	if err := json.Unmarshal(b, &evs); err != nil {
		t.Fatal(err)
	}
	var out []string
	for _, ev := range evs {
		out = append(out, strings.ToUpper(string(ev.Kind))+" "+ev.Step)
	}
	return out
}

func (e *eventsEnv) completed(t *testing.T, step string) bool {
	t.Helper()
	s, _ := e.c.Step(step)
	_, err := e.st.Get(context.Background(), campaign.RunResultKey(s, e.hash))
	return err == nil
}

func equal(a []string, b ...string) bool { return strings.Join(a, ",") == strings.Join(b, ",") }

// A publish that fails (the events stream is gone) fails the step's
// completion, so the result is redelivered; once the stream is back the
// completion and the breakthrough are stored exactly once, and a further
// redelivery publishes nothing.
func TestEventsSurviveAFailedPublish(t *testing.T) {
	e := newEventsEnv(t)
	if err := e.done("s1"); err != nil {
		t.Fatal(err)
	}
	if got := e.stored(t); !equal(got, "COMPLETED s1") {
		t.Fatalf("after s1: stored %q", got)
	}
	js, _ := jetstream.New(e.q.Conn())
	if err := js.DeleteStream(context.Background(), queue.StreamEvents); err != nil {
		t.Fatal(err)
	}
	if err := e.done("s2"); err == nil {
		t.Fatal("s2 completed although its events could not be published")
	}
	if e.completed(t, "s2") || len(e.recorded(t)) != 0 {
		t.Fatalf("after the failed publish: run result written %v, events recorded %q", e.completed(t, "s2"), e.recorded(t))
	}
	e.openQueue(t) // the stream is back
	if err := e.done("s2"); err != nil {
		t.Fatalf("redelivered s2: %v", err)
	}
	if got := e.stored(t); !equal(got, "COMPLETED s2", "BREAKTHROUGH s2") {
		t.Fatalf("stored after the redelivery: %q, want the completion and the breakthrough once", got)
	}
	if got := e.recorded(t); !equal(got, "BREAKTHROUGH s2") || !e.completed(t, "s2") {
		t.Fatalf("recorded %q, run result %v", got, e.completed(t, "s2"))
	}
	if err := e.done("s2"); err != nil {
		t.Fatal(err)
	}
	if got := e.stored(t); len(got) != 2 {
		t.Fatalf("a further redelivery stored %q", got)
	}
}

// A step whose events were published but not recorded (events.json could
// not be written) is completed again on redelivery: the completion and the
// breakthrough are published again with the same message ids and stored
// once.
func TestEventsPublishedAgainAreStoredOnce(t *testing.T) {
	e := newEventsEnv(t)
	if err := e.done("s1"); err != nil {
		t.Fatal(err)
	}
	e.st.fail[campaign.EventsKey(e.c)] = 1
	if err := e.done("s2"); !errors.Is(err, errInjected) {
		t.Fatalf("s2 with events.json unwritable: %v", err)
	}
	if got := e.stored(t); !equal(got, "COMPLETED s1", "COMPLETED s2", "BREAKTHROUGH s2") || e.completed(t, "s2") {
		t.Fatalf("after the failed record: stored %q, run result %v", got, e.completed(t, "s2"))
	}
	if err := e.done("s2"); err != nil {
		t.Fatalf("redelivered s2: %v", err)
	}
	if got := e.stored(t); !equal(got, "COMPLETED s1", "COMPLETED s2", "BREAKTHROUGH s2") {
		t.Fatalf("stored after the redelivery: %q, want each event once", got)
	}
	if got := e.recorded(t); !equal(got, "BREAKTHROUGH s2") {
		t.Fatalf("recorded %q", got)
	}
}

// A corrupt events.json stops the step's completion with one line naming
// the file, before anything is published or overwritten; once the file is
// repaired the step completes and its events go out once.
func TestCorruptEventsRecordIsAnError(t *testing.T) {
	e := newEventsEnv(t)
	ctx := context.Background()
	if err := e.done("s1"); err != nil {
		t.Fatal(err)
	}
	key := campaign.EventsKey(e.c)
	corrupt := []byte(`[{"kind": "breakthrough", "step": "s0"`)
	if err := e.st.Put(ctx, key, corrupt); err != nil {
		t.Fatal(err)
	}
	err := e.done("s2")
	if err == nil || !strings.Contains(err.Error(), key) || strings.Contains(err.Error(), "\n") {
		t.Fatalf("s2 over a corrupt %s: %v; want one line naming the file", key, err)
	}
	if b, _ := e.st.Get(ctx, key); string(b) != string(corrupt) {
		t.Errorf("%s was overwritten: %q", key, b)
	}
	if got := e.stored(t); !equal(got, "COMPLETED s1") || e.completed(t, "s2") {
		t.Fatalf("over a corrupt record: stored %q, run result %v", got, e.completed(t, "s2"))
	}
	if err := e.st.Put(ctx, key, []byte("[]")); err != nil {
		t.Fatal(err)
	}
	if err := e.done("s2"); err != nil {
		t.Fatalf("after the repair: %v", err)
	}
	if got := e.stored(t); !equal(got, "COMPLETED s1", "COMPLETED s2", "BREAKTHROUGH s2") {
		t.Fatalf("after the repair: stored %q", got)
	}
}
