package filling

import (
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"sort"
	"strings"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

const (
	solid uint8 = 0
	wet   uint8 = 1
	non   uint8 = 2
)

// box is a half-open box [z0,z1)×[y0,y1)×[x0,x1).
type box [6]int

func (b box) voxels() int64 { return int64((b[1] - b[0]) * (b[3] - b[2]) * (b[5] - b[4])) }

func (b box) fill(v *volume.Labels, code uint8) {
	for z := b[0]; z < b[1]; z++ {
		for y := b[2]; y < b[3]; y++ {
			for x := b[4]; x < b[5]; x++ {
				v.Set(z, y, x, code)
			}
		}
	}
}

// centroidSum is Σ of the voxel indices over the box, per axis:
// n_other · Σ_{i=a}^{b−1} i = n_other · (a+b−1)(b−a)/2.
func (b box) centroidSum() [3]float64 {
	n := b.voxels()
	var s [3]float64
	for a := range 3 {
		lo, hi := b[2*a], b[2*a+1]
		s[a] = float64(n) / float64(hi-lo) * float64((lo+hi-1)*(hi-lo)) / 2
	}
	return s
}

// expect is an event made of boxes, with its volume and centroid from the
// boxes by hand (Source: the definition of the centroid as the mean voxel
// index; box sums by the arithmetic series).
func expect(bs ...box) Event {
	var e Event
	var s [3]float64
	for _, b := range bs {
		e.Voxels += b.voxels()
		c := b.centroidSum()
		for a := range 3 {
			s[a] += c[a]
		}
	}
	for a := range 3 {
		e.Centroid[a] = s[a] / float64(e.Voxels)
	}
	return e
}

// knownPair builds a step pair with known changed regions (see the comments)
// and returns both label volumes with the expected drainage and imbibition
// events, largest first.
func knownPair() (prev, cur *volume.Labels, drainage, imbibition []Event) {
	const h = 2e-6
	prev = volume.NewShape[uint8](30, 28, 34, h)
	for i := range prev.Pix {
		prev.Pix[i] = wet
	}
	// Nonwetting in the earlier step: I1 (half of it imbibed later) and I2.
	i1all := box{5, 12, 18, 26, 2, 10}
	i1 := box{5, 12, 18, 26, 2, 6}  // 224 voxels n→w
	i2 := box{8, 10, 8, 10, 28, 34} // 24 voxels n→w, on the volume's +x face
	i1all.fill(prev, non)
	i2.fill(prev, non)
	// Solid in the earlier step, nonwetting later: no event.
	d4 := box{2, 4, 20, 24, 25, 30}
	d4.fill(prev, solid)
	// Outside the sample in the earlier step, nonwetting later: no event.
	out := box{26, 30, 0, 3, 0, 3}
	out.fill(prev, phase.Outside)

	cur = prev.Clone()
	d1 := box{2, 6, 3, 8, 4, 9}       // 100 voxels inside one 8³ tile
	d2 := box{13, 19, 14, 18, 15, 20} // 120 voxels across the borders at 16 on every axis
	// Two boxes meeting only at a corner, (23,23,15)–(24,24,16), across the
	// border at 16 (and at 8, 24 for 8³ tiles): one 26-connected event.
	d3a, d3b := box{20, 24, 20, 24, 12, 16}, box{24, 26, 24, 26, 16, 18}
	d6 := box{29, 30, 27, 28, 33, 34} // the last voxel of the volume
	d7 := box{5, 12, 18, 26, 0, 2}    // 112 voxels, face to face with I1: another kind, another event
	d8 := box{27, 29, 10, 12, 20, 23} // 12 voxels
	d9 := box{27, 29, 13, 15, 20, 23} // 12 voxels, one voxel apart from D8: separate
	for _, b := range []box{d1, d2, d3a, d3b, d6, d7, d8, d9, d4, out} {
		b.fill(cur, non)
	}
	i1.fill(cur, wet)
	i2.fill(cur, wet)
	// Wetting then solid: no event.
	box{14, 16, 2, 6, 28, 32}.fill(cur, solid)

	drainage = []Event{expect(d2), expect(d7), expect(d1), expect(d3a, d3b), expect(d8), expect(d9), expect(d6)}
	imbibition = []Event{expect(i1), expect(i2)}
	return prev, cur, drainage, imbibition
}

// events runs the tile partials of a tiling through JSON (as the
// aggregator stores them) and joins them.
func events(t *testing.T, prev, cur *volume.Labels, cores []volume.Box) (d, im []Event) {
	t.Helper()
	whole := cur.Box
	var tiles []*Tile
	for _, c := range cores {
		// Each tile sees only its core, as the aggregator reads it.
		tl, err := TileOf(prev.Crop(c, 0), cur.Crop(c, 0), c, whole, phase.Default())
		if err != nil {
			t.Fatal(err)
		}
		b, err := json.Marshal(tl)
		if err != nil {
			t.Fatal(err)
		}
		var back Tile
		if err := json.Unmarshal(b, &back); err != nil {
			t.Fatal(err)
		}
		tiles = append(tiles, &back)
	}
	d, im, err := Join(tiles, whole)
	if err != nil {
		t.Fatal(err)
	}
	return d, im
}

func tilings(whole volume.Box) map[string][]volume.Box {
	out := map[string][]volume.Box{"whole": {whole}}
	for _, e := range [][3]int{{16, 16, 16}, {8, 8, 8}, {7, 7, 7}, {5, 9, 13}, {30, 1, 34}} {
		out[fmt.Sprint(e)] = volume.Tiling{Whole: whole, Tile: e}.Cores()
	}
	return out
}

// TestKnownRegions: a step pair with changed regions known by construction
// gives exactly their count, volumes and centroids, whatever the tiling —
// regions crossing tile borders, a region joined only through a corner
// across a border, regions one voxel apart, the two kinds face to face,
// and changes from or to solid and outside that are no events.
func TestKnownRegions(t *testing.T) {
	prev, cur, wantD, wantI := knownPair()
	for name, cores := range tilings(cur.Box) {
		d, im := events(t, prev, cur, cores)
		if !reflect.DeepEqual(d, wantD) {
			t.Errorf("%s: drainage events\n got %v\nwant %v", name, d, wantD)
		}
		if !reflect.DeepEqual(im, wantI) {
			t.Errorf("%s: imbibition events\n got %v\nwant %v", name, im, wantI)
		}
	}
	// SI summary: 7 drainage events of 429 voxels (by hand: 120 + 112 +
	// 100 + 72 + 12 + 12 + 1) at h = 2 µm over 30 s.
	d, _ := events(t, prev, cur, []volume.Box{cur.Box})
	k := Summarize(d, 2e-6, 30)
	if k.Count != 7 || k.Voxels != 429 || math.Abs(k.VolumeM3-429*8e-18) > 1e-30 || k.RatePerS == nil || math.Abs(*k.RatePerS-7.0/30) > 1e-15 {
		t.Errorf("summary: count %d, %d voxels, %g m³, rate %v", k.Count, k.Voxels, k.VolumeM3, k.RatePerS)
	}
	// Log bins by hand: 1 → bin 0; 12, 12 → bin 3 (8–15); 72, 100, 112,
	// 120 → bin 6 (64–127).
	if want := []int64{1, 0, 0, 2, 0, 0, 4}; !reflect.DeepEqual(k.Histogram, want) {
		t.Errorf("histogram %v, want %v", k.Histogram, want)
	}
	if math.Abs(k.BinLowM3[6]-64*8e-18) > 1e-30 {
		t.Errorf("bin 6 starts at %g m³, want %g", k.BinLowM3[6], 64*8e-18)
	}
	// D2 spans z 13–18: centroid index 15.5 → (15.5 + ½)·2 µm = 32 µm.
	if got := k.Largest[0].CentroidM[0]; math.Abs(got-32e-6) > 1e-18 {
		t.Errorf("largest drainage event centroid z %g m, want 3.2e-05", got)
	}
	if z := Summarize(d, 2e-6, 0); z.RatePerS != nil {
		t.Errorf("rate at Δt = 0: %v, want null", *z.RatePerS)
	}
}

// TestNoChangeNoEvents: identical steps give no events, and the summary
// has empty lists, not nulls.
func TestNoChangeNoEvents(t *testing.T) {
	prev, _, _, _ := knownPair()
	d, im := events(t, prev, prev, volume.Tiling{Whole: prev.Box, Tile: [3]int{8, 8, 8}}.Cores())
	if len(d) != 0 || len(im) != 0 {
		t.Fatalf("%d drainage and %d imbibition events between equal steps", len(d), len(im))
	}
	b, _ := json.Marshal(Between("s0", d, im, 1e-6, 10))
	if !strings.Contains(string(b), `"count":0`) || !strings.Contains(string(b), `"largest":[]`) {
		t.Errorf("JSON %s", b)
	}
}

// TestRefusesBadInput: a core outside either step's labels, and tiles
// whose cores do not cover the volume, are errors.
func TestRefusesBadInput(t *testing.T) {
	prev, cur, _, _ := knownPair()
	small := prev.Crop(volume.Box{Max: [3]int{8, 8, 8}}, 0)
	if _, err := TileOf(small, cur, volume.Box{Max: [3]int{9, 8, 8}}, cur.Box, phase.Default()); err == nil {
		t.Error("core outside the earlier step's labels accepted")
	}
	tl, err := TileOf(prev, cur, volume.Box{Max: [3]int{8, 8, 8}}, cur.Box, phase.Default())
	if err != nil {
		t.Fatal(err)
	}
	if _, _, err := Join([]*Tile{tl}, cur.Box); err == nil {
		t.Error("one 8³ tile joined as the whole volume")
	}
	core := volume.Box{Max: [3]int{8, 8, 8}}
	if tl, err = TileOf(prev, cur, core, core, phase.Default()); err != nil {
		t.Fatal(err)
	}
	if _, _, err := Join([]*Tile{tl}, core); err != nil {
		t.Fatalf("a complete tile: %v", err)
	}
	if len(tl.Drainage.Sum) == 0 {
		t.Fatal("no drainage in the 8³ corner: D1 lies there")
	}
	tl.Drainage.Sum = tl.Drainage.Sum[:0]
	if _, _, err := Join([]*Tile{tl}, core); err == nil {
		t.Error("a tile without coordinate sums joined")
	}
}

// TestScipyLabel compares the event regions of random step pairs with
// scipy.ndimage.label on the change masks with a 3×3×3 structure
// (26-connectivity) and scipy.ndimage.center_of_mass (Source: SciPy,
// run live by /usr/bin/python3): the same number of regions, the same
// sizes, and centroids within 1e-9 voxel (both divide the same integer
// sums; measured difference 0 or one rounding step).
func TestScipyLabel(t *testing.T) {
	needScipy(t)
	shape := [3]int{23, 19, 29}
	rng := rand.New(rand.NewPCG(3, 11))
	prev := volume.NewShape[uint8](shape[0], shape[1], shape[2], 1e-6)
	for i := range prev.Pix {
		switch r := rng.IntN(20); {
		case r == 0:
			prev.Pix[i] = phase.Outside
		case r < 5:
			prev.Pix[i] = solid
		case r < 13:
			prev.Pix[i] = wet
		default:
			prev.Pix[i] = non
		}
	}
	cur := prev.Clone()
	for i, v := range cur.Pix {
		if (v == wet || v == non) && rng.IntN(3) == 0 {
			cur.Pix[i] = 3 - v // w ↔ n
		}
		if rng.IntN(50) == 0 {
			cur.Pix[i] = solid // segmentation noise: no event
		}
	}
	dir := t.TempDir()
	if err := os.WriteFile(filepath.Join(dir, "prev.u8"), prev.Pix, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(dir, "cur.u8"), cur.Pix, 0o644); err != nil {
		t.Fatal(err)
	}
	script := `
import json, sys
import numpy as np
from scipy import ndimage
d = sys.argv[1]
shape = tuple(int(s) for s in sys.argv[2:5])
p = np.fromfile(d + "/prev.u8", dtype=np.uint8).reshape(shape)
c = np.fromfile(d + "/cur.u8", dtype=np.uint8).reshape(shape)
out = {}
for name, mask in (("drainage", (p == 1) & (c == 2)), ("imbibition", (p == 2) & (c == 1))):
    lab, n = ndimage.label(mask, structure=np.ones((3, 3, 3), dtype=int))
    sizes = np.bincount(lab.ravel())[1:]
    cms = ndimage.center_of_mass(mask, lab, range(1, n + 1))
    out[name] = [[int(s), [float(v) for v in cm]] for s, cm in zip(sizes, cms)]
print(json.dumps(out))
`
	b, err := exec.Command(referencePython, "-c", script, dir, fmt.Sprint(shape[0]), fmt.Sprint(shape[1]), fmt.Sprint(shape[2])).CombinedOutput()
	if err != nil {
		t.Fatalf("scipy reference failed: %v\n%s", err, b)
	}
	var ref map[string][][2]json.RawMessage
	if err := json.Unmarshal(b, &ref); err != nil {
		t.Fatalf("scipy printed %s: %v", b, err)
	}
	refEvents := func(name string) []Event {
		var ev []Event
		for _, r := range ref[name] {
			var e Event
			var c []float64
			if json.Unmarshal(r[0], &e.Voxels) != nil || json.Unmarshal(r[1], &c) != nil || len(c) != 3 {
				t.Fatalf("scipy %s entry %s", name, r)
			}
			copy(e.Centroid[:], c)
			ev = append(ev, e)
		}
		return ev
	}
	canon := func(ev []Event) []Event {
		out := append([]Event(nil), ev...)
		key := func(e Event) string {
			return fmt.Sprintf("%09d %.6f %.6f %.6f", e.Voxels, e.Centroid[0], e.Centroid[1], e.Centroid[2])
		}
		sort.Slice(out, func(i, j int) bool { return key(out[i]) < key(out[j]) })
		return out
	}
	for name, cores := range tilings(cur.Box) {
		d, im := events(t, prev, cur, cores)
		for _, k := range []struct {
			name string
			got  []Event
		}{{"drainage", d}, {"imbibition", im}} {
			want := canon(refEvents(k.name))
			got := canon(k.got)
			if len(got) != len(want) {
				t.Errorf("%s %s: %d regions, scipy %d", name, k.name, len(got), len(want))
				continue
			}
			if len(got) < 20 {
				t.Fatalf("%s: only %d regions: the test volume is too sparse to check anything", k.name, len(got))
			}
			for i := range got {
				if got[i].Voxels != want[i].Voxels {
					t.Errorf("%s %s region %d: %d voxels, scipy %d", name, k.name, i, got[i].Voxels, want[i].Voxels)
					break
				}
				for a := range 3 {
					if math.Abs(got[i].Centroid[a]-want[i].Centroid[a]) > 1e-9 {
						t.Errorf("%s %s region %d: centroid %v, scipy %v", name, k.name, i, got[i].Centroid, want[i].Centroid)
						break
					}
				}
			}
		}
	}
}

// referencePython is the Debian interpreter that carries scipy; the python3
// first on PATH does not.
const referencePython = "/usr/bin/python3"

func needScipy(t testing.TB) {
	t.Helper()
	out, err := exec.Command(referencePython, "-c", "import scipy.ndimage, numpy").CombinedOutput()
	if err == nil {
		return
	}
	msg := "scipy is not importable by " + referencePython + " (apt-get install python3-scipy): " + strings.TrimSpace(string(out))
	if os.Getenv("CI") != "" {
		t.Fatal(msg)
	}
	t.Skip(msg)
}
