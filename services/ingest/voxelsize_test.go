package ingest

import (
	"context"
	"errors"
	"io/fs"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// TestScanWithoutVoxelSizeRefused (issue 13, item 6): a campaign refuses a
// scan whose voxel size is in neither the config nor the file's metadata,
// before anything of it is stored; it used to be stored with 1 µm, which
// then went into every area, curvature and Pc of the series. With the
// config's voxel_size the same file is stored with that size, and the
// file's own metadata is used when the config has none.
func TestScanWithoutVoxelSizeRefused(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	write := func(name string, vs float64) string {
		v := volume.NewShape[uint16](16, 16, 16, vs)
		for i := range v.Pix {
			v.Pix[i] = uint16(1000 + i%7)
		}
		p := filepath.Join(dir, name)
		if err := volio.WriteRaw(p, v, volio.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
		return p
	}
	bare := write("scan-0001.raw", 0)
	cfg := campaign.Default()
	cfg.Tile = 16
	if _, err := EnsureCampaign(ctx, st, "novs", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	in := &Ingester{Store: st, Version: "test"}
	_, err = in.StoreStep(ctx, Request{Campaign: "novs", Step: "scan-0001", Path: bare, HasTime: true})
	if err == nil || !strings.Contains(err.Error(), bare) || !strings.Contains(err.Error(), "voxel size") || strings.Contains(err.Error(), "\n") {
		t.Fatalf("scan without voxel size in a campaign without one: %v, want one line naming the file and the voxel size", err)
	}
	if !errors.Is(err, volio.ErrFormat) {
		t.Errorf("%v does not count as a bad scan file (volio.ErrFormat)", err)
	}
	step, _ := layout.NewStep("novs", "scan-0001")
	if err := campaign.GetJSON(ctx, st, step.Manifest(), &campaign.Manifest{}); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("refused scan has a manifest (err %v)", err)
	}
	t.Logf("refused: %v", err)

	// The file's metadata is enough.
	withVS := write("scan-0002.raw", 3e-6)
	man, err := in.StoreStep(ctx, Request{Campaign: "novs", Step: "scan-0002", Path: withVS, HasTime: true})
	if err != nil {
		t.Fatal(err)
	}
	if man.VoxelSize != 3e-6 {
		t.Errorf("voxel size from the file's header: %g, want 3e-6", man.VoxelSize)
	}

	// The config's voxel size wins over the file's, and serves a bare file.
	cfg.VoxelSize = "4um"
	if _, err := EnsureCampaign(ctx, st, "withvs", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	for i, p := range []string{bare, withVS} {
		step := []string{"scan-0001", "scan-0002"}[i]
		man, err := in.StoreStep(ctx, Request{Campaign: "withvs", Step: step, Path: p, HasTime: true})
		if err != nil {
			t.Fatalf("%s with voxel_size 4um: %v", p, err)
		}
		if man.VoxelSize != 4e-6 {
			t.Errorf("%s: voxel size %g, want 4e-6 from the config", p, man.VoxelSize)
		}
	}
}
