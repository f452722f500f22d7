package worker

import (
	"context"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/scan"
	"sluice/pkg/scenario"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/proto/sluicepb"
	"sluice/services/ingest"
)

// taskList keeps the tasks ingest publishes, so the benchmark can hand one
// to the worker as the queue would.
type taskList []*sluicepb.TileTask

func (l *taskList) PublishTask(_ context.Context, t *sluicepb.TileTask) error {
	*l = append(*l, t)
	return nil
}

// BenchmarkProcessTile runs Worker.Process (read tile + halo from the
// stored Zarr step, segment and measure, write labels and the partial) on
// the centre tile of an ingested 3×3×3-tile drainage scan, as a worker does
// for each task. It reports core MVox/s and two memory figures for the
// worker memory bound (docs/memory.md): "B/vox-box", bytes allocated per
// voxel of the grey box read (core + halo) with the collector off (every
// allocation of one tile kept: an upper bound on the tile's live set), and
// "MiB/tile", the same in MiB.
func BenchmarkProcessTile(b *testing.B) {
	for _, tile := range []int{32, 64} {
		b.Run(map[int]string{32: "tile32", 64: "tile64"}[tile], func(b *testing.B) {
			benchProcessTile(b, tile)
		})
	}
}

func benchProcessTile(b *testing.B, tile int) {
	ctx := context.Background()
	dir := b.TempDir()
	n := 3 * tile
	sc := &scenario.Campaign{Shape: [3]int{n, n, n}, Steps: 12, Seed: 1, NoCore: true}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	lv := forward.Default()
	g, err := forward.Render(lab, lv)
	if err != nil {
		b.Fatal(err)
	}
	grey := forward.Uint16(g)
	grey.VoxelSize = sc.VoxelSize
	path := filepath.Join(dir, "scan-0006.raw")
	if err := volio.WriteRaw(path, grey, volio.WriteOptions{}); err != nil {
		b.Fatal(err)
	}
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		b.Fatal(err)
	}
	// The campaign the benchmark campaign runs: fixed thresholds midway
	// between the calibrated grey levels, median filter, partial-volume
	// correction with the known solid grey, every measurement.
	cfg := campaign.Default()
	cfg.Tile = tile
	cfg.DetectSample = false
	cfg.Segment.Threshold = "fixed"
	cfg.Segment.Fixed = []float64{(lv.Nonwetting + lv.Wetting) / 2, (lv.Wetting + lv.Solid) / 2}
	cfg.Segment.PartialVolume.Blur = lv.Blur
	cfg.Segment.PartialVolume.SolidGrey = lv.Solid
	if _, err := ingest.EnsureCampaign(ctx, st, "bench", cfg, "bench", ""); err != nil {
		b.Fatal(err)
	}
	var tasks taskList
	in := &ingest.Ingester{Store: st, Queue: &tasks, Version: "bench"}
	if _, err := in.Ingest(ctx, ingest.Request{Campaign: "bench", Step: "scan-0006", Path: path, HasTime: true}); err != nil {
		b.Fatal(err)
	}
	if len(tasks) != 27 {
		b.Fatalf("%d tasks, want 27", len(tasks))
	}
	task := tasks[13] // the centre tile: a full halo on every side
	halo, _ := scan.Halo(cfg)
	box := ingest.BoxFromProto(task.Core).Grow(int(halo))
	w := &Worker{Store: st, ID: "bench"}
	if _, err := w.Process(ctx, task); err != nil { // plan cached, files warm
		b.Fatal(err)
	}
	// One tile with the collector off: total bytes allocated.
	old := debug.SetGCPercent(-1)
	var m0, m1 runtime.MemStats
	runtime.ReadMemStats(&m0)
	if _, err := w.Process(ctx, task); err != nil {
		b.Fatal(err)
	}
	runtime.ReadMemStats(&m1)
	debug.SetGCPercent(old)
	runtime.GC()
	alloc := float64(m1.TotalAlloc - m0.TotalAlloc)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := w.Process(ctx, task); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(tile*tile*tile)*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
	b.ReportMetric(alloc/float64(box.Voxels()), "B/vox-box")
	b.ReportMetric(alloc/(1<<20), "MiB/tile")
	b.ReportMetric(float64(halo), "halo")
}
