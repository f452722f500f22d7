package mesh

import (
	"math"
	"math/rand/v2"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

type emitted struct {
	key [3]int64
	p   [3][3]float64
}

func collect(w func(*volume.Volume[float32], float64, volume.Box, func([3]int64, [3][3]float64)), f *volume.Volume[float32], level float64, cubes volume.Box) []emitted {
	var out []emitted
	w(f, level, cubes, func(k [3]int64, p [3][3]float64) { out = append(out, emitted{k, p}) })
	return out
}

// The bit-mask walk must emit exactly the triangles of the cube-by-cube
// walk, in the same order, with bit-identical vertices, so areas are equal
// to the last bit. Fields: smooth random noise with samples exactly at the
// level, binary indicators, row lengths around the 64-bit word size, boxes
// offset from the origin and cube boxes clipped inside the field.
// Source: identity with the previous implementation (cells_ref_test.go);
// TestAreaMatchesSkimage checks both against scikit-image.
func TestMaskWalkEqualsCellWalk(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 3))
	total := 0
	shapes := [][3]int{{7, 9, 64}, {5, 6, 65}, {4, 5, 66}, {6, 4, 130}, {3, 3, 2}, {2, 2, 2}, {9, 11, 13}, {4, 3, 128}, {3, 70, 5}}
	for si, sh := range shapes {
		for kind := 0; kind < 3; kind++ {
			box := volume.Box{Min: [3]int{si - 2, 3, -si}, Max: [3]int{si - 2 + sh[0], 3 + sh[1], -si + sh[2]}}
			f := volume.New[float32](box, 1)
			for i := range f.Pix {
				switch kind {
				case 0: // noise in [0, 1) with ties at the level
					v := rng.Float32()
					if rng.IntN(10) == 0 {
						v = 0.5
					}
					f.Pix[i] = v
				case 1: // sparse binary indicator
					if rng.IntN(6) == 0 {
						f.Pix[i] = 1
					}
				case 2: // dense binary indicator
					if rng.IntN(6) != 0 {
						f.Pix[i] = 1
					}
				}
			}
			cubeBoxes := []volume.Box{f.Box, box.Grow(-1), {Min: box.Min, Max: [3]int{box.Min[0] + 1, box.Max[1], box.Max[2] - 1}}}
			for _, cubes := range cubeBoxes {
				want := collect(walkCells, f, 0.5, cubes)
				got := collect(walk, f, 0.5, cubes)
				if len(got) != len(want) {
					t.Fatalf("shape %v kind %d cubes %v: %d triangles, cell walk %d", sh, kind, cubes, len(got), len(want))
				}
				for k := range got {
					if got[k] != want[k] {
						t.Fatalf("shape %v kind %d cubes %v: triangle %d is %v, cell walk %v", sh, kind, cubes, k, got[k], want[k])
					}
				}
				total += len(got)
				var a float64
				walkCells(f, 0.5, cubes, func(_ [3]int64, p [3][3]float64) { a += triArea(p) })
				if b := Area(f, 0.5, cubes); math.Float64bits(a) != math.Float64bits(b) {
					t.Fatalf("shape %v kind %d cubes %v: area %v, cell walk %v", sh, kind, cubes, b, a)
				}
			}
		}
	}
	if total < 1000 {
		t.Fatalf("only %d triangles compared", total)
	}
	t.Logf("%d triangles identical", total)
}

// Indicator is 1 exactly on the voxels whose label is in the set and 0
// elsewhere, including the part of the box outside the label volume.
// Source: definition (Indicator doc).
func TestIndicatorValues(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	lab := volume.New[uint8](volume.Box{Min: [3]int{1, -2, 3}, Max: [3]int{7, 5, 12}}, 1)
	for i := range lab.Pix {
		lab.Pix[i] = uint8(rng.IntN(4))
	}
	set := phase.Of(1, 3)
	box := lab.Box.Grow(1)
	f := Indicator(lab, set, box)
	ones := 0
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			for x := box.Min[2]; x < box.Max[2]; x++ {
				want := float32(0)
				if lab.Box.Contains(z, y, x) && set[lab.At(z, y, x)] {
					want = 1
					ones++
				}
				if got := f.At(z, y, x); got != want {
					t.Fatalf("(%d, %d, %d): %v, want %v", z, y, x, got, want)
				}
			}
		}
	}
	if ones == 0 {
		t.Fatal("no voxel in the set")
	}
}
