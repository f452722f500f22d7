// Package integration runs sluice as separate processes against real
// external components: a MinIO server as the object store, a separately
// started nats-server with JetStream, two `sluice worker` processes, one
// `sluice aggregate` and `sluice ingest` per scan, all on loopback; and
// compares the outcome with the all-in-one `sluice run`. faults_test.go
// kills, restarts and starves those processes (SIGKILL, a NATS restart, a
// MinIO outage, a poison tile, a burst) and checks that the series comes
// out as an undisturbed run's.
package integration

import (
	"bufio"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"sluice/internal/testenv"
	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/queue"
	"sluice/pkg/scenario"
	"sluice/pkg/series"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	pb "sluice/proto/sluicepb"
)

const steps = 10

// buildSluice compiles the binary under test once.
func buildSluice(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "sluice")
	cmd := exec.Command("go", "build", "-o", bin, "sluice/services/sluice")
	cmd.Stderr = os.Stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("go build: %v", err)
	}
	return bin
}

// proc is a sluice process whose log is kept for failures.
type proc struct {
	name string
	cmd  *exec.Cmd
	mu   sync.Mutex
	log  strings.Builder
}

func (p *proc) Write(b []byte) (int, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.log.Write(b)
}

func (p *proc) String() string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.log.String()
}

func start(t *testing.T, name, bin string, env []string, args ...string) *proc {
	t.Helper()
	p := &proc{name: name, cmd: exec.Command(bin, args...)}
	p.cmd.Env = append(os.Environ(), env...)
	p.cmd.Stdout, p.cmd.Stderr = p, p
	if err := p.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if p.cmd.ProcessState == nil {
			p.cmd.Process.Signal(syscall.SIGTERM)
			done := make(chan struct{})
			go func() { p.cmd.Wait(); close(done) }()
			select {
			case <-done:
			case <-time.After(20 * time.Second):
				p.cmd.Process.Kill()
				<-done
			}
		}
		if t.Failed() {
			t.Logf("--- %s log ---\n%s", name, tail(p.String(), 40))
		}
	})
	return p
}

func tail(s string, n int) string {
	l := strings.Split(strings.TrimRight(s, "\n"), "\n")
	if len(l) > n {
		l = l[len(l)-n:]
	}
	return strings.Join(l, "\n")
}

// metric reads one sample value from a /metrics endpoint (-1 if absent).
func metric(addr, name string) float64 {
	resp, err := http.Get("http://" + addr + "/metrics")
	if err != nil {
		return -1
	}
	defer resp.Body.Close()
	sc := bufio.NewScanner(resp.Body)
	re := regexp.MustCompile(`^` + regexp.QuoteMeta(name) + `(\{[^}]*\})? ([0-9.e+-]+)$`)
	for sc.Scan() {
		if m := re.FindStringSubmatch(sc.Text()); m != nil {
			v, _ := strconv.ParseFloat(m[2], 64)
			return v
		}
	}
	return -1
}

func waitRows(t *testing.T, st store.Store, c string, n int, limit time.Duration, procs ...*proc) []series.Row {
	t.Helper()
	deadline := time.Now().Add(limit)
	for time.Now().Before(deadline) {
		rows, err := series.Load(context.Background(), st, c)
		if err == nil && len(rows) >= n {
			return rows
		}
		time.Sleep(200 * time.Millisecond)
	}
	t.Fatalf("campaign %s: fewer than %d series rows after %v", c, n, limit)
	return nil
}

// scans renders the campaign's scans into dir as raw files with headers.
func scans(t *testing.T, dir string) ([]string, campaign.Config) {
	t.Helper()
	return renderScans(t, dir, 64, 32, steps)
}

