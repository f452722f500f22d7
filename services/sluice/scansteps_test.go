package main

import (
	"context"
	"fmt"
	"strings"
	"sync"
	"testing"

	"sluice/pkg/layout"
	"sluice/pkg/store"
)

// listCount is a store that counts the keys its List calls return.
type listCount struct {
	store.Store
	mu     sync.Mutex
	listed []string
}

func (l *listCount) List(ctx context.Context, prefix string) ([]string, error) {
	keys, err := l.Store.List(ctx, prefix)
	l.mu.Lock()
	l.listed = append(l.listed, keys...)
	l.mu.Unlock()
	return keys, err
}

// TestScanStepsSkipsChunks: reprocess and status learn each step's state
// under a hash without listing the chunks of its Zarr arrays, and count
// only that hash's tile results.
func TestScanStepsSkipsChunks(t *testing.T) {
	ctx := context.Background()
	local, err := store.NewLocal(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	c, err := layout.NewCampaign("scan-keys")
	if err != nil {
		t.Fatal(err)
	}
	put := func(key string) {
		if err := local.Put(ctx, key, []byte("{}")); err != nil {
			t.Fatal(err)
		}
	}
	const hash, other = "aaaa", "bbbb"
	for _, s := range []string{"0001", "0002", "0003"} {
		dir := c.Steps() + s + "/"
		for z := 0; z < 4; z++ {
			for y := 0; y < 4; y++ {
				for x := 0; x < 4; x++ {
					put(fmt.Sprintf("%svolume.zarr/%d/%d/%d", dir, z, y, x))
					put(fmt.Sprintf("%slabels.zarr/%d/%d/%d", dir, z, y, x))
				}
			}
		}
		put(dir + "manifest.json")
		if s == "0003" {
			continue // ingested, never planned under hash
		}
		put(dir + "plans/" + hash + ".json")
		for tile := 0; tile < 3; tile++ {
			put(fmt.Sprintf("%stiles/%s/%d.json", dir, other, tile))
		}
		put(dir + "tiles/" + hash + "/0.json")
		if s == "0001" {
			put(dir + "tiles/" + hash + "/1.json")
			put(dir + "runs/" + hash + "/result.json")
		}
	}
	lc := &listCount{Store: local}
	steps, err := scanSteps(ctx, lc, c, hash)
	if err != nil {
		t.Fatal(err)
	}
	if len(steps) != 3 {
		t.Fatalf("%d steps, want 3", len(steps))
	}
	want := map[string]stepKeys{
		"0001": {manifest: true, plan: true, result: true, tiles: map[int]bool{0: true, 1: true}},
		"0002": {manifest: true, plan: true, tiles: map[int]bool{0: true}},
		"0003": {manifest: true, tiles: map[int]bool{}},
	}
	for s, w := range want {
		g := steps[s]
		if g == nil || g.manifest != w.manifest || g.plan != w.plan || g.result != w.result || len(g.tiles) != len(w.tiles) {
			t.Errorf("step %s: got %+v, want %+v", s, g, w)
			continue
		}
		for n := range w.tiles {
			if !g.tiles[n] {
				t.Errorf("step %s: tile %d missing", s, n)
			}
		}
	}
	for _, k := range lc.listed {
		if strings.Contains(k, ".zarr/") || strings.Contains(k, "/"+other+"/") {
			t.Errorf("listed %s: only the tile results of %s need listing", k, hash)
		}
	}
	if len(lc.listed) != 3 {
		t.Errorf("listed %d keys, want the 3 tile results of %s", len(lc.listed), hash)
	}
}
