//go:build hdf5 && cgo

package ingest

import (
	"context"
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

// An HDF5 scan (h5py, gzip chunks that do not line up with sluice's tiles)
// is ingested band by band into the step's Zarr array voxel for voxel, with
// the voxel size and time of its dataset attributes in the manifest.
func TestIngestHDF5(t *testing.T) {
	const py = "/usr/bin/python3"
	if out, err := exec.Command(py, "-c", "import numpy, h5py").CombinedOutput(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("numpy/h5py unavailable in %s: %s", py, out)
		}
		t.Skipf("numpy/h5py unavailable in %s: %s", py, out)
	}
	ctx := context.Background()
	dir := t.TempDir()
	// Source: h5py (Debian python3-h5py) writes the file; numpy's tofile the
	// raw copy it is compared with.
	out, err := exec.Command(py, "-c", `
import sys, os, numpy as np, h5py
d = sys.argv[1]
a = np.random.default_rng(3).integers(0, 60000, (20, 24, 28)).astype(">u2")
with h5py.File(os.path.join(d, "scan-0001.h5"), "w") as f:
    ds = f.create_dataset("exchange/data", data=a, chunks=(7, 5, 9), compression="gzip", shuffle=True)
    ds.attrs["voxel_size"] = "3um"
    ds.attrs["time_s"] = 42.5
a.astype("<u2").tofile(os.path.join(d, "ref.bin"))
`, dir).CombinedOutput()
	if err != nil {
		t.Fatalf("python: %v\n%s", err, out)
	}
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = 16
	if _, err := EnsureCampaign(ctx, st, "h5", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	in := &Ingester{Store: st, Version: "test", ReadOpt: volio.Options{RequireChunks: true}}
	man, err := in.StoreStep(ctx, Request{Campaign: "h5", Step: "scan-0001", Path: filepath.Join(dir, "scan-0001.h5")})
	if err != nil {
		t.Fatal(err)
	}
	if man.VoxelSize != 3e-6 || man.TimeS != 42.5 {
		t.Errorf("manifest voxel size %g, time %g; want 3e-6 and 42.5 from the dataset attributes", man.VoxelSize, man.TimeS)
	}
	step, _ := layout.NewStep("h5", "scan-0001")
	z, err := volio.OpenZarr(ctx, st, strings.TrimSuffix(step.Volume(), "/"))
	if err != nil {
		t.Fatal(err)
	}
	got, err := z.ReadBox(ctx, volume.BoxOf(20, 24, 28))
	if err != nil {
		t.Fatal(err)
	}
	want, err := volio.Open(filepath.Join(dir, "ref.bin"), volio.Options{Shape: [3]int{20, 24, 28}, DType: volume.Uint16})
	if err != nil {
		t.Fatal(err)
	}
	g, w := got.(*volume.Volume[uint16]), want.(*volume.Volume[uint16])
	diff := 0
	for i := range w.Pix {
		if g.Pix[i] != w.Pix[i] {
			diff++
		}
	}
	if diff != 0 {
		t.Errorf("%d of %d stored voxels differ from the HDF5 dataset", diff, len(w.Pix))
	}
}