// renderScans renders n scans of a size³ drainage (scenario seed 3) into
// dir as raw files with headers, and returns them with a campaign config of
// tile edge tile and fixed thresholds.
func renderScans(t testing.TB, dir string, size, tile, n int) ([]string, campaign.Config) {
	t.Helper()
	steps := n
	sc := &scenario.Campaign{Shape: [3]int{size, size, size}, Steps: steps, Seed: 3}
	if n < 10 {
		sc.SteadySteps = max(1, n/3) // the default 5 needs a longer campaign
	}
	if err := sc.Prepare(); err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = tile
	cfg.IFT = sc.IFT
	cfg.VoxelSize = "4um"
	lv := forward.Default()
	cfg.Segment.Threshold = "fixed"
	cfg.Segment.Fixed = []float64{(lv.Nonwetting + lv.Wetting) / 2, (lv.Wetting + lv.Solid) / 2}
	cfg.DetectSample = false
	c := float64(size-1) / 2
	cfg.Segment.Sample.Y, cfg.Segment.Sample.X, cfg.Segment.Sample.Radius = c, c, sc.Rock.CoreRadius
	var paths []string
	for i := 0; i < steps; i++ {
		lab, _, ts := sc.Step(i)
		p := forward.Default()
		p.Seed = uint64(i + 1)
		p.Sample = &forward.Cylinder{Y: c, X: c, Radius: sc.Rock.CoreRadius, Wall: 2}
		g, err := forward.Render(lab, p)
		if err != nil {
			t.Fatal(err)
		}
		u := forward.Uint16(g)
		u.VoxelSize = sc.VoxelSize
		path := filepath.Join(dir, fmt.Sprintf("scan-%02d.raw", i))
		if err := volio.WriteRaw(path, u, volio.WriteOptions{TimeS: ts, HasTime: true}); err != nil {
			t.Fatal(err)
		}
		paths = append(paths, path)
	}
	return paths, cfg
}

