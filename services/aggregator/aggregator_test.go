package aggregator

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/store"
	"sluice/pkg/web"
	"sluice/proto/sluicepb"
)

const testHash = "0123456789abcdef"

func quiet() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

// putCampaign writes campaign.json of a campaign whose current run is hash.
func putCampaign(t *testing.T, st store.Store, name, hash string) {
	t.Helper()
	c, err := layout.NewCampaign(name)
	if err != nil {
		t.Fatal(err)
	}
	r := campaign.Record{Name: name, Current: hash, Config: campaign.Default(), Runs: []string{hash}}
	if err := campaign.PutJSON(context.Background(), st, c.Config(), r); err != nil {
		t.Fatal(err)
	}
}

// stallingStore is a local store whose Get of one key waits until released
// (or its context ends), as a Get does while store.Retrying rides out an
// object-store outage. It tests the aggregator's locking, not the store.
type stallingStore struct {
	store.Store
	key     string
	entered chan struct{} // closed when the Get of key has begun
	release chan struct{} // closed to let it proceed
	once    sync.Once
}

func (s *stallingStore) Get(ctx context.Context, key string) ([]byte, error) {
	if key == s.key {
		s.once.Do(func() { close(s.entered) })
		select {
		case <-s.release:
		case <-ctx.Done():
			return nil, ctx.Err()
		}
	}
	return s.Store.Get(ctx, key)
}

