package preview

import (
	"image"
	"image/color"
	"math"
	"testing"

	"sluice/pkg/volume"
)

var opaqueBlack = color.NRGBA{0, 0, 0, 0xFF}

// stripTop is the first row of the scale strip for a volume of the given
// shape at magnification s (Layout in the package doc).
func stripTop(shape [3]int, s int) int {
	return Margin + TitleHeight + max(shape[0], shape[1])*s + Margin
}

// longestBlackRun returns the start and length of the longest run of
// black pixels in row y.
func longestBlackRun(img *image.NRGBA, y int) (start, n int) {
	cur := 0
	for x := img.Rect.Min.X; x < img.Rect.Max.X; x++ {
		if img.NRGBAAt(x, y) == opaqueBlack {
			cur++
			if cur > n {
				start, n = x-cur+1, cur
			}
		} else {
			cur = 0
		}
	}
	return start, n
}

func blackIn(img *image.NRGBA, r image.Rectangle) int {
	n := 0
	for y := r.Min.Y; y < r.Max.Y; y++ {
		for x := r.Min.X; x < r.Max.X; x++ {
			if img.NRGBAAt(x, y) == opaqueBlack {
				n++
			}
		}
	}
	return n
}

// TestScaleBarLength: the bar drawn in the image is Length / voxel size ×
// scale pixels long (within 1 px) for two voxel sizes, with the round
// length chosen by hand:
//
//	h = 2.5 µm, 200 voxels wide, scale 1: slice 500 µm, a fifth 100 µm → 100 µm = 40 px
//	h = 0.65 µm, 300 voxels, scale 2: slice 195 µm, a fifth 39 µm; 20 µm
//	  (ratio 1.95) or 50 µm (ratio 1.28) → 50 µm = 50/0.65·2 = 153.8 px
//	h = 20 µm, 500 voxels, scale 1: slice 10 mm → 2 mm = 100 px
func TestScaleBarLength(t *testing.T) {
	for _, c := range []struct {
		h     float64
		nx, s int
		label string
		px    float64
	}{
		{2.5e-6, 200, 1, "100 µm", 40},
		{0.65e-6, 300, 2, "50 µm", 50 / 0.65 * 2},
		{20e-6, 500, 1, "2 mm", 100},
	} {
		shape := [3]int{6, 8, c.nx}
		g := volume.NewShape[uint16](shape[0], shape[1], shape[2], c.h)
		for i := range g.Pix {
			g.Pix[i] = 30000 // mid grey: only the bar and text are black
		}
		o := Defaults()
		o.Scale, o.VoxelSize = c.s, c.h
		img, err := Render(g, nil, o)
		if err != nil {
			t.Fatal(err)
		}
		b := ScaleBar(c.h, false, c.nx, c.s)
		if b.Label != c.label || b.Note != "" {
			t.Errorf("h %g: bar %+v, want %s", c.h, b, c.label)
		}
		if f := b.Length / (float64(c.nx) * c.h); f < 0.15 || f > 0.26 {
			t.Errorf("h %g: bar spans %.0f %% of the slice", c.h, 100*f)
		}
		y0 := stripTop(shape, c.s)
		start, n := longestBlackRun(img, y0+(ScaleHeight-BarThickness)/2)
		if start != Margin || math.Abs(float64(n)-c.px) > 1 || math.Abs(float64(n)-b.Length/c.h*float64(c.s)) > 1 {
			t.Errorf("h %g: bar drawn from x=%d, %d px long; want from %d, %.1f px", c.h, start, n, Margin, c.px)
		}
		// The label is drawn right of the bar.
		if k := blackIn(img, image.Rect(Margin+n+4, y0, Margin+n+4+7*len([]rune(c.label)), y0+ScaleHeight)); k < 20 {
			t.Errorf("h %g: label area holds %d black pixels", c.h, k)
		}
	}
}

// TestNoScaleBarWithoutVoxelSize: unknown or assumed voxel sizes give a
// note in the strip and no bar (no black run longer than a glyph).
func TestNoScaleBarWithoutVoxelSize(t *testing.T) {
	shape := [3]int{6, 8, 200}
	g := volume.NewShape[uint16](shape[0], shape[1], shape[2], 1e-6)
	for i := range g.Pix {
		g.Pix[i] = 30000
	}
	for _, c := range []struct {
		h       float64
		assumed bool
		note    string
	}{
		{0, false, "no scale bar: voxel size unknown"},
		{1e-6, true, "no scale bar: voxel size assumed, not known"},
	} {
		o := Defaults()
		o.VoxelSize, o.VoxelSizeAssumed = c.h, c.assumed
		if b := ScaleBar(c.h, c.assumed, shape[2], 1); b.Note != c.note || b.Pixels != 0 {
			t.Errorf("h %g assumed %v: %+v, want note %q", c.h, c.assumed, b, c.note)
		}
		img, err := Render(g, nil, o)
		if err != nil {
			t.Fatal(err)
		}
		y0 := stripTop(shape, 1)
		for y := y0; y < y0+ScaleHeight; y++ {
			if _, n := longestBlackRun(img, y); n > 7 {
				t.Errorf("h %g assumed %v: a %d px black run in row %d of the scale strip", c.h, c.assumed, n, y)
			}
		}
		if k := blackIn(img, image.Rect(Margin, y0, Margin+7*len(c.note), y0+ScaleHeight)); k < 100 {
			t.Errorf("h %g assumed %v: note not drawn (%d black pixels)", c.h, c.assumed, k)
		}
	}
}
