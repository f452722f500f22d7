package tracking

import (
	"encoding/json"
	"fmt"
	"reflect"
	"testing"

	"sluice/pkg/cluster"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

type box [6]int

func (b box) fill(v *volume.Labels, code uint8) {
	for z := b[0]; z < b[1]; z++ {
		for y := b[2]; y < b[3]; y++ {
			for x := b[4]; x < b[5]; x++ {
				v.Set(z, y, x, code)
			}
		}
	}
}

// history builds three steps (t = 0, 10, 20 s) of a 20×16×16 volume, flow
// along z, all pore space, with a known history:
//
//	s1: A (27 voxels), B (36), D (8), F (8) trapped; C a column from inlet to outlet
//	s2: A unchanged; B split in B1, B2 (12 each); D shifted one voxel in x
//	    (moved); F grown to 12 voxels (moved); E (8) appears; C unchanged
//	s3: A vanishes; B1, B2 merge back into B; D, E, F, C unchanged
func history() []*volume.Labels {
	var out []*volume.Labels
	for s := range 3 {
		v := volume.NewShape[uint8](20, 16, 16, 1e-6)
		for i := range v.Pix {
			v.Pix[i] = 1
		}
		box{0, 20, 14, 16, 14, 16}.fill(v, 2) // C
		if s == 0 {
			box{16, 18, 8, 10, 6, 8}.fill(v, 2) // F
		} else {
			box{16, 18, 8, 10, 6, 9}.fill(v, 2) // F grown
		}
		switch s {
		case 0:
			box{3, 6, 2, 5, 2, 5}.fill(v, 2)     // A
			box{10, 13, 8, 14, 2, 4}.fill(v, 2)  // B
			box{14, 16, 2, 4, 10, 12}.fill(v, 2) // D
		case 1:
			box{3, 6, 2, 5, 2, 5}.fill(v, 2)     // A
			box{10, 13, 8, 10, 2, 4}.fill(v, 2)  // B1
			box{10, 13, 12, 14, 2, 4}.fill(v, 2) // B2
			box{14, 16, 2, 4, 11, 13}.fill(v, 2) // D moved
			box{7, 9, 10, 12, 10, 12}.fill(v, 2) // E
		case 2:
			box{10, 13, 8, 14, 2, 4}.fill(v, 2)  // B merged
			box{14, 16, 2, 4, 11, 13}.fill(v, 2) // D
			box{7, 9, 10, 12, 10, 12}.fill(v, 2) // E
		}
		out = append(out, v)
	}
	return out
}

func track(t *testing.T, steps []*volume.Labels, cores []volume.Box) []*Result {
	t.Helper()
	opt := cluster.Options{Connectivity: 26, FlowAxis: 0}
	whole := steps[0].Box
	var out []*Result
	var before []Trapped
	for k := 1; k < len(steps); k++ {
		var tiles []*Tile
		for _, c := range cores {
			tl, err := TileOf(steps[k-1].Crop(c, 0), steps[k].Crop(c, 0), c, whole, phase.Default(), opt)
			if err != nil {
				t.Fatal(err)
			}
			b, _ := json.Marshal(tl)
			var back Tile
			if err := json.Unmarshal(b, &back); err != nil {
				t.Fatal(err)
			}
			tiles = append(tiles, &back)
		}
		l, err := Join(tiles, whole, opt)
		if err != nil {
			t.Fatal(err)
		}
		r := Track(l, fmt.Sprintf("s%d", k), 10*float64(k-1), fmt.Sprintf("s%d", k+1), 10*float64(k), before)
		before = r.Trapped
		out = append(out, r)
	}
	return out
}

// TestKnownHistory: the links, trapped ganglia, their births, lifetimes
// and moves of the constructed history (Source: by construction, see
// history), the same for every tiling.
func TestKnownHistory(t *testing.T) {
	steps := history()
	whole := steps[0].Box
	ref := track(t, steps, []volume.Box{whole})
	type counts struct{ one, split, merge, appear, vanish int }
	for i, want := range []counts{{4, 1, 0, 1, 0}, {4, 0, 1, 0, 1}} {
		r := ref[i]
		if got := (counts{r.OneToOne, r.Splits, r.Merges, r.Appeared, r.Vanished}); got != want {
			t.Errorf("step %d: links %+v, want %+v", i+2, got, want)
		}
	}
	// s2 trapped: A 27 (born s1, 10 s), D 8 and F 12 moved (born s1, 10 s),
	// B1, B2, E (born s2, 0 s); moved 2 of 3 one-to-one trapped; mean 30/6 s.
	life := func(r *Result) map[int64][]string {
		m := map[int64][]string{}
		for _, g := range r.Trapped {
			m[g.Voxels] = append(m[g.Voxels], fmt.Sprintf("%s/%g/%v", g.BornStep, g.LifetimeS, g.Moved))
		}
		return m
	}
	want2 := map[int64][]string{27: {"s1/10/false"}, 12: {"s2/0/false", "s2/0/false", "s1/10/true"}, 8: {"s2/0/false", "s1/10/true"}}
	if got := life(ref[0]); !reflect.DeepEqual(got, want2) {
		t.Errorf("s2 trapped %v, want %v", got, want2)
	}
	if f := ref[0].TrappedMovedFraction; f == nil || *f != 2.0/3 {
		t.Errorf("s2 moved fraction %v, want 2/3", f)
	}
	if m := ref[0].LifetimeMeanS; m == nil || *m != 5 {
		t.Errorf("s2 mean lifetime %v, want 5 s", m)
	}
	// s3 trapped: B 36 (merged: born s3), D 8 and F 12 (born s1, 20 s, not
	// moved), E 8 (born s2, 10 s); moved 0 of 3; mean 50/4 s;
	// S_trapped = 64/5120.
	want3 := map[int64][]string{36: {"s3/0/false"}, 12: {"s1/20/false"}, 8: {"s2/10/false", "s1/20/false"}}
	if got := life(ref[1]); !reflect.DeepEqual(got, want3) {
		t.Errorf("s3 trapped %v, want %v", got, want3)
	}
	if f := ref[1].TrappedMovedFraction; f == nil || *f != 0 {
		t.Errorf("s3 moved fraction %v, want 0", f)
	}
	if m := ref[1].LifetimeMeanS; m == nil || *m != 12.5 {
		t.Errorf("s3 mean lifetime %v, want 12.5 s", m)
	}
	if s := ref[1].TrappedSaturation; s == nil || *s != 64.0/5120 {
		t.Errorf("s3 trapped saturation %v, want 64/5120", s)
	}
	for _, e := range [][3]int{{8, 8, 8}, {7, 5, 3}, {20, 1, 16}, {3, 16, 16}} {
		got := track(t, steps, volume.Tiling{Whole: whole, Tile: e}.Cores())
		if !reflect.DeepEqual(got, ref) {
			t.Errorf("tiles %v: %+v / %+v, whole volume %+v / %+v", e, *got[0], *got[1], *ref[0], *ref[1])
		}
	}
}