// TestStalledStoreDoesNotFreezeAPI: while the aggregator reads the
// campaign.json of a campaign it has not seen before and the store does not
// answer, the web API (which takes the aggregator's mutex) still answers.
// Before campaign.json was read outside the mutex, every API call waited for
// the store (up to the retry budget, a minute).
func TestStalledStoreDoesNotFreezeAPI(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	local, err := store.NewLocal(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	putCampaign(t, local, "known", testHash)
	newc, _ := layout.NewCampaign("arriving")
	st := &stallingStore{Store: local, key: newc.Config(), entered: make(chan struct{}), release: make(chan struct{})}
	a := &Aggregator{Store: st, Log: quiet()}
	if err := a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	putCampaign(t, local, "arriving", testHash) // created after start-up

	ready := make(chan error, 1)
	go func() {
		ready <- a.StepReady(ctx, &sluicepb.StepReady{Campaign: "arriving", Step: "0001", ParamHash: testHash, TileCount: 8})
	}()
	select {
	case <-st.entered:
	case err := <-ready:
		t.Fatalf("StepReady returned (%v) without reading campaign.json", err)
	}

	srv := httptest.NewServer(web.Handler(a, web.NewHub(), quiet()))
	defer srv.Close()
	defer cancel() // first: a handler stuck behind the stalled Get must end before srv.Close
	// The timeout is a liveness guard: a frozen API never answers at all.
	client := &http.Client{Timeout: 30 * time.Second}
	for _, path := range []string{"/api/campaigns", "/api/campaigns/known/steps", "/api/health"} {
		resp, err := client.Get(srv.URL + path)
		if err != nil {
			t.Fatalf("GET %s while the store stalls: %v", path, err)
		}
		body, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != http.StatusOK {
			t.Fatalf("GET %s: %s: %s", path, resp.Status, body)
		}
	}

	close(st.release)
	if err := <-ready; err != nil {
		t.Fatalf("StepReady after the store answered: %v", err)
	}
	got, err := a.Campaigns(ctx)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := json.Marshal(got)
	if len(got) != 2 || got[0].Name != "arriving" || got[0].Steps != 1 || got[1].Name != "known" {
		t.Fatalf("campaigns after the stall: %s; want arriving (1 step) and known", b)
	}
}

// listLog is a local store that records what it is asked to list and every
// key and directory name its listings return.
type listLog struct {
	store.Store
	mu     sync.Mutex
	calls  []string // "list <prefix>" or "dirs <prefix>"
	listed []string // keys returned by List
	dirs   int      // names returned by Dirs
}

func (l *listLog) List(ctx context.Context, prefix string) ([]string, error) {
	keys, err := l.Store.List(ctx, prefix)
	l.mu.Lock()
	l.calls = append(l.calls, "list "+prefix)
	l.listed = append(l.listed, keys...)
	l.mu.Unlock()
	return keys, err
}

func (l *listLog) Dirs(ctx context.Context, prefix string) ([]string, error) {
	names, err := l.Store.Dirs(ctx, prefix)
	l.mu.Lock()
	l.calls = append(l.calls, "dirs "+prefix)
	l.dirs += len(names)
	l.mu.Unlock()
	return names, err
}

// TestStartListsCurrentRunOnly: a campaign whose steps hold Zarr chunks and
// tile results under the current and an older parameter hash. Start reports
// each step's tiles of the current hash only, and lists the campaigns, the
// steps and the current hash's tile results — no chunk, no tile of the
// other hash. (Start once listed every key under campaigns/ and counted
// the tile results of every hash.)
func TestStartListsCurrentRunOnly(t *testing.T) {
	ctx := context.Background()
	local, err := store.NewLocal(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	const old = "fedcba9876543210"
	putCampaign(t, local, "c", testHash)
	put := func(key string, v any) {
		t.Helper()
		if err := campaign.PutJSON(ctx, local, key, v); err != nil {
			t.Fatal(err)
		}
	}
	chunks := func(step layout.Step) {
		for _, arr := range []string{step.Volume(), step.Labels(), campaign.RunLabelsKey(step, testHash)} {
			put(arr+".zarray", map[string]int{"zarr_format": 2})
			for i := 0; i < 27; i++ {
				if err := local.Put(ctx, fmt.Sprintf("%s%d.%d.%d", arr, i/9, i/3%3, i%3), []byte{byte(i)}); err != nil {
					t.Fatal(err)
				}
			}
		}
	}
	tiles := func(step layout.Step, hash string, n int) {
		for i := 0; i < n; i++ {
			k, err := step.TileResult(i, hash)
			if err != nil {
				t.Fatal(err)
			}
			put(k, map[string]int{"tile": i})
		}
	}
	// 0001: ingested, 2 of 8 tiles under the current hash, all 8 under the old one.
	s1, _ := layout.NewStep("c", "0001")
	put(s1.Manifest(), map[string]string{"step": "0001"})
	put(campaign.PlanKey(s1, testHash), campaign.Plan{Tiles: 8})
	put(campaign.PlanKey(s1, old), campaign.Plan{Tiles: 8})
	tiles(s1, testHash, 2)
	tiles(s1, old, 8)
	chunks(s1)
	// 0002: done under the current hash (its run result exists).
	s2, _ := layout.NewStep("c", "0002")
	put(s2.Manifest(), map[string]string{"step": "0002"})
	put(campaign.PlanKey(s2, testHash), campaign.Plan{Tiles: 8})
	tiles(s2, testHash, 8)
	tiles(s2, old, 3)
	put(campaign.RunResultKey(s2, testHash), map[string]float64{"porosity": 0.3})
	chunks(s2)
	// 0003: ingested, no tile result under the current hash, 5 under the old one.
	s3, _ := layout.NewStep("c", "0003")
	put(s3.Manifest(), map[string]string{"step": "0003"})
	tiles(s3, old, 5)
	chunks(s3)

	st := &listLog{Store: local}
	a := &Aggregator{Store: st, Log: quiet()}
	if err := a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	steps, err := a.Steps(ctx, "c")
	if err != nil {
		t.Fatal(err)
	}
	type view struct {
		status      string
		done, total int
	}
	got := map[string]view{}
	for _, s := range steps {
		got[s.Step] = view{s.Status, s.TilesDone, s.TilesTotal}
	}
	want := map[string]view{"0001": {"processing", 2, 8}, "0002": {"done", 8, 8}, "0003": {"ingested", 0, 0}}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("steps after start-up = %v, want %v", got, want)
	}

	// What was listed: the campaigns, the steps, and the current hash's
	// tile results of the steps not done.
	wantCalls := []string{"dirs campaigns/", "dirs campaigns/c/steps/",
		"list campaigns/c/steps/0001/tiles/" + testHash + "/", "list campaigns/c/steps/0003/tiles/" + testHash + "/"}
	sort.Strings(st.calls)
	if fmt.Sprint(st.calls) != fmt.Sprint(wantCalls) {
		t.Errorf("store listings = %q, want %q", st.calls, wantCalls)
	}
	if len(st.listed) != 2 || st.dirs != 4 {
		t.Errorf("listings returned %d keys and %d names, want 2 tile results and 4 names (c; 0001–0003)", len(st.listed), st.dirs)
	}
	var stray []string
	for _, k := range st.listed {
		if strings.Contains(k, ".zarr/") || strings.Contains(k, "/"+old+"/") {
			stray = append(stray, k)
		}
	}
	if len(stray) > 0 {
		t.Errorf("start-up listed %d chunks or tiles of the old hash, first %s", len(stray), stray[0])
	}
}
