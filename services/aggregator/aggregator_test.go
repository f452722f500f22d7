package aggregator

import (
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
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
