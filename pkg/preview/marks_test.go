package preview

import (
	"image/color"
	"testing"

	"sluice/pkg/volume"
)

// TestMarks: a drainage mark at voxel (3, 10, 20) of a 8×24×40 volume is a
// black square of radius MarkRadius around the voxel's projection on each
// slice, with a white square one pixel inside (Source: the layout in the
// package documentation, by hand: on the z-slice the voxel's pixel is
// (Margin + 20, Margin + TitleHeight + 10) at scale 1); an imbibition mark
// is a diamond (its square corner stays grey); the note is written.
func TestMarks(t *testing.T) {
	g := volume.NewShape[uint8](8, 24, 40, 1e-6)
	for i := range g.Pix {
		g.Pix[i] = 128
	}
	o := Defaults()
	o.Window = &[2]float64{0, 255}
	o.Marks = []Mark{{At: [3]int{3, 10, 20}}}
	img, err := Render(g, nil, o)
	if err != nil {
		t.Fatal(err)
	}
	black, white := color.NRGBA{0, 0, 0, 255}, color.NRGBA{255, 255, 255, 255}
	cx, cy := Margin+20, Margin+TitleHeight+10
	for _, c := range []struct {
		x, y int
		want color.NRGBA
	}{
		{cx - MarkRadius, cy, black}, {cx + MarkRadius, cy - MarkRadius, black}, {cx, cy + MarkRadius, black},
		{cx - MarkRadius + 1, cy, white}, {cx, cy - MarkRadius + 1, white},
		{cx, cy, color.NRGBA{128, 128, 128, 255}},
	} {
		if got := img.NRGBAAt(c.x, c.y); got != c.want {
			t.Errorf("z-slice pixel (%d, %d): %v, want %v", c.x, c.y, got, c.want)
		}
	}
	// y-slice: starts at 2·Margin + 40 px; the voxel at column x = 20, row z = 3.
	if got := img.NRGBAAt(2*Margin+40+20-MarkRadius, Margin+TitleHeight+3); got != black {
		t.Errorf("y-slice mark edge: %v", got)
	}
	o.Marks[0].Imbibition = true
	img, err = Render(g, nil, o)
	if err != nil {
		t.Fatal(err)
	}
	if got := img.NRGBAAt(cx-MarkRadius, cy); got != black {
		t.Errorf("diamond tip: %v", got)
	}
	if got := img.NRGBAAt(cx+MarkRadius, cy-MarkRadius); got != (color.NRGBA{128, 128, 128, 255}) {
		t.Errorf("diamond has a square corner: %v", got)
	}
}
