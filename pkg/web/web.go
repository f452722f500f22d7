// Package web serves the live view of a running displacement experiment:
// a JSON API over campaigns, steps, series, results and previews, a
// server-sent-event stream that announces completed steps and experiment
// events, and a page (embedded in the binary, no separate front end) that
// plots the series as they grow.
//
// Every campaign and step name taken from a URL is checked with
// layout.CheckName ([a-z0-9][a-z0-9._-]{0,63}) before the Source sees it,
// so no request can name a store key outside its campaign; a bad name is
// answered 400. Access control, limits and timeouts are in guard.go (Serve,
// Guard).
package web

import (
	"context"
	"crypto/rand"
	"embed"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"sluice/pkg/layout"
)

//go:embed static
var static embed.FS

// CampaignInfo summarises one campaign for the campaign list.
type CampaignInfo struct {
	Name       string  `json:"name"`
	Steps      int     `json:"steps"`
	Done       int     `json:"done"`
	Failed     int     `json:"failed"`
	LatestStep string  `json:"latest_step,omitempty"`
	LatestTime float64 `json:"latest_time_s"`
	ParamHash  string  `json:"param_hash,omitempty"`
	// Rejected counts the scans given up (see RejectedScan).
	Rejected int `json:"rejected"`
}

// StepStatus is the state of one step.
type StepStatus struct {
	Step       string  `json:"step"`
	TimeS      float64 `json:"time_s"`
	Status     string  `json:"status"` // ingested, processing, done, failed
	Reason     string  `json:"reason,omitempty"`
	TilesDone  int     `json:"tiles_done"`
	TilesTotal int     `json:"tiles_total"`
	LatencyS   float64 `json:"latency_s,omitempty"`
}

// Health is the pipeline health shown on the page.
type Health struct {
	QueueLive    int64   `json:"queue_live"`
	QueueBatch   int64   `json:"queue_batch"`
	TilesPerS    float64 `json:"tiles_per_s"`
	StepLatencyS float64 `json:"step_latency_s"` // latest step
	// Workers counts the worker processes present: those whose last beat
	// (queue.SubjectWorkerBeat) came within three of their beat intervals
	// and that have not said they stop. WorkerSlots adds up their
	// concurrency (tiles handled at once); WorkerList describes each.
	Workers     int          `json:"workers"`
	WorkerSlots int          `json:"worker_slots"`
	WorkerList  []WorkerInfo `json:"worker_list"`
	Uptime      float64      `json:"uptime_s"`
	Version     string       `json:"version"`
}

// WorkerInfo is one worker present, as its last beat describes it. Times
// are RFC 3339 in UTC; LastSeen is when the aggregator heard the beat (its
// own clock, so a worker's clock does not matter).
type WorkerInfo struct {
	ID          string   `json:"id"`
	Host        string   `json:"host"`
	PID         int64    `json:"pid"`
	StartedAt   string   `json:"started_at"`
	LastSeen    string   `json:"last_seen"`
	LastSeenAgo float64  `json:"last_seen_s_ago"`
	BeatS       float64  `json:"beat_interval_s"`
	Concurrency int      `json:"concurrency"`
	TilesDone   uint64   `json:"tiles_done"`
	TilesFailed uint64   `json:"tiles_failed"`
	Current     []string `json:"current"` // tasks in hand: campaign/step/tile/param_hash
}

// RejectedScan is a scan the watcher gave up after its attempts (a
// truncated file, a wrong shape, a missing header …), with the reason.
type RejectedScan struct {
	Step     string `json:"step"`
	File     string `json:"file"`
	Reason   string `json:"reason"`
	Attempts int    `json:"attempts"`
	At       string `json:"at"`
}

// Source is what the aggregator provides to the web view. Errors wrapping
// fs.ErrNotExist become 404.
type Source interface {
	Campaigns(ctx context.Context) ([]CampaignInfo, error)
	Steps(ctx context.Context, campaign string) ([]StepStatus, error)
	// Rejected lists the campaign's scans given up, in step order.
	Rejected(ctx context.Context, campaign string) ([]RejectedScan, error)
	SeriesJSON(ctx context.Context, campaign string) ([]byte, error)
	SeriesCSV(ctx context.Context, campaign string) ([]byte, error)
	Result(ctx context.Context, campaign, step string) ([]byte, error)
	Events(ctx context.Context, campaign string) ([]byte, error)
	// Accuracy returns the accuracy estimate of the campaign's current run
	// (`sluice accuracy`, a JSON object), or the JSON null when none was
	// made.
	Accuracy(ctx context.Context, campaign string) ([]byte, error)
	// Preview renders the three orthogonal slices through point (z, y, x);
	// a negative coordinate means the centre.
	Preview(ctx context.Context, campaign, step string, point [3]int) ([]byte, error)
	Health(ctx context.Context) Health
}

