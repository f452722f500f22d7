package measure

import (
	"encoding/json"
	"fmt"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

func profileOptions(axis int) Options {
	o := Defaults()
	o.FlowAxis = axis
	o.SkipCurvature, o.SkipContact = true, true
	return o
}

// rampScene builds a volume whose saturation profile along axis is known by
// construction (Source: analytic, counting voxels of the drawn slabs).
// Along the flow axis a there are n slices; the two other axes are p (20
// voxels) and q (24 voxels). Voxels with q ≥ 20 lie outside the sample,
// voxels with q < 4 are solid, so each slice holds 16·20 pore voxels of
// 20·20 inside: φ = 0.8 exactly. In slice u the nonwetting phase fills
// the pore voxels with p < k(u) = 20 − ⌊u/2⌋, so S_n(u) = k(u)/20.
func rampScene(a, n int) *volume.Labels {
	var shape [3]int
	o1, o2 := (a+1)%3, (a+2)%3 // p and q axes
	shape[a], shape[o1], shape[o2] = n, 20, 24
	lab := volume.NewShape[uint8](shape[0], shape[1], shape[2], 2.5e-6)
	for z := 0; z < shape[0]; z++ {
		for y := 0; y < shape[1]; y++ {
			for x := 0; x < shape[2]; x++ {
				c := [3]int{z, y, x}
				u, p, q := c[a], c[o1], c[o2]
				v := uint8(1)
				switch {
				case q >= 20:
					v = phase.Outside
				case q < 4:
					v = 0
				case p < 20-u/2:
					v = 2
				}
				lab.Pix[lab.Index(z, y, x)] = v
			}
		}
	}
	return lab
}

// TestProfileRamp: the slice-averaged S_n and φ of a volume with a linear
// ramp of S_n reproduce the construction exactly, for 1, 8 and 27 tiles
// and every flow axis; positions are slice centres (u+½)·h.
func TestProfileRamp(t *testing.T) {
	const n = 40
	h := 2.5e-6 // a variable: expected values round as the code's do
	for a := 0; a < 3; a++ {
		lab := rampScene(a, n)
		opt := profileOptions(a)
		for _, tiles := range []int{1, 2, 3} { // per axis: 1, 8, 27 tiles
			var tile [3]int
			for i, s := range lab.Box.Size() {
				tile[i] = (s + tiles - 1) / tiles
			}
			tl := volume.Tiling{Whole: lab.Box, Tile: tile}
			if tl.Len() != tiles*tiles*tiles {
				t.Fatalf("tiling %v has %d tiles", tile, tl.Len())
			}
			parts, err := MeasureTiling(lab, tl, opt, 2)
			if err != nil {
				t.Fatal(err)
			}
			r, err := Combine(parts, lab.Box, lab.VoxelSize, opt)
			if err != nil {
				t.Fatal(err)
			}
			p := r.SatProfile
			label := fmt.Sprintf("axis %d, %d tiles", a, tl.Len())
			if p == nil || p.Slices != n || p.BinSlices != 1 || len(p.SatNonwetting) != n || p.Axis != [3]string{"z", "y", "x"}[a] {
				t.Fatalf("%s: profile %+v", label, p)
			}
			for u := 0; u < n; u++ {
				want := float64(20-u/2) / 20
				if got := fp(p.SatNonwetting[u]); got != want {
					t.Errorf("%s: S_n(slice %d) = %v, want %v", label, u, got, want)
				}
				if got := fp(p.Porosity[u]); got != 0.8 {
					t.Errorf("%s: φ(slice %d) = %v, want 0.8", label, u, got)
				}
				if got, want := p.Position[u], (float64(u)+0.5)*h; got != want {
					t.Errorf("%s: position %d = %v m, want %v", label, u, got, want)
				}
			}
			// Slices 38 and 39 hold S_n = 1/20 = 0.05, not above the
			// default threshold: the front is the far face of slice 37.
			if got, want := fp(r.FrontPosition), float64(38)*h; got != want {
				t.Errorf("%s: front %v m, want %v", label, got, want)
			}
		}
	}
}

// sharpScene: nonwetting fills every pore voxel of slices [0, k) along
// axis a, wetting the rest; a solid grain column runs through the middle.
func sharpScene(a, n, k int) *volume.Labels {
	var shape [3]int
	shape[a], shape[(a+1)%3], shape[(a+2)%3] = n, 6, 5
	lab := volume.NewShape[uint8](shape[0], shape[1], shape[2], 1e-5)
	for z := 0; z < shape[0]; z++ {
		for y := 0; y < shape[1]; y++ {
			for x := 0; x < shape[2]; x++ {
				c := [3]int{z, y, x}
				v := uint8(1)
				switch {
				case c[(a+1)%3] == 2 && c[(a+2)%3] == 2:
					v = 0
				case c[a] < k:
					v = 2
				}
				lab.Pix[lab.Index(z, y, x)] = v
			}
		}
	}
	return lab
}

// TestProfileFront: a sharp front after slice k sits at exactly k·h
// (Source: the definition, profile.go); none without nonwetting; with 600
// slices the profile is coarsened to 200 bins of 3 slices.
func TestProfileFront(t *testing.T) {
	h := 1e-5
	for a := 0; a < 3; a++ {
		for _, k := range []int{1, 17, 29, 30} {
			lab := sharpScene(a, 30, k)
			opt := profileOptions(a)
			tl := volume.Tiling{Whole: lab.Box, Tile: [3]int{7, 7, 7}}
			parts, err := MeasureTiling(lab, tl, opt, 2)
			if err != nil {
				t.Fatal(err)
			}
			r, err := Combine(parts, lab.Box, lab.VoxelSize, opt)
			if err != nil {
				t.Fatal(err)
			}
			if got, want := fp(r.FrontPosition), float64(k)*h; got != want {
				t.Errorf("axis %d, front after slice %d: %v m, want %v", a, k, got, want)
			}
		}
		r, err := Volume(sharpScene(a, 30, 0), profileOptions(a), 16, 2)
		if err != nil {
			t.Fatal(err)
		}
		if r.FrontPosition != nil {
			t.Errorf("axis %d, no nonwetting: front %v", a, *r.FrontPosition)
		}
	}
	// Tall volume: 600 slices → bins of ⌈600/256⌉ = 3 slices, 200 bins.
	lab := sharpScene(0, 600, 300)
	r, err := Volume(lab, profileOptions(0), 64, 2)
	if err != nil {
		t.Fatal(err)
	}
	p := r.SatProfile
	if p.BinSlices != 3 || len(p.Position) != 200 || p.BinWidth != 3*h || p.Position[0] != 1.5*h {
		t.Fatalf("coarsened profile: %d slices/bin, %d bins, width %v, first centre %v", p.BinSlices, len(p.Position), p.BinWidth, p.Position[0])
	}
	if fp(p.SatNonwetting[99]) != 1 || fp(p.SatNonwetting[100]) != 0 || fp(r.FrontPosition) != 300*h {
		t.Errorf("coarsened: S_n %v, %v around the front, front %v m", fp(p.SatNonwetting[99]), fp(p.SatNonwetting[100]), fp(r.FrontPosition))
	}
	// 301 slices invaded: bin [300, 303) holds S_n = 1/3 > 0.05, so the
	// front is its far edge (the profile's resolution).
	r, err = Volume(sharpScene(0, 600, 301), profileOptions(0), 64, 2)
	if err != nil {
		t.Fatal(err)
	}
	if fp(r.FrontPosition) != 303*h || fp(r.SatProfile.SatNonwetting[100]) != 1.0/3 {
		t.Errorf("front in a coarse bin: %v m, S_n %v", fp(r.FrontPosition), fp(r.SatProfile.SatNonwetting[100]))
	}
	// Threshold: a bin at exactly the threshold does not count.
	opt := profileOptions(0)
	opt.FrontThreshold = 1.0 / 3
	if r, err = Volume(sharpScene(0, 600, 301), opt, 64, 2); err != nil {
		t.Fatal(err)
	}
	if fp(r.FrontPosition) != 300*h {
		t.Errorf("threshold 1/3: front %v m, want 3e-3", fp(r.FrontPosition))
	}
}

// TestProfilePartialJSON: tile counts survive the JSON round trip of tile
// results, and a step with one tile lacking counts gets no profile rather
// than a wrong one.
func TestProfilePartialJSON(t *testing.T) {
	lab := rampScene(0, 12)
	opt := profileOptions(0)
	tl := volume.Tiling{Whole: lab.Box, Tile: [3]int{5, 9, 9}}
	parts, err := MeasureTiling(lab, tl, opt, 1)
	if err != nil {
		t.Fatal(err)
	}
	for i, p := range parts {
		b, _ := json.Marshal(p)
		var q Partial
		if err := json.Unmarshal(b, &q); err != nil {
			t.Fatal(err)
		}
		parts[i] = &q
	}
	r, err := Combine(parts, lab.Box, lab.VoxelSize, opt)
	if err != nil {
		t.Fatal(err)
	}
	if fp(r.SatProfile.SatNonwetting[11]) != float64(20-5)/20 {
		t.Errorf("after JSON: S_n(11) = %v", fp(r.SatProfile.SatNonwetting[11]))
	}
	parts[1].Profile = nil
	if r, err = Combine(parts, lab.Box, lab.VoxelSize, opt); err != nil {
		t.Fatal(err)
	}
	if r.SatProfile != nil || r.FrontPosition != nil {
		t.Errorf("profile from part of the tiles: %+v", r.SatProfile)
	}
	opt.FrontThreshold = 1
	if opt.Validate() == nil {
		t.Error("front threshold 1 accepted")
	}
}
