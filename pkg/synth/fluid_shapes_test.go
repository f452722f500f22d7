package synth

import (
	"math"
	"testing"

	"sluice/pkg/volume"
)

// Source: analytic geometry — a cylinder of radius r and length L has volume
// πr²L; digitisation at voxel centres counts lattice points in a disc,
// within 1 % for r = 15 (Gauss circle problem, error O(r^{2/3})).
func TestCylinderVolume(t *testing.T) {
	lab := volume.NewShape[uint8](10, 40, 40, 0)
	Cylinder(lab, [2]float64{19.6, 20.3}, 15, 1)
	n := 0
	for _, v := range lab.Pix {
		if v == 1 {
			n++
		}
	}
	want := math.Pi * 15 * 15 * 10
	if math.Abs(float64(n)-want) > 0.01*want {
		t.Errorf("cylinder: %d voxels, πr²L = %.0f", n, want)
	}
}
