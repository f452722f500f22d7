package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/measure"
	"sluice/pkg/phase"
	"sluice/pkg/scan"
	"sluice/pkg/series"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// pipelineScene is a small rock with ganglia rendered as a noisy scan.
func pipelineScene(t *testing.T, shape [3]int, seed uint64) *volume.Volume[uint16] {
	t.Helper()
	lab := volume.NewShape[uint8](shape[0], shape[1], shape[2], 3e-6)
	forward.Rock{GrainRadius: 7, Porosity: 0.45, BlobRadius: 6, BlobFrac: 0.35, Seed: seed}.Draw(lab, phase.Default())
	p := forward.Default()
	p.Seed = seed
	g, err := forward.Render(lab, p)
	if err != nil {
		t.Fatal(err)
	}
	u := forward.Uint16(g)
	u.VoxelSize = 3e-6
	return u
}

// writeScanFile hands a scan to a watched directory as a beamline does.
func writeScanFile(t *testing.T, dir, name string, v *volume.Volume[uint16], timeS float64) {
	t.Helper()
	p := filepath.Join(dir, name+".raw")
	if err := volio.WriteRaw(p, v, volio.WriteOptions{TimeS: timeS, HasTime: true}); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p+".done", []byte(fmt.Sprintf(`{"time_s": %g}`, timeS)), 0o644); err != nil {
		t.Fatal(err)
	}
}

// waitRows polls a campaign's series until it has n rows.
func waitRows(t *testing.T, st store.Store, c string, n int, limit time.Duration) []series.Row {
	t.Helper()
	deadline := time.Now().Add(limit)
	for time.Now().Before(deadline) {
		rows, err := series.Load(context.Background(), st, c)
		if err == nil && len(rows) >= n {
			return rows
		}
		time.Sleep(100 * time.Millisecond)
	}
	t.Fatalf("campaign %s: fewer than %d series rows after %v", c, n, limit)
	return nil
}

func quietLog() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