// TestMultiProcess: MinIO + separate NATS + two workers + one aggregator
// processes; a worker is killed mid-tile; the 10-step campaign completes
// with one row per step, and the rows equal those of the all-in-one run.
func TestMultiProcess(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	bin := buildSluice(t)
	dir := t.TempDir()
	paths, cfg := scans(t, dir)
	cfgPath := filepath.Join(dir, "campaign.json")
	b, _ := json.Marshal(cfg)
	os.WriteFile(cfgPath, b, 0o644)

	minio := testenv.StartMinIO(t)
	nats := testenv.StartNATS(t)
	env := []string{"SLUICE_S3_ACCESS_KEY=" + minio.AccessKey, "SLUICE_S3_SECRET_KEY=" + minio.SecretKey}
	loc := minio.URL("sluice-mp")
	conn := []string{"--nats", nats.URL, "--store", loc}
	common := append(append([]string{}, conn...), "--ack-wait", "4s", "--max-deliver", "5")
	aggAddr := fmt.Sprintf("127.0.0.1:%d", testenv.FreePort(t))
	w1Addr := fmt.Sprintf("127.0.0.1:%d", testenv.FreePort(t))
	w2Addr := fmt.Sprintf("127.0.0.1:%d", testenv.FreePort(t))
	start(t, "aggregate", bin, env, append([]string{"aggregate", "--http", aggAddr}, common...)...)
	w1 := start(t, "worker-1", bin, env, append([]string{"worker", "--http", w1Addr, "--concurrency", "1", "--id", "w1"}, common...)...)
	w2 := start(t, "worker-2", bin, env, append([]string{"worker", "--http", w2Addr, "--concurrency", "1", "--id", "w2"}, common...)...)

	ctx := context.Background()
	st, err := store.Open(ctx, loc, store.Credentials{AccessKey: store.Secret(minio.AccessKey), SecretKey: store.Secret(minio.SecretKey)})
	if err != nil {
		t.Fatal(err)
	}
	ingest := func(i int) {
		cmd := exec.Command(bin, append([]string{"ingest", "--campaign", "mp", "--config", cfgPath, paths[i]}, conn...)...)
		cmd.Env = append(os.Environ(), env...)
		out, err := cmd.CombinedOutput()
		if err != nil {
			t.Fatalf("ingest %s: %v\n%s", paths[i], err, out)
		}
	}
	for i := 0; i < 3; i++ {
		ingest(i)
	}
	// Kill worker 1 with SIGKILL while it holds a tile: its task is
	// redelivered to worker 2 after the ack wait, and the tile is counted
	// once.
	killed := false
	deadline := time.Now().Add(2 * time.Minute)
	for !killed && time.Now().Before(deadline) {
		if metric(w1Addr, "sluice_worker_tiles_in_flight") == 1 {
			w1.cmd.Process.Kill()
			w1.cmd.Wait()
			killed = true
		}
		time.Sleep(5 * time.Millisecond)
	}
	if !killed {
		t.Fatal("worker 1 never held a tile")
	}
	for i := 3; i < steps; i++ {
		ingest(i)
	}
	rows := waitRows(t, st, "mp", steps, 6*time.Minute)
	seen := map[string]bool{}
	for _, r := range rows {
		if seen[r.Step] {
			t.Errorf("step %s has two rows", r.Step)
		}
		seen[r.Step] = true
	}
	if len(rows) != steps {
		t.Errorf("%d rows for %d steps", len(rows), steps)
	}
	// Events worth interrupting for reach NATS subscribers: one completion
	// per step and one breakthrough.
	q, err := queue.Open(ctx, queue.Config{URL: nats.URL})
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	var kinds map[pb.StepEvent_Kind]int
	waitFor(t, time.Minute, "a completion event per step and a breakthrough", func() bool {
		kinds = map[pb.StepEvent_Kind]int{}
		for _, e := range storedEvents(t, q, "mp") {
			kinds[e.Kind]++
		}
		return kinds[pb.StepEvent_KIND_COMPLETED] >= steps && kinds[pb.StepEvent_KIND_BREAKTHROUGH] >= 1
	})
	if kinds[pb.StepEvent_KIND_COMPLETED] != steps || kinds[pb.StepEvent_KIND_BREAKTHROUGH] != 1 {
		t.Errorf("events on NATS: %v; want %d completions and one breakthrough", kinds, steps)
	}
	// The killed worker may have stored its tile's result before it died
	// (in flight until acknowledged): the step then completes without the
	// redelivery, which comes one ack wait later. Wait for it.
	waitFor(t, time.Minute, "worker 2 to get the killed worker's tile again", func() bool {
		return metric(w2Addr, "sluice_tiles_redelivered_total") >= 1
	})
	_ = w2

	// The all-in-one run of the same scans.
	data := t.TempDir()
	incoming := filepath.Join(data, "incoming")
	os.MkdirAll(incoming, 0o755)
	runAddr := fmt.Sprintf("127.0.0.1:%d", testenv.FreePort(t))
	start(t, "run", bin, nil, "run", "--data", data, "--watch", incoming, "--campaign", "mp", "--config", cfgPath, "--http", runAddr)
	for _, p := range paths {
		for _, ext := range []string{"", ".sluice.json"} {
			b, err := os.ReadFile(p + ext)
			if err != nil {
				t.Fatal(err)
			}
			os.WriteFile(filepath.Join(incoming, filepath.Base(p)+ext), b, 0o644)
		}
		os.WriteFile(filepath.Join(incoming, filepath.Base(p)+".done"), nil, 0o644)
	}
	local, err := store.Open(ctx, filepath.Join(data, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	want := waitRows(t, local, "mp", steps, 6*time.Minute)
	compareRows(t, rows, want)
}

// compareRows checks two series row by row: exact for counts, Euler and
// clusters, 1e-9 relative for sums (contact angles 1e-6: float32 normals).
func compareRows(t *testing.T, got, want []series.Row) {
	t.Helper()
	if len(got) != len(want) {
		t.Fatalf("%d rows vs %d", len(got), len(want))
	}
	for i := range got {
		g, w := got[i], want[i]
		if g.Step != w.Step || g.Time != w.Time {
			t.Errorf("row %d: %s@%g vs %s@%g", i, g.Step, g.Time, w.Step, w.Time)
			continue
		}
		gb, _ := json.Marshal(g)
		wb, _ := json.Marshal(w)
		var gm, wm map[string]any
		json.Unmarshal(gb, &gm)
		json.Unmarshal(wb, &wm)
		for k, wv := range wm {
			gv := gm[k]
			switch wv := wv.(type) {
			case float64:
				gf, ok := gv.(float64)
				tol := 1e-9
				if strings.HasPrefix(k, "contact_angle") {
					tol = 1e-6
				}
				if !ok || (gf != wv && math.Abs(gf-wv) > tol*math.Max(math.Abs(gf), math.Abs(wv))) {
					t.Errorf("step %s: %s = %v, all-in-one %v", g.Step, k, gv, wv)
				}
			case bool, string, nil:
				if gv != wv {
					t.Errorf("step %s: %s = %v, all-in-one %v", g.Step, k, gv, wv)
				}
			}
		}
	}
}

var _ = io.Discard
