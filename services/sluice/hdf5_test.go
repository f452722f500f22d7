//go:build hdf5 && cgo

package main

import (
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// `sluice measure` gives the same numbers from an HDF5 file (gzip chunks,
// voxel size from its attribute) as from the same labels in a raw file,
// and refuses bad HDF5 input in one line with exit 2.
func TestMeasureHDF5(t *testing.T) {
	if out, err := exec.Command(refPython, "-c", "import numpy, h5py").CombinedOutput(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("numpy/h5py unavailable in %s: %s", refPython, out)
		}
		t.Skipf("numpy/h5py unavailable in %s: %s", refPython, out)
	}
	dir := t.TempDir()
	// Source: h5py (Debian python3-h5py) writes the file; the raw copy is
	// numpy's tofile of the same array.
	pythonRef(t, `
import sys, os, numpy as np, h5py
d = sys.argv[1]
z, y, x = np.mgrid[:40, :40, :40]
lab = np.full((40, 40, 40), 1, "u1")
lab[(z - 20)**2 + (y - 20)**2 + (x - 22)**2 < 100] = 2
lab[:, :3, :] = 0
with h5py.File(os.path.join(d, "lab.h5"), "w") as f:
    f.attrs["default"] = "entry"
    e = f.create_group("entry"); e.attrs["default"] = "data"
    g = e.create_group("data"); g.attrs["signal"] = "labels"
    ds = g.create_dataset("labels", data=lab, chunks=(16, 16, 16), compression="gzip", shuffle=True)
    ds.attrs["voxel_size"] = "2um"
    f.create_dataset("flat", data=lab[0])
lab.tofile(os.path.join(d, "lab.raw"))
`, dir)
	h5 := measureJSON(t, "--labels", filepath.Join(dir, "lab.h5"))
	raw := measureJSON(t, "--labels", "--shape", "40,40,40", "--dtype", "uint8", "--voxel-size", "2um", filepath.Join(dir, "lab.raw"))
	if !reflect.DeepEqual(h5, raw) {
		t.Errorf("HDF5 and raw results differ:\n%v\n%v", h5, raw)
	}
	if h5["voxel_size_m"] != 2e-6 {
		t.Errorf("voxel size %v, want 2e-06 from the attribute", h5["voxel_size_m"])
	}
	for _, c := range []struct {
		args []string
		msg  string
	}{
		{[]string{"--dataset", "/flat"}, "lab.h5: dataset /flat: has 2 dimensions (40×40), want 3"},
		{[]string{"--dataset", "/nope"}, "lab.h5: no dataset /nope in the file"},
	} {
		code, _, errs := runCLI(t, append(append([]string{"measure", "--labels"}, c.args...), filepath.Join(dir, "lab.h5"))...)
		if code != 2 || !strings.Contains(errs, c.msg) || strings.Count(strings.TrimSpace(errs), "\n") != 0 {
			t.Errorf("%v: exit %d, %q; want exit 2 and one line with %q", c.args, code, errs, c.msg)
		}
	}
}

// The config's hdf5_dataset names the dataset when --dataset does not;
// --dataset overrides it.
func TestMeasureHDF5DatasetFromConfig(t *testing.T) {
	if out, err := exec.Command(refPython, "-c", "import numpy, h5py").CombinedOutput(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("numpy/h5py unavailable in %s: %s", refPython, out)
		}
		t.Skipf("numpy/h5py unavailable in %s: %s", refPython, out)
	}
	dir := t.TempDir()
	pythonRef(t, `
import sys, os, numpy as np, h5py
lab = np.full((20, 20, 20), 1, "u1"); lab[5:12, 5:12, 5:12] = 2; lab[:, :2, :] = 0
with h5py.File(os.path.join(sys.argv[1], "two.h5"), "w") as f:
    f.create_dataset("a/labels", data=lab)
    f.create_dataset("b/labels", data=np.where(lab == 2, 1, lab).astype("u1"))
`, dir)
	cfg := filepath.Join(dir, "c.yaml")
	if err := os.WriteFile(cfg, []byte("voxel_size: 2um\nhdf5_dataset: /a/labels\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	file := filepath.Join(dir, "two.h5")
	a := measureJSON(t, "--labels", "--config", cfg, file)
	if a["saturation_nonwetting"].(float64) <= 0 {
		t.Errorf("config's dataset /a/labels: saturation_nonwetting %v, want > 0", a["saturation_nonwetting"])
	}
	b := measureJSON(t, "--labels", "--config", cfg, "--dataset", "/b/labels", file)
	if b["saturation_nonwetting"].(float64) != 0 {
		t.Errorf("--dataset /b/labels: saturation_nonwetting %v, want 0", b["saturation_nonwetting"])
	}
	code, _, errs := runCLI(t, "measure", "--labels", "--voxel-size", "2um", file)
	if code != 2 || !strings.Contains(errs, "name the dataset with --dataset") {
		t.Errorf("no dataset named: exit %d %q", code, errs)
	}
}