// Hub fans messages out to server-sent-event clients.
type Hub struct {
	mu      sync.Mutex
	clients map[chan []byte]struct{}
}

// NewHub returns an empty hub.
func NewHub() *Hub { return &Hub{clients: map[chan []byte]struct{}{}} }

// Publish sends an event of the given kind with a JSON body to every client;
// slow clients miss messages rather than block the aggregator.
func (h *Hub) Publish(kind string, v any) {
	b, err := json.Marshal(v)
	if err != nil {
		return
	}
	msg := []byte(fmt.Sprintf("event: %s\ndata: %s\n\n", kind, b))
	h.mu.Lock()
	defer h.mu.Unlock()
	for c := range h.clients {
		select {
		case c <- msg:
		default:
		}
	}
}

func (h *Hub) subscribe() chan []byte {
	c := make(chan []byte, 64)
	h.mu.Lock()
	h.clients[c] = struct{}{}
	h.mu.Unlock()
	return c
}

func (h *Hub) unsubscribe(c chan []byte) {
	h.mu.Lock()
	delete(h.clients, c)
	h.mu.Unlock()
}

// Handler returns the routes of the live view on a new mux; extra routes
// (metrics, health) can be added by the caller.
func Handler(src Source, hub *Hub, log *slog.Logger) *http.ServeMux {
	if log == nil {
		log = slog.Default()
	}
	rp := replier{log: log}
	mux := http.NewServeMux()
	sub, _ := fs.Sub(static, "static")
	files := http.FileServerFS(sub)
	mux.Handle("GET /", files)
	mux.HandleFunc("GET /api/campaigns", func(w http.ResponseWriter, r *http.Request) {
		v, err := src.Campaigns(r.Context())
		rp.json(w, r, v, err)
	})
	mux.HandleFunc("GET /api/campaigns/{c}/steps", checked(func(w http.ResponseWriter, r *http.Request) {
		v, err := src.Steps(r.Context(), r.PathValue("c"))
		rp.json(w, r, v, err)
	}))
	mux.HandleFunc("GET /api/campaigns/{c}/rejected", checked(func(w http.ResponseWriter, r *http.Request) {
		v, err := src.Rejected(r.Context(), r.PathValue("c"))
		rp.json(w, r, v, err)
	}))
	mux.HandleFunc("GET /api/campaigns/{c}/series.json", checked(func(w http.ResponseWriter, r *http.Request) {
		b, err := src.SeriesJSON(r.Context(), r.PathValue("c"))
		rp.bytes(w, r, "application/json", b, err)
	}))
	mux.HandleFunc("GET /api/campaigns/{c}/series.csv", checked(func(w http.ResponseWriter, r *http.Request) {
		b, err := src.SeriesCSV(r.Context(), r.PathValue("c"))
		if err == nil {
			w.Header().Set("Content-Disposition", fmt.Sprintf("attachment; filename=%q", r.PathValue("c")+"-series.csv"))
		}
		rp.bytes(w, r, "text/csv; charset=utf-8", b, err)
	}))
	mux.HandleFunc("GET /api/campaigns/{c}/events", checked(func(w http.ResponseWriter, r *http.Request) {
		b, err := src.Events(r.Context(), r.PathValue("c"))
		rp.bytes(w, r, "application/json", b, err)
	}))
	mux.HandleFunc("GET /api/campaigns/{c}/accuracy", checked(func(w http.ResponseWriter, r *http.Request) {
		b, err := src.Accuracy(r.Context(), r.PathValue("c"))
		rp.bytes(w, r, "application/json", b, err)
	}))
	mux.HandleFunc("GET /api/campaigns/{c}/steps/{s}/result", checked(func(w http.ResponseWriter, r *http.Request) {
		b, err := src.Result(r.Context(), r.PathValue("c"), r.PathValue("s"))
		rp.bytes(w, r, "application/json", b, err)
	}))
	mux.HandleFunc("GET /api/campaigns/{c}/steps/{s}/preview.png", checked(func(w http.ResponseWriter, r *http.Request) {
		p := [3]int{-1, -1, -1}
		for i, k := range []string{"z", "y", "x"} {
			if s := r.URL.Query().Get(k); s != "" {
				n, err := strconv.Atoi(s)
				if err != nil || n < 0 {
					http.Error(w, "bad "+k, http.StatusBadRequest)
					return
				}
				p[i] = n
			}
		}
		b, err := src.Preview(r.Context(), r.PathValue("c"), r.PathValue("s"), p)
		if err == nil {
			w.Header().Set("Cache-Control", "max-age=60")
		}
		rp.bytes(w, r, "image/png", b, err)
	}))
	mux.HandleFunc("GET /api/health", func(w http.ResponseWriter, r *http.Request) {
		rp.json(w, r, src.Health(r.Context()), nil)
	})
	mux.HandleFunc("GET /api/stream", func(w http.ResponseWriter, r *http.Request) {
		fl, ok := w.(http.Flusher)
		if !ok {
			http.Error(w, "streaming unsupported", http.StatusInternalServerError)
			return
		}
		// The stream outlives the server's WriteTimeout on purpose (the
		// read deadline is already cleared by net/http once the request
		// is read).
		http.NewResponseController(w).SetWriteDeadline(time.Time{})
		w.Header().Set("Content-Type", "text/event-stream")
		w.Header().Set("Cache-Control", "no-cache")
		c := hub.subscribe()
		defer hub.unsubscribe(c)
		fmt.Fprintf(w, "event: hello\ndata: {}\n\n")
		fl.Flush()
		tick := time.NewTicker(15 * time.Second)
		defer tick.Stop()
		for {
			select {
			case <-r.Context().Done():
				return
			case msg := <-c:
				w.Write(msg)
				fl.Flush()
			case <-tick.C:
				fmt.Fprintf(w, ": keep-alive\n\n")
				fl.Flush()
			}
		}
	})
	return mux
}