// compareResults applies the design's promise: exact for counts, Euler
// characteristics and cluster numbers; 1e-9 relative for sums (angles to
// float32 rounding, 1e-6).
func compareResults(t *testing.T, label string, got, want *measure.Result) {
	t.Helper()
	ints := map[string][2]int64{
		"voxels_solid": {got.VoxelsSolid, want.VoxelsSolid}, "voxels_wetting": {got.VoxelsWetting, want.VoxelsWetting},
		"voxels_nonwetting": {got.VoxelsNonwetting, want.VoxelsNonwetting}, "voxels_outside": {got.VoxelsOutside, want.VoxelsOutside},
		"euler_nonwetting": {got.EulerNonwetting, want.EulerNonwetting}, "euler_wetting": {got.EulerWetting, want.EulerWetting},
		"euler_solid": {got.EulerSolid, want.EulerSolid}, "ganglia_count": {int64(got.GangliaCount), int64(want.GangliaCount)},
		"contact_angle_samples": {got.AngleSamples, want.AngleSamples},
	}
	for k, v := range ints {
		if v[0] != v[1] {
			t.Errorf("%s: %s = %d, whole volume %d", label, k, v[0], v[1])
		}
	}
	if got.Percolates != want.Percolates {
		t.Errorf("%s: percolation differs", label)
	}
	// The saturation profile and the front are exact counts.
	if a, _ := json.Marshal(got.SatProfile); want.SatProfile == nil || string(a) != func() string { b, _ := json.Marshal(want.SatProfile); return string(b) }() {
		t.Errorf("%s: saturation profile differs", label)
	}
	if (got.FrontPosition == nil) != (want.FrontPosition == nil) || (want.FrontPosition != nil && *got.FrontPosition != *want.FrontPosition) {
		t.Errorf("%s: front position differs", label)
	}
	f := func(p *float64) float64 {
		if p == nil {
			return math.NaN()
		}
		return *p
	}
	for k, v := range map[string][3]float64{
		"area_wn": {got.AreaWN, want.AreaWN, 1e-9}, "area_ws": {got.AreaWS, want.AreaWS, 1e-9}, "area_ns": {got.AreaNS, want.AreaNS, 1e-9},
		"curvature_mean": {f(got.CurvMean), f(want.CurvMean), 1e-9}, "pc": {f(got.Pc), f(want.Pc), 1e-9},
		"largest_fraction": {f(got.LargestFraction), f(want.LargestFraction), 1e-12},
		"angle_mean":       {f(got.AngleMean), f(want.AngleMean), 1e-6},
		// Connected and trapped interfaces apart, the trapped ganglia's own
		// Pc, and the block standard errors
		// (docs/capillary-pressure-uncertainty.md).
		"pc_connected": {f(got.PcConnected), f(want.PcConnected), 1e-9}, "pc_trapped": {f(got.PcTrapped), f(want.PcTrapped), 1e-9},
		"pc_se": {f(got.PcSE), f(want.PcSE), 1e-9}, "pc_connected_se": {f(got.PcConnectedSE), f(want.PcConnectedSE), 1e-9},
		"pc_trapped_se": {f(got.PcTrappedSE), f(want.PcTrappedSE), 1e-9}, "angle_mean_se": {f(got.AngleMeanSE), f(want.AngleMeanSE), 1e-6},
		"trapped_ganglia_pc_median": {f(gmed(got)), f(gmed(want)), 1e-9},
	} {
		if !(v[0] == v[1] || math.Abs(v[0]-v[1]) <= v[2]*math.Max(math.Abs(v[0]), math.Abs(v[1]))) {
			t.Errorf("%s: %s = %.12g, whole volume %.12g", label, k, v[0], v[1])
		}
	}
	// The topological contact angle: the same ganglia, the same turnings
	// to rounding (null in both when no ganglion gives one).
	if got.TopoGanglia != want.TopoGanglia || (got.TopoCos == nil) != (want.TopoCos == nil) ||
		(want.TopoCos != nil && math.Abs(*got.TopoCos-*want.TopoCos) > 1e-9) {
		t.Errorf("%s: topological angle from %d ganglia, cos %v; whole volume %d, %v", label, got.TopoGanglia, fv(got.TopoCos), want.TopoGanglia, fv(want.TopoCos))
	}
}

// fv prints a nullable value.
func fv(p *float64) any {
	if p == nil {
		return "null"
	}
	return *p
}

// gmed is the median of the trapped ganglia's own Pc, nil when none.
func gmed(r *measure.Result) *float64 {
	if r.TrappedGanglia == nil {
		return nil
	}
	return r.TrappedGanglia.PcMedian
}

