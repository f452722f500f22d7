package aggregator

import (
	"bytes"
	"context"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/store"
	"sluice/pkg/web"
)

// An API request that fails inside the server is answered 500 with a
// generic message and a request id; the error, which names the store's
// local directory, is logged under that id and never sent to the client.
// A missing object is a plain 404, also without the path.
func TestAPIErrorsKeepInternalsInTheLog(t *testing.T) {
	ctx := context.Background()
	root := t.TempDir()
	st, err := store.Open(ctx, root, store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	c, _ := layout.NewCampaign("c")
	if err := campaign.PutJSON(ctx, st, c.Config(), campaign.Record{Name: "c", Current: fuzzHash, Config: campaign.Default(), Runs: []string{fuzzHash}}); err != nil {
		t.Fatal(err)
	}
	// A directory where a step's result.json should be: the local store
	// fails to read it with an error naming the absolute path.
	s1, _ := c.Step("s1")
	if err := os.MkdirAll(filepath.Join(root, filepath.FromSlash(s1.Result())), 0o755); err != nil {
		t.Fatal(err)
	}
	var logged bytes.Buffer
	log := slog.New(slog.NewTextHandler(&logged, nil))
	a := &Aggregator{Store: st, Log: log}
	if err := a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(web.Handler(a, web.NewHub(), log))
	defer srv.Close()
	get := func(path string) (int, string, http.Header) {
		resp, err := http.Get(srv.URL + path)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, string(b), resp.Header
	}

	code, body, h := get("/api/campaigns/c/steps/s1/result")
	if code != http.StatusInternalServerError {
		t.Fatalf("result over a directory: %d %q, want 500", code, body)
	}
	if strings.Contains(body, root) || strings.Contains(body, "store:") {
		t.Errorf("500 body leaks the error: %q", body)
	}
	m := regexp.MustCompile(`request id ([0-9a-f]{16})`).FindStringSubmatch(body)
	if m == nil || h.Get("X-Request-Id") != m[1] {
		t.Fatalf("500 body %q, X-Request-Id %q: want the same request id in both", body, h.Get("X-Request-Id"))
	}
	var line string
	for _, l := range strings.Split(logged.String(), "\n") {
		if strings.Contains(l, "request_id="+m[1]) {
			line = l
		}
	}
	if !strings.Contains(line, root) || !strings.Contains(line, "is a directory") {
		t.Errorf("no log line with request id %s and the store error; log:\n%s", m[1], logged.String())
	}

	code, body, _ = get("/api/campaigns/c/steps/s2/result")
	if code != http.StatusNotFound || strings.Contains(body, root) {
		t.Errorf("missing result: %d %q, want 404 without the store path", code, body)
	}
	code, body, _ = get("/api/campaigns/C!/steps")
	if code != http.StatusBadRequest {
		t.Errorf("bad campaign name: %d %q, want 400", code, body)
	}
}

// TestAccuracyAPI: /api/campaigns/{c}/accuracy serves the accuracy
// estimate stored under the campaign's current run (campaign.AccuracyKey),
// null while there is none (and for an estimate of another run only), 404
// for an unknown campaign.
func TestAccuracyAPI(t *testing.T) {
	ctx := context.Background()
	st, err := store.Open(ctx, t.TempDir(), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	c, _ := layout.NewCampaign("c")
	if err := campaign.PutJSON(ctx, st, c.Config(), campaign.Record{Name: "c", Current: fuzzHash, Config: campaign.Default(), Runs: []string{fuzzHash}}); err != nil {
		t.Fatal(err)
	}
	a := &Aggregator{Store: st, Log: slog.New(slog.NewTextHandler(io.Discard, nil))}
	if err := a.Start(ctx); err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(web.Handler(a, web.NewHub(), a.Log))
	defer srv.Close()
	get := func(path string) (int, string) {
		resp, err := http.Get(srv.URL + path)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(resp.Body)
		return resp.StatusCode, string(b)
	}
	if code, body := get("/api/campaigns/c/accuracy"); code != http.StatusOK || body != "null" {
		t.Errorf("no estimate: %d %q, want 200 null", code, body)
	}
	if err := st.Put(ctx, campaign.AccuracyKey(c, "fedcba9876543210"), []byte(`{"param_hash":"fedcba9876543210"}`)); err != nil {
		t.Fatal(err)
	}
	if code, body := get("/api/campaigns/c/accuracy"); code != http.StatusOK || body != "null" {
		t.Errorf("estimate of another run only: %d %q, want 200 null", code, body)
	}
	want := `{"param_hash":"` + fuzzHash + `"}`
	if err := st.Put(ctx, campaign.AccuracyKey(c, fuzzHash), []byte(want)); err != nil {
		t.Fatal(err)
	}
	if code, body := get("/api/campaigns/c/accuracy"); code != http.StatusOK || body != want {
		t.Errorf("estimate of the current run: %d %q, want 200 %s", code, body, want)
	}
	if code, _ := get("/api/campaigns/nope/accuracy"); code != http.StatusNotFound {
		t.Errorf("unknown campaign: %d, want 404", code)
	}
}
