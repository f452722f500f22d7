package measure

import (
	"encoding/json"
	"testing"
)

// Source: common practice — parallel work inside a tile must not change the
// result: every partial, serialised, is byte for byte the same whatever
// Options.Workers is (exact counts, histograms and clusters; the sums are
// taken in voxel order, so they are bit-identical too).
func TestWorkersInvariance(t *testing.T) {
	lab := scene(48, 5)
	core := lab.Box.Grow(-14)
	for _, c := range []struct {
		name string
		core [2][3]int
	}{
		{"whole", [2][3]int{lab.Box.Min, lab.Box.Max}},
		{"inner", [2][3]int{core.Min, core.Max}},
	} {
		var want []byte
		for _, w := range []int{1, 2, 3, 7} {
			opt := Defaults()
			opt.Workers = w
			box := lab.Box
			box.Min, box.Max = c.core[0], c.core[1]
			p, err := MeasureTile(lab, box, lab.Box, opt)
			if err != nil {
				t.Fatal(err)
			}
			if p.Contact.N == 0 || p.Curvature.Voxels == 0 {
				t.Fatalf("%s: scene too simple: %d angle samples, %d curvature voxels", c.name, p.Contact.N, p.Curvature.Voxels)
			}
			got, err := json.Marshal(p)
			if err != nil {
				t.Fatal(err)
			}
			if want == nil {
				want = got
				continue
			}
			if string(got) != string(want) {
				t.Errorf("%s: %d workers give a different partial than 1", c.name, w)
			}
		}
	}
}
