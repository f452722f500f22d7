package measure

import (
	"encoding/json"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// TestProfileNumPy compares the saturation and porosity profiles of a
// random label volume (solid, wetting, nonwetting and outside voxels) along
// each flow axis with NumPy's per-slice counts (Source: numpy, run live by
// /usr/bin/python3; bins of ⌈n/256⌉ slices summed with numpy.add.reduceat),
// measured in 27 tiles. The values must agree exactly: both divide the same
// integer counts in float64.
func TestProfileNumPy(t *testing.T) {
	py := "/usr/bin/python3"
	if _, err := os.Stat(py); err != nil {
		t.Skip("/usr/bin/python3 missing")
	}
	shape := [3]int{520, 9, 11} // 520 slices along z → bins of 3, the last of 1
	lab := volume.NewShape[uint8](shape[0], shape[1], shape[2], 3e-6)
	rng := rand.New(rand.NewPCG(5, 17))
	for i := range lab.Pix {
		switch r := rng.IntN(20); {
		case r == 0:
			lab.Pix[i] = phase.Outside
		case r < 6:
			lab.Pix[i] = 0
		case r < 13:
			lab.Pix[i] = 1
		default:
			lab.Pix[i] = 2
		}
	}
	// Slices 99–101 along z (bin 33) hold no pore space: null S_n there.
	for z := 99; z < 102; z++ {
		for y := 0; y < shape[1]; y++ {
			for x := 0; x < shape[2]; x++ {
				lab.Pix[lab.Index(z, y, x)] = 0
			}
		}
	}
	dir := t.TempDir()
	raw := filepath.Join(dir, "lab.u8")
	if err := os.WriteFile(raw, lab.Pix, 0o644); err != nil {
		t.Fatal(err)
	}
	script := `
import json, sys
import numpy as np
a = np.fromfile(sys.argv[1], dtype=np.uint8).reshape(520, 9, 11)
out = []
for ax in range(3):
    other = tuple(i for i in range(3) if i != ax)
    n = a.shape[ax]
    w = -(-n // 256)
    starts = np.arange(0, n, w)
    def per(mask):
        return np.add.reduceat(mask.sum(axis=other), starts).astype(np.int64)
    wet, non, inside = per(a == 1), per(a == 2), per(a != 255)
    sn = [None if (k + m) == 0 else float(m) / float(k + m) for k, m in zip(wet, non)]
    phi = [None if q == 0 else float(k + m) / float(q) for k, m, q in zip(wet, non, inside)]
    out.append({"sn": sn, "phi": phi, "bin": int(w)})
print(json.dumps(out))
`
	b, err := exec.Command(py, "-c", script, raw).CombinedOutput()
	if err != nil {
		t.Fatalf("python: %v\n%s", err, b)
	}
	var ref []struct {
		Sn  []*float64 `json:"sn"`
		Phi []*float64 `json:"phi"`
		Bin int        `json:"bin"`
	}
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatalf("python output %s: %v", b, err)
	}
	same := func(a, b *float64) bool { return (a == nil) == (b == nil) && (a == nil || *a == *b) }
	for a := 0; a < 3; a++ {
		opt := profileOptions(a)
		tl := volume.Tiling{Whole: lab.Box, Tile: [3]int{174, 3, 4}} // 3 × 3 × 3 tiles
		parts, err := MeasureTiling(lab, tl, opt, 2)
		if err != nil {
			t.Fatal(err)
		}
		r, err := Combine(parts, lab.Box, lab.VoxelSize, opt)
		if err != nil {
			t.Fatal(err)
		}
		p := r.SatProfile
		if p.BinSlices != ref[a].Bin || len(p.SatNonwetting) != len(ref[a].Sn) {
			t.Fatalf("axis %d: %d bins of %d slices, NumPy %d of %d", a, len(p.SatNonwetting), p.BinSlices, len(ref[a].Sn), ref[a].Bin)
		}
		bad := 0
		for k := range p.SatNonwetting {
			if !same(p.SatNonwetting[k], ref[a].Sn[k]) || !same(p.Porosity[k], ref[a].Phi[k]) {
				bad++
			}
		}
		if bad > 0 {
			t.Errorf("axis %d: %d of %d bins differ from NumPy", a, bad, len(p.SatNonwetting))
		}
		if a == 0 && p.SatNonwetting[33] != nil {
			t.Errorf("bin 33 (slices 99–101, all solid) has S_n %v", *p.SatNonwetting[33])
		}
	}
}
