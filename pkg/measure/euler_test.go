package measure

import (
	"testing"

	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// eulerScene draws nonwetting bodies of known Euler characteristic in
// wetting fluid, apart from each other (no solid): balls (χ = 1), solid
// tori (χ = 0) and hollow balls with one wetting cavity (χ = 2), one ball
// cut by the inlet face. It returns the labels and, per body, its voxel
// count (all different) and χ.
func eulerScene() (*volume.Labels, map[int64]int64) {
	const n = 84
	lab := volume.NewShape[uint8](n, n, n, 2e-6)
	synth.Fill(lab, 1, func(z, y, x float64) bool { return true })
	bodies := []struct {
		draw func(l *volume.Labels)
		chi  int64
	}{
		{func(l *volume.Labels) { synth.Ball(l, [3]float64{20.3, 20.1, 19.7}, 9, 2) }, 1},
		{func(l *volume.Labels) { synth.Ball(l, [3]float64{0, 62.4, 21.2}, 11, 2) }, 1},
		{func(l *volume.Labels) { synth.Torus(l, [3]float64{21.2, 60.6, 60.3}, 13, 4.5, 2) }, 0},
		{func(l *volume.Labels) { synth.Torus(l, [3]float64{62.1, 22.4, 60.8}, 11, 5, 2) }, 0},
		{func(l *volume.Labels) {
			synth.Shell(l, [3]float64{60.4, 61.7, 21.9}, 5.5, 11.5, 2)
		}, 2},
		{func(l *volume.Labels) { synth.Shell(l, [3]float64{61.2, 61.1, 62.3}, 4, 8, 2) }, 2},
	}
	want := map[int64]int64{}
	for _, b := range bodies {
		one := volume.NewShape[uint8](n, n, n, 2e-6)
		b.draw(one)
		var v int64
		for _, p := range one.Pix {
			if p == 2 {
				v++
			}
		}
		want[v] = b.chi
		b.draw(lab)
	}
	return lab, want
}

// TestGangliaEuler: each ganglion's Euler characteristic, summed from the
// tiles' per-component shares through the union-find merge, is that of the
// body it is, whatever the tiling (1, 8, 27 tiles and an uneven one) and
// for 26- and 6-connectivity; the shares of all ganglia add up to the
// phase's euler_nonwetting exactly. Source: analytic topology (science.md:
// ball χ = 1, solid torus 0, hollow ball 2; Ohser & Mücklich 2000, ch. 4:
// χ is additive over disjoint bodies). Fails when a cell's weight is given
// to no piece or to two (the per-ganglion sums then miss or double the
// cells along tile faces).
func TestGangliaEuler(t *testing.T) {
	lab, want := eulerScene()
	if len(want) != 6 {
		t.Fatalf("bodies of equal voxel count: %v", want)
	}
	for _, conn := range []int{26, 6} {
		opt := gangliaOptions()
		opt.Connectivity = conn
		foreign := 0
		for _, tile := range [][3]int{{84, 84, 84}, {42, 42, 42}, {28, 28, 28}, {23, 31, 29}} {
			tl := volume.Tiling{Whole: lab.Box, Tile: tile}
			parts, err := MeasureTiling(lab, tl, opt, 2)
			if err != nil {
				t.Fatal(err)
			}
			for _, p := range parts {
				for _, f := range p.Clusters.CurvForeign {
					if f.Euler8 != 0 {
						foreign++
					}
				}
			}
			r, err := Combine(parts, lab.Box, lab.VoxelSize, opt)
			if err != nil {
				t.Fatal(err)
			}
			g := gangliaOf(t, parts, lab.Box, opt)
			if len(g) != len(want) {
				t.Fatalf("connectivity %d, %d tiles: %d ganglia, want %d", conn, tl.Len(), len(g), len(want))
			}
			var sum8 int64
			for _, gg := range g {
				sum8 += gg.Euler8
				w, ok := want[gg.Voxels]
				if !ok {
					t.Fatalf("connectivity %d, %d tiles: ganglion of %d voxels is none of the bodies", conn, tl.Len(), gg.Voxels)
				}
				if gg.Euler8%8 != 0 || gg.Euler() != w {
					t.Errorf("connectivity %d, %d tiles: ganglion of %d voxels has 8χ = %d, want χ = %d", conn, tl.Len(), gg.Voxels, gg.Euler8, w)
				}
			}
			if sum8 != 8*r.EulerNonwetting {
				t.Errorf("connectivity %d, %d tiles: shares add to 8χ = %d, euler_nonwetting %d", conn, tl.Len(), sum8, r.EulerNonwetting)
			}
			t.Logf("connectivity %d, %d tiles: %d ganglia, χ %d in all", conn, tl.Len(), len(g), r.EulerNonwetting)
		}
		// The tilings must place shares through another tile's rim.
		if foreign == 0 {
			t.Errorf("connectivity %d: no Euler share went through another tile's rim", conn)
		}
	}
}
