package main

import (
	"bufio"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"sluice/pkg/events"
	"sluice/pkg/scenario"
	"sluice/pkg/series"
)

// need returns the path of an external program a test needs: missing is a
// failure in CI (which installs it) and a skip elsewhere.
func need(t *testing.T, prog string) string {
	t.Helper()
	p, err := exec.LookPath(prog)
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s not found; scripts/setup-test-env installs it", prog)
		}
		t.Skipf("%s not found (run make setup)", prog)
	}
	return p
}

func freePort(t *testing.T) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	return ln.Addr().String()
}

func httpGet(t *testing.T, url string) []byte {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	if resp.StatusCode != 200 {
		t.Fatalf("GET %s: %s: %s", url, resp.Status, b)
	}
	return b
}

// TestLiveCampaign runs a synthetic drainage campaign whose ground truth is
// known through the all-in-one pipeline and checks what a scientist and an
// operator see: experiment events against the truth, the live page in a
// real browser (a new point appears without reload), a real Prometheus
// server scraping the step latency and saturation, and every metric the
// Grafana dashboard queries.
func TestLiveCampaign(t *testing.T) {
	if testing.Short() {
		t.Skip("live campaign")
	}
	sc := &scenario.Campaign{Shape: [3]int{96, 96, 96}, Steps: 8, Seed: 1}
	if err := sc.Prepare(); err != nil {
		t.Fatal(err)
	}
	data := t.TempDir()
	cfgPath := filepath.Join(data, "c.json")
	if err := writeDemoConfig(cfgPath, demoConfig(sc, 48)); err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	nf := nodeFlags{data: data, http: "127.0.0.1:0", ackWait: 30 * time.Second, maxDeliver: 3}
	// The demo's rig log, so the experiment-log panels have data too.
	rigPath := filepath.Join(data, "rig", "rig-log.csv")
	rig, err := newDemoRig(rigPath, sc)
	if err != nil {
		t.Fatal(err)
	}
	f := ingestFlags{campaign: "live", config: cfgPath, watch: filepath.Join(data, "incoming"), createWatch: true, rigLog: rigPath}
	if st, err := nf.openStore(ctx); err != nil {
		t.Fatal(err)
	} else if err := prepareDemoCampaign(ctx, st, "live", sc, demoConfig(sc, 48)); err != nil {
		t.Fatal(err)
	}
	node, err := startAll(ctx, nf, inputFlags{}, f, 2, quietLog())
	if err != nil {
		cancel()
		t.Fatal(err)
	}
	defer func() { cancel(); node.wg.Wait() }()
	st, _ := nf.openStore(ctx)
	base := "http://" + node.url
	cyl := demoCylinder(sc)
	for i := 0; i < sc.Steps-1; i++ {
		if err := rig.writeUntil(sc.Truth(i).TimeS + 2*demoRigEvery); err != nil {
			t.Fatal(err)
		}
		if err := writeScan(f.watch, sc, i, cyl); err != nil {
			t.Fatal(err)
		}
	}
	waitRows(t, st, "live", sc.Steps-1, 4*time.Minute)

	t.Run("browser", func(t *testing.T) {
		need(t, "node")
		need(t, "chromium")
		dir, _ := filepath.Abs("../../tests/browser")
		if _, err := os.Stat(filepath.Join(dir, "node_modules", "playwright-core")); err != nil {
			if os.Getenv("CI") != "" {
				t.Fatalf("playwright-core not installed in %s (make setup)", dir)
			}
			t.Skip("playwright-core not installed (make setup)")
		}
		out := os.Getenv("SLUICE_TEST_OUT")
		if out == "" {
			out = t.TempDir()
		}
		os.MkdirAll(out, 0o755)
		shot := filepath.Join(out, "live-page.png")
		// The next scan arrives while the page is open.
		before, after := browseLivePage(t, dir, base+"/", shot, func() {
			if err := rig.writeUntil(sc.Truth(sc.Steps-1).TimeS + 2*demoRigEvery); err != nil {
				t.Fatal(err)
			}
			if err := writeScan(f.watch, sc, sc.Steps-1, cyl); err != nil {
				t.Fatal(err)
			}
		})
		if after <= before {
			t.Errorf("no new point appeared: %d → %d", before, after)
		}
		if fi, err := os.Stat(shot); err != nil || fi.Size() < 10000 {
			t.Errorf("screenshot %s missing or tiny", shot)
		} else {
			t.Logf("screenshot: %s", shot)
		}
	})
	// Make sure the last step is in (the browser subtest may have been
	// skipped outside CI).
	if rows, _ := series.Load(ctx, st, "live"); len(rows) < sc.Steps {
		writeScan(f.watch, sc, sc.Steps-1, cyl)
	}
	rows := waitRows(t, st, "live", sc.Steps, 4*time.Minute)

	t.Run("events", func(t *testing.T) {
		// Ground truth from the scenario: breakthrough is the first step whose
		// labels percolate inlet → outlet; the last SteadySteps hold r_c
		// nearly constant.
		evs, err := events.Detect(rows, demoEvents())
		if err != nil {
			t.Fatal(err)
		}
		for _, r := range rows {
			t.Logf("%s S_w %.4f Pc %.1f Pa", r.Step, *r.SatWetting, series.F(r.Pc))
		}
		var gotBT, gotSteady = -1, -1
		for _, e := range evs {
			for i, r := range rows {
				if r.Step == e.Step {
					switch e.Kind {
					case events.Breakthrough:
						gotBT = i
					case events.SteadyState:
						if gotSteady < 0 {
							gotSteady = i
						}
					}
				}
			}
		}
		if want := sc.Breakthrough(); gotBT != want {
			t.Errorf("breakthrough detected at step %d, truth %d", gotBT, want)
		}
		if first := sc.Steps - sc.SteadySteps; gotSteady < first {
			t.Errorf("steady state detected at step %d, before the steady phase starts (%d)", gotSteady, first)
		}
		if gotSteady < 0 {
			t.Errorf("steady state not detected (truth: steps %d–%d)", sc.Steps-sc.SteadySteps, sc.Steps-1)
		}
		var served []events.Event
		json.Unmarshal(httpGet(t, base+"/api/campaigns/live/events"), &served)
		if len(served) != len(evs) {
			t.Errorf("the API serves %d events, detection gives %d", len(served), len(evs))
		}
		metrics := string(httpGet(t, base+"/metrics"))
		if !strings.Contains(metrics, `sluice_breakthrough{campaign="live"} 1`) {
			t.Errorf("breakthrough gauge not set")
		}
	})

	t.Run("plot and report", func(t *testing.T) {
		out := t.TempDir()
		code, text, errs := runCLI(t, "plot", "--data", data, "--out", out, "live")
		if code != 0 {
			t.Fatalf("sluice plot: exit %d: %s", code, errs)
		}
		pngs, _ := filepath.Glob(filepath.Join(out, "*.png"))
		svgs, _ := filepath.Glob(filepath.Join(out, "*.svg"))
		if len(pngs) < 7 || len(pngs) != len(svgs) || strings.Count(text, "\n") != len(pngs)+len(svgs) {
			t.Errorf("sluice plot wrote %d PNG and %d SVG files:\n%s", len(pngs), len(svgs), text)
		}
		html := filepath.Join(out, "report.html")
		if code, _, errs := runCLI(t, "report", "--data", data, "--out", html, "live"); code != 0 {
			t.Fatalf("sluice report: exit %d: %s", code, errs)
		}
		b, err := os.ReadFile(html)
		if err != nil {
			t.Fatal(err)
		}
		page := string(b)
		for _, want := range append([]string{"pressurised", "<svg", "4 µm", "breakthrough", "Parameter hash"}, rows[0].Step, rows[len(rows)-1].Step) {
			if !strings.Contains(page, want) {
				t.Errorf("report lacks %q", want)
			}
		}
		// Namespace names (xmlns="http://www.w3.org/2000/svg") are not
		// fetched; resources are.
		if m := regexp.MustCompile(`(?:src|href)\s*=\s*["']?(?:https?:)?//[^"' >]*|url\(["']?(?:https?:)?//[^)]*`).FindString(page); m != "" {
			t.Errorf("report is not self-contained: %q", m)
		}
		if code, _, errs := runCLI(t, "report", "--data", data, "no-such-campaign"); code != 2 || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("report of a missing campaign: exit %d, %q", code, errs)
		}
	})

	t.Run("api", func(t *testing.T) {
		for path, want := range map[string]int{
			"/api/campaigns":                                           200,
			"/api/campaigns/live/steps":                                200,
			"/api/campaigns/live/series.csv":                           200,
			"/api/campaigns/live/steps/scan-0003/result":               200,
			"/api/campaigns/live/steps/scan-0003/preview.png":          200,
			"/api/health":                                              200,
			"/api/campaigns/nope/steps":                                404,
			"/api/campaigns/live/steps/scan-9999/result":               404,
			"/api/campaigns/Bad..Name/steps":                           400,
			"/api/campaigns/live/steps/scan-0003/preview.png?z=100000": 400,
			"/healthz": 200, "/readyz": 200,
		} {
			resp, err := http.Get(base + path)
			if err != nil {
				t.Fatal(err)
			}
			b, _ := io.ReadAll(resp.Body)
			resp.Body.Close()
			if resp.StatusCode != want {
				t.Errorf("GET %s: %d, want %d (%s)", path, resp.StatusCode, want, strings.TrimSpace(string(b)))
			}
		}
		var steps []map[string]any
		json.Unmarshal(httpGet(t, base+"/api/campaigns/live/steps"), &steps)
		if len(steps) != sc.Steps {
			t.Errorf("%d steps listed, want %d", len(steps), sc.Steps)
		}
		for _, s := range steps {
			if s["status"] != "done" || s["tiles_done"] != s["tiles_total"] {
				t.Errorf("step %v: status %v, tiles %v/%v", s["step"], s["status"], s["tiles_done"], s["tiles_total"])
			}
		}
		csv := string(httpGet(t, base+"/api/campaigns/live/series.csv"))
		if lines := strings.Count(strings.TrimSpace(csv), "\n"); lines != sc.Steps {
			t.Errorf("series.csv has %d data lines, want %d", lines, sc.Steps)
		}
		if !strings.HasPrefix(csv, "step,time_s,") {
			t.Errorf("series.csv header: %.40q", csv)
		}
	})

	t.Run("dashboard", func(t *testing.T) {
		// Every metric the Grafana dashboard queries exists in a live /metrics.
		dash, err := os.ReadFile("../../deploy/grafana/sluice-dashboard.json")
		if err != nil {
			t.Fatal(err)
		}
		metrics := string(httpGet(t, base+"/metrics"))
		names := regexp.MustCompile(`sluice_[a-z_]+`).FindAllString(string(dash), -1)
		if len(names) < 10 {
			t.Fatalf("only %d metric names in the dashboard", len(names))
		}
		for _, n := range names {
			if !regexp.MustCompile(`(?m)^` + n + `[{ ]`).MatchString(metrics) {
				t.Errorf("dashboard queries %s, absent from /metrics", n)
			}
		}
	})

	t.Run("prometheus", func(t *testing.T) {
		prom := need(t, "prometheus")
		dir := t.TempDir()
		cfg := fmt.Sprintf("global: {scrape_interval: 1s}\nscrape_configs:\n  - job_name: sluice\n    static_configs: [{targets: [%q]}]\n", node.url)
		os.WriteFile(filepath.Join(dir, "prometheus.yml"), []byte(cfg), 0o644)
		addr := freePort(t)
		cmd := exec.Command(prom, "--config.file="+filepath.Join(dir, "prometheus.yml"), "--storage.tsdb.path="+filepath.Join(dir, "tsdb"),
			"--web.listen-address="+addr)
		var logb syncBuffer
		cmd.Stderr = &logb
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		defer func() { cmd.Process.Kill(); cmd.Wait() }()
		query := func(q string) []any {
			resp, err := http.Get("http://" + addr + "/api/v1/query?query=" + q)
			if err != nil {
				return nil
			}
			defer resp.Body.Close()
			var r struct {
				Data struct {
					Result []any `json:"result"`
				} `json:"data"`
			}
			json.NewDecoder(resp.Body).Decode(&r)
			return r.Data.Result
		}
		deadline := time.Now().Add(90 * time.Second)
		var lat, sat []any
		for time.Now().Before(deadline) {
			lat = query("sluice_step_latency_seconds_count")
			sat = query(`sluice_saturation_nonwetting{campaign="live"}`)
			if len(lat) > 0 && len(sat) > 0 {
				break
			}
			time.Sleep(time.Second)
		}
		if len(lat) == 0 || len(sat) == 0 {
			t.Fatalf("Prometheus returned no step-latency (%d) or saturation (%d) series; log:\n%s", len(lat), len(sat), logb.String())
		}
		// The scraped saturation is the latest step's.
		v := sat[0].(map[string]any)["value"].([]any)[1].(string)
		var got float64
		fmt.Sscan(v, &got)
		if want := *rows[len(rows)-1].SatNonwetting; math.Abs(got-want) > 1e-12 {
			t.Errorf("Prometheus saturation %s, series %g", v, want)
		}
	})
}

// browseLivePage runs tests/browser/live.mjs (headless Chromium) on url,
// writing a screenshot to shot. The script reports "loaded N" when the
// page shows N points, then onLoaded is called (to make a new step arrive),
// and "ok N M" when the count grew without a reload; "fail …" lines are
// test errors. It returns the counts before and after.
func browseLivePage(t *testing.T, dir, url, shot string, onLoaded func()) (before, after int) {
	t.Helper()
	cmd := exec.Command(need(t, "node"), filepath.Join(dir, "live.mjs"), url, shot)
	cmd.Dir = dir
	cmd.Stderr = os.Stderr
	stdout, _ := cmd.StdoutPipe()
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer cmd.Process.Kill()
	lines := bufio.NewScanner(stdout)
	for lines.Scan() {
		l := lines.Text()
		t.Log("browser:", l)
		switch {
		case strings.HasPrefix(l, "loaded"):
			fmt.Sscanf(l, "loaded %d", &before)
			onLoaded()
		case strings.HasPrefix(l, "ok"):
			fmt.Sscanf(l, "ok %d %d", &before, &after)
		case strings.HasPrefix(l, "fail"):
			t.Errorf("live page %s: %s", url, l)
		}
	}
	cmd.Wait()
	return before, after
}
