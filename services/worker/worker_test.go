package worker

import (
	"bytes"
	"context"
	"errors"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/scenario"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/services/ingest"
)

// ingestSmall ingests one 32³ drainage scan in 16³ tiles into a local store
// and returns the store and the tasks ingest queued.
func ingestSmall(t *testing.T) (store.Store, taskList) {
	t.Helper()
	ctx := context.Background()
	dir := t.TempDir()
	sc := &scenario.Campaign{Shape: [3]int{32, 32, 32}, Steps: 12, Seed: 1, NoCore: true}
	if err := sc.Prepare(); err != nil {
		t.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	lv := forward.Default()
	g, err := forward.Render(lab, lv)
	if err != nil {
		t.Fatal(err)
	}
	grey := forward.Uint16(g)
	grey.VoxelSize = sc.VoxelSize
	path := filepath.Join(dir, "scan-0006.raw")
	if err := volio.WriteRaw(path, grey, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = 16
	cfg.DetectSample = false
	cfg.Segment.Threshold = "fixed"
	cfg.Segment.Fixed = []float64{(lv.Nonwetting + lv.Wetting) / 2, (lv.Wetting + lv.Solid) / 2}
	if _, err := ingest.EnsureCampaign(ctx, st, "c", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	var tasks taskList
	in := &ingest.Ingester{Store: st, Queue: &tasks, Version: "test"}
	if _, err := in.Ingest(ctx, ingest.Request{Campaign: "c", Step: "scan-0006", Path: path, HasTime: true}); err != nil {
		t.Fatal(err)
	}
	if len(tasks) != 8 {
		t.Fatalf("%d tasks, want 8", len(tasks))
	}
	return st, tasks
}

// The first tile of a step creates the label array (its .zarray is not
// found); a .zarray that exists but cannot be read as Zarr metadata fails
// the tile and is left as it was, not replaced by the worker's own.
func TestLabelArrayCreatedOnlyWhenMissing(t *testing.T) {
	ctx := context.Background()
	st, tasks := ingestSmall(t)
	w := &Worker{Store: st, ID: "test"}
	zkey := strings.TrimSuffix(tasks[0].LabelKey, "/") + "/.zarray"
	if _, err := st.Get(ctx, zkey); err == nil {
		t.Fatalf("%s exists before any tile ran", zkey)
	}
	if _, err := w.Process(ctx, tasks[0]); err != nil {
		t.Fatalf("first tile: %v", err)
	}
	if _, err := volio.OpenZarr(ctx, st, strings.TrimSuffix(tasks[0].LabelKey, "/")); err != nil {
		t.Fatalf("label array after the first tile: %v", err)
	}

	corrupt := []byte(`{"zarr_format": 2, "shape": [32, 32`)
	if err := st.Put(ctx, zkey, corrupt); err != nil {
		t.Fatal(err)
	}
	_, err := w.Process(ctx, tasks[1])
	if err == nil {
		t.Fatal("a tile over a corrupt label .zarray succeeded")
	}
	if !errors.Is(err, volio.ErrFormat) || !strings.Contains(err.Error(), ".zarray") || strings.Contains(err.Error(), "\n") {
		t.Errorf("error %q: want one line wrapping volio.ErrFormat that names the .zarray", err)
	}
	if b, err := st.Get(ctx, zkey); err != nil || !bytes.Equal(b, corrupt) {
		t.Errorf("corrupt .zarray was rewritten: now %q (%v)", b, err)
	}
}

// getCounter counts the Gets of each key through a Store.
type getCounter struct {
	Store
	mu   sync.Mutex
	gets map[string]int
}

func (g *getCounter) Get(ctx context.Context, key string) ([]byte, error) {
	g.mu.Lock()
	g.gets[key]++
	g.mu.Unlock()
	return g.Store.Get(ctx, key)
}

// The step's grey array metadata is read once for all tiles of a step, not
// once per tile, and the tiles read through the cached metadata still give
// the results of a fresh worker (same partial, byte for byte).
func TestInputMetadataReadOncePerStep(t *testing.T) {
	ctx := context.Background()
	st, tasks := ingestSmall(t)
	gc := &getCounter{Store: st, gets: map[string]int{}}
	w := &Worker{Store: gc, ID: "test"}
	for _, task := range tasks[:4] {
		if _, err := w.Process(ctx, task); err != nil {
			t.Fatal(err)
		}
	}
	zkey := strings.TrimSuffix(tasks[0].InputKey, "/") + "/.zarray"
	if n := gc.gets[zkey]; n != 1 {
		t.Errorf("%s read %d times over 4 tiles of one step, want 1", zkey, n)
	}
	// Tile 3 again on a fresh worker (metadata read anew): same result.
	cached, err := st.Get(ctx, tasks[3].ResultKey)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := (&Worker{Store: st, ID: "fresh"}).Process(ctx, tasks[3]); err != nil {
		t.Fatal(err)
	}
	fresh, err := st.Get(ctx, tasks[3].ResultKey)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(cached, fresh) {
		t.Error("tile result through cached metadata differs from a fresh worker's")
	}
}