// TestPipelineTilingInvariance runs scans through the real pipeline
// (embedded NATS JetStream, local store, watcher, workers, aggregator) with
// 1, 8 and 27 tiles and uneven edge tiles, and checks each step result
// against `sluice measure` of the whole volume (architecture.md).
func TestPipelineTilingInvariance(t *testing.T) {
	if testing.Short() {
		t.Skip("pipeline test")
	}
	grey := pipelineScene(t, [3]int{60, 60, 60}, 5)
	base := campaign.Default()
	base.IFT = 0.035
	base.DetectSample = false
	base.Tile = 64
	_, want, _, err := scan.Whole(grey, base, nil, 2)
	if err != nil {
		t.Fatal(err)
	}
	if want.GangliaCount < 2 || want.AngleSamples == 0 {
		t.Fatalf("scene too simple: %d ganglia, %d angle samples", want.GangliaCount, want.AngleSamples)
	}
	if want.PcConnected == nil && want.PcTrapped == nil {
		t.Fatal("scene has neither connected nor trapped interface")
	}
	t.Logf("whole volume: Pc %v ± %v, connected %v ± %v, trapped %v ± %v, θ %v ± %v, topological θ %v from %d ganglia", fv(want.Pc), fv(want.PcSE),
		fv(want.PcConnected), fv(want.PcConnectedSE), fv(want.PcTrapped), fv(want.PcTrappedSE), fv(want.AngleMean), fv(want.AngleMeanSE),
		fv(want.TopoAngle), want.TopoGanglia)
	for _, tile := range []int{64, 30, 21, 23} { // 1, 8, 27 (21, 21, 18 per axis) and 27 uneven tiles; the default halo is 20
		t.Run(fmt.Sprintf("tile%d", tile), func(t *testing.T) {
			data := t.TempDir()
			cfg := base
			cfg.Tile = tile
			cfgPath := filepath.Join(data, "c.json")
			if err := writeDemoConfig(cfgPath, cfg); err != nil {
				t.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			nf := nodeFlags{data: data, http: "127.0.0.1:0", ackWait: 30 * time.Second, maxDeliver: 3}
			f := ingestFlags{campaign: "tiling", config: cfgPath, watch: filepath.Join(data, "incoming"), createWatch: true}
			node, err := startAll(ctx, nf, inputFlags{}, f, 2, quietLog())
			if err != nil {
				cancel()
				t.Fatal(err)
			}
			defer func() { cancel(); node.wg.Wait() }()
			writeScanFile(t, f.watch, "scan-0001", grey, 45)
			st, _ := nf.openStore(ctx)
			rows := waitRows(t, st, "tiling", 1, 3*time.Minute)
			if rows[0].Step != "scan-0001" || rows[0].Time != 45 {
				t.Errorf("row %s at %g s", rows[0].Step, rows[0].Time)
			}
			b, err := st.Get(ctx, "campaigns/tiling/steps/scan-0001/result.json")
			if err != nil {
				t.Fatal(err)
			}
			var got measure.Result
			if err := json.Unmarshal(b, &got); err != nil {
				t.Fatal(err)
			}
			compareResults(t, fmt.Sprintf("tile %d", tile), &got, want)
		})
	}
}

// TestBadScanDoesNotStopCampaign: a truncated scan in the watched
// directory gets one clear log line naming the file; nothing stored is
// lost and the next scan is processed (the campaign continues).
func TestBadScanDoesNotStopCampaign(t *testing.T) {
	if testing.Short() {
		t.Skip("pipeline test")
	}
	grey := pipelineScene(t, [3]int{40, 40, 40}, 9)
	data := t.TempDir()
	cfg := campaign.Default()
	cfg.DetectSample = false
	cfg.Tile = 40
	cfg.Measure.SkipContact = true
	cfgPath := filepath.Join(data, "c.json")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		t.Fatal(err)
	}
	var logBuf syncBuffer
	log := slog.New(slog.NewTextHandler(&logBuf, nil))
	ctx, cancel := context.WithCancel(context.Background())
	nf := nodeFlags{data: data, http: "127.0.0.1:0", ackWait: 30 * time.Second, maxDeliver: 3}
	f := ingestFlags{campaign: "bad", config: cfgPath, watch: filepath.Join(data, "incoming"), createWatch: true}
	node, err := startAll(ctx, nf, inputFlags{}, f, 2, log)
	if err != nil {
		cancel()
		t.Fatal(err)
	}
	defer func() { cancel(); node.wg.Wait() }()
	st, _ := nf.openStore(ctx)
	writeScanFile(t, f.watch, "scan-0001", grey, 0)
	waitRows(t, st, "bad", 1, 2*time.Minute)
	before, _ := st.Get(ctx, "campaigns/bad/series.json")

	// A scan cut short by a failed transfer, handed over with its marker.
	staging := t.TempDir()
	writeScanFile(t, staging, "scan-0002", grey, 45)
	b, _ := os.ReadFile(filepath.Join(staging, "scan-0002.raw"))
	hdr, _ := os.ReadFile(filepath.Join(staging, "scan-0002.raw.sluice.json"))
	os.WriteFile(filepath.Join(f.watch, "scan-0002.raw"), b[:len(b)/3], 0o644)
	os.WriteFile(filepath.Join(f.watch, "scan-0002.raw.sluice.json"), hdr, 0o644)
	os.WriteFile(filepath.Join(f.watch, "scan-0002.raw.done"), nil, 0o644)
	writeScanFile(t, f.watch, "scan-0003", grey, 90)
	rows := waitRows(t, st, "bad", 2, 2*time.Minute)
	if rows[0].Step != "scan-0001" || rows[1].Step != "scan-0003" {
		t.Errorf("rows %s, %s; want scan-0001, scan-0003", rows[0].Step, rows[1].Step)
	}
	after, _ := st.Get(ctx, "campaigns/bad/steps/scan-0001/result.json")
	if len(before) == 0 || len(after) == 0 {
		t.Errorf("earlier results lost")
	}
	var line string
	for _, l := range strings.Split(logBuf.String(), "\n") {
		if strings.Contains(l, "scan-0002.raw") && strings.Contains(l, "level=ERROR") {
			line = l
		}
	}
	if line == "" || !strings.Contains(line, "truncated") {
		t.Errorf("no error line naming scan-0002.raw and the problem; log:\n%s", logBuf.String())
	}
}

