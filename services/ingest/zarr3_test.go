package ingest

import (
	"context"
	"encoding/binary"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// A Zarr v3 scan written by zarrita — uint16 in zstd inner chunks of
// 5×6×7 in shards of 10×12×14 (index at the end with crc32c), which line
// up neither with sluice's tiles nor with the array's edges — is ingested
// band by band into the step's Zarr array voxel for voxel, with the voxel
// size and time of its attributes in the manifest.
func TestIngestZarr3(t *testing.T) {
	dir, _ := filepath.Abs(filepath.Join("..", "..", "tests", "zarr3"))
	node, err := exec.LookPath("node")
	if err == nil {
		_, err = os.Stat(filepath.Join(dir, "node_modules", "zarrita", "package.json"))
	}
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("node or zarrita missing (scripts/setup-test-env installs them): %v", err)
		}
		t.Skipf("node or zarrita missing (make setup): %v", err)
	}
	ctx := context.Background()
	tmp := t.TempDir()
	shape := [3]int{21, 25, 29}
	ref := make([]byte, 2*shape[0]*shape[1]*shape[2])
	for i := 0; i < len(ref)/2; i++ {
		binary.LittleEndian.PutUint16(ref[2*i:], uint16(i*7919%60000))
	}
	raw := filepath.Join(tmp, "ref.bin")
	if err := os.WriteFile(raw, ref, 0o644); err != nil {
		t.Fatal(err)
	}
	le := map[string]any{"name": "bytes", "configuration": map[string]any{"endian": "little"}}
	zs := map[string]any{"name": "zstd", "configuration": map[string]any{"level": 3, "checksum": false}}
	spec, _ := json.Marshal(map[string]any{"raw": raw, "dtype": "uint16", "shape": shape,
		"sharding":   map[string]any{"shard": []int{10, 12, 14}, "inner": []int{5, 6, 7}, "innerCodecs": []any{le, zs}},
		"attributes": map[string]any{"voxel_size": "3um", "time_s": 42.5}})
	sf := filepath.Join(tmp, "spec.json")
	os.WriteFile(sf, spec, 0o644)
	scan := filepath.Join(tmp, "scan-0001.zarr")
	if out, err := exec.Command(node, filepath.Join(dir, "write.mjs"), "array", scan, sf).CombinedOutput(); err != nil {
		t.Fatalf("write.mjs: %v\n%s", err, out)
	}
	st, err := store.Open(ctx, filepath.Join(tmp, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = 16
	if _, err := EnsureCampaign(ctx, st, "z3", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	in := &Ingester{Store: st, Version: "test", ReadOpt: volio.Options{RequireChunks: true}}
	man, err := in.StoreStep(ctx, Request{Campaign: "z3", Step: "scan-0001", Path: scan})
	if err != nil {
		t.Fatal(err)
	}
	if man.VoxelSize != 3e-6 || man.TimeS != 42.5 {
		t.Errorf("manifest voxel size %g, time %g; want 3e-6 and 42.5 from the attributes", man.VoxelSize, man.TimeS)
	}
	step, _ := layout.NewStep("z3", "scan-0001")
	z, err := volio.OpenZarr(ctx, st, strings.TrimSuffix(step.Volume(), "/"))
	if err != nil {
		t.Fatal(err)
	}
	got, err := z.ReadBox(ctx, volume.BoxOf(shape[0], shape[1], shape[2]))
	if err != nil {
		t.Fatal(err)
	}
	g := got.(*volume.Volume[uint16])
	diff := 0
	for i := range g.Pix {
		if g.Pix[i] != binary.LittleEndian.Uint16(ref[2*i:]) {
			diff++
		}
	}
	if diff != 0 {
		t.Errorf("%d of %d stored voxels differ from the Zarr v3 array", diff, len(g.Pix))
	}
}
