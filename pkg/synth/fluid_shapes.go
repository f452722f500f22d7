package synth

import (
	"math"

	"sluice/pkg/volume"
)

// Cylinder sets the voxels within radius r of the axis parallel to z through
// (y, x) = c to code: an infinite circular cylinder (k1 = 1/r, k2 = 0),
// clipped to lab.Box.
func Cylinder(lab *volume.Labels, c [2]float64, r float64, code uint8) {
	y0 := max(int(math.Floor(c[0]-r)), lab.Box.Min[1])
	y1 := min(int(math.Ceil(c[0]+r))+1, lab.Box.Max[1])
	x0 := max(int(math.Floor(c[1]-r)), lab.Box.Min[2])
	x1 := min(int(math.Ceil(c[1]+r))+1, lab.Box.Max[2])
	for z := lab.Box.Min[0]; z < lab.Box.Max[0]; z++ {
		for y := y0; y < y1; y++ {
			dy := float64(y) - c[0]
			for x := x0; x < x1; x++ {
				dx := float64(x) - c[1]
				if dy*dy+dx*dx <= r*r {
					lab.Set(z, y, x, code)
				}
			}
		}
	}
}