type syncBuffer struct {
	mu sync.Mutex
	b  strings.Builder
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// TestRestartOverSameDirectory: `sluice run` restarted over the same data
// and watched directories neither redoes nor loses finished steps, and
// picks up new scans.
func TestRestartOverSameDirectory(t *testing.T) {
	if testing.Short() {
		t.Skip("pipeline test")
	}
	grey := pipelineScene(t, [3]int{40, 40, 40}, 11)
	data := t.TempDir()
	cfg := campaign.Default()
	cfg.DetectSample = false
	cfg.Tile = 40
	cfg.Measure.SkipContact = true
	cfgPath := filepath.Join(data, "c.json")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		t.Fatal(err)
	}
	nf := nodeFlags{data: data, http: "127.0.0.1:0", ackWait: 30 * time.Second, maxDeliver: 3}
	f := ingestFlags{campaign: "restart", config: cfgPath, watch: filepath.Join(data, "incoming"), createWatch: true}
	run := func() (func(), *syncBuffer) {
		var logBuf syncBuffer
		ctx, cancel := context.WithCancel(context.Background())
		node, err := startAll(ctx, nf, inputFlags{}, f, 2, slog.New(slog.NewTextHandler(&logBuf, nil)))
		if err != nil {
			cancel()
			t.Fatal(err)
		}
		return func() { cancel(); node.wg.Wait() }, &logBuf
	}
	stop, _ := run()
	writeScanFile(t, f.watch, "scan-0001", grey, 0)
	writeScanFile(t, f.watch, "scan-0002", grey, 45)
	st, _ := nf.openStore(context.Background())
	waitRows(t, st, "restart", 2, 2*time.Minute)
	stop()
	ctx := context.Background()
	first, _ := st.Get(ctx, "campaigns/restart/steps/scan-0001/result.json")
	fi1, _ := os.Stat(filepath.Join(data, "store", "campaigns", "restart", "steps", "scan-0001", "volume.zarr", ".zarray"))

	stop, logs := run()
	defer stop()
	writeScanFile(t, f.watch, "scan-0003", grey, 90)
	rows := waitRows(t, st, "restart", 3, 2*time.Minute)
	if len(rows) != 3 || rows[2].Step != "scan-0003" {
		t.Fatalf("rows after restart: %d", len(rows))
	}
	again, _ := st.Get(ctx, "campaigns/restart/steps/scan-0001/result.json")
	fi2, _ := os.Stat(filepath.Join(data, "store", "campaigns", "restart", "steps", "scan-0001", "volume.zarr", ".zarray"))
	if string(first) != string(again) || fi1 == nil || fi2 == nil || !fi1.ModTime().Equal(fi2.ModTime()) {
		t.Errorf("a finished step was rewritten after the restart")
	}
	if !strings.Contains(logs.String(), "already measured") {
		t.Errorf("restart did not report the finished scans as skipped:\n%s", logs.String())
	}
}