// checked answers 400 unless the path values {c} (campaign) and {s} (step),
// where the route has them, are valid names; the wrapped handler runs only
// with valid ones.
func checked(h http.HandlerFunc) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		for _, p := range [...]struct{ key, what string }{{"c", "campaign"}, {"s", "step"}} {
			v := r.PathValue(p.key)
			if v == "" && !strings.Contains(r.Pattern, "{"+p.key+"}") {
				continue
			}
			if err := layout.CheckName(p.what, v); err != nil {
				http.Error(w, oneLine(err), http.StatusBadRequest)
				return
			}
		}
		h(w, r)
	}
}

// ErrBadRequest marks errors caused by the request (bad names, points).
var ErrBadRequest = errors.New("bad request")

// replier answers API requests. A failed request is answered with what the
// client needs to know and nothing more: 400 with the reason (it is about
// the request), 404 "not found", and for anything else 500 with a generic
// message and a request id; the error itself, which may hold store paths,
// endpoints or other internals, goes only to the server log under that id.
type replier struct{ log *slog.Logger }

func (rp replier) fail(w http.ResponseWriter, r *http.Request, err error) {
	switch {
	case errors.Is(err, ErrBadRequest):
		http.Error(w, oneLine(err), http.StatusBadRequest)
	case errors.Is(err, fs.ErrNotExist):
		http.Error(w, "not found", http.StatusNotFound)
	default:
		id := requestID()
		rp.log.Error("web: request failed", "request_id", id, "method", r.Method, "path", r.URL.Path, "err", oneLine(err))
		w.Header().Set("X-Request-Id", id)
		http.Error(w, "internal error (request id "+id+"; the server log has the detail)", http.StatusInternalServerError)
	}
}

func (rp replier) json(w http.ResponseWriter, r *http.Request, v any, err error) {
	if err != nil {
		rp.fail(w, r, err)
		return
	}
	w.Header().Set("Content-Type", "application/json")
	json.NewEncoder(w).Encode(v)
}

func (rp replier) bytes(w http.ResponseWriter, r *http.Request, ctype string, b []byte, err error) {
	if err != nil {
		rp.fail(w, r, err)
		return
	}
	w.Header().Set("Content-Type", ctype)
	w.Write(b)
}

// requestID returns 16 random hex digits that tie an answer to its log line.
func requestID() string {
	var b [8]byte
	rand.Read(b[:])
	return hex.EncodeToString(b[:])
}

func oneLine(err error) string { return strings.ReplaceAll(err.Error(), "\n", " ") }
