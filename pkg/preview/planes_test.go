package preview

import (
	"bytes"
	"testing"

	"sluice/pkg/volume"
)

// TestRenderPlanesEqualsRender: rendering from the three planes alone gives
// the same pixels as rendering from the whole volume.
func TestRenderPlanesEqualsRender(t *testing.T) {
	g := volume.NewShape[uint16](9, 13, 17, 1e-6)
	l := volume.NewShape[uint8](9, 13, 17, 1e-6)
	for i := range g.Pix {
		g.Pix[i] = uint16(i * 37 % 5000)
		l.Pix[i] = uint8(i % 3)
	}
	pt := [3]int{4, 6, 11}
	o := Defaults()
	o.Point = &pt
	want, err := Render(g, l, o)
	if err != nil {
		t.Fatal(err)
	}
	var planes [3]volume.Any
	var lp [3]*volume.Labels
	for a := 0; a < 3; a++ {
		b := g.Box
		b.Min[a], b.Max[a] = pt[a], pt[a]+1
		planes[a] = g.Crop(b, 0)
		lp[a] = l.Crop(b, 0)
	}
	got, err := RenderPlanes(g.Box, planes, lp, o)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got.Pix, want.Pix) || got.Rect != want.Rect {
		t.Fatalf("RenderPlanes differs from Render")
	}
}
