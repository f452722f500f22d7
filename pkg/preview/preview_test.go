package preview

import (
	"bytes"
	"image"
	"image/color"
	"image/png"
	"math"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/plots"
	"sluice/pkg/volume"
)

// scene is a 20×24×28 (z, y, x) volume at global offset (5, 0, 3): solid
// for x < 13, wetting elsewhere, a nonwetting block z∈[10,18), y∈[4,12),
// x∈[20,28), and the x ≥ 29 columns outside the sample. Grey values:
// solid 1000, wetting 3000, nonwetting 5000, outside 0.
func scene() (*volume.Volume[uint16], *volume.Labels) {
	box := volume.Box{Min: [3]int{5, 0, 3}, Max: [3]int{25, 24, 31}}
	g := volume.New[uint16](box, 2e-6)
	l := volume.New[uint8](box, 2e-6)
	for z := box.Min[0]; z < box.Max[0]; z++ {
		for y := box.Min[1]; y < box.Max[1]; y++ {
			for x := box.Min[2]; x < box.Max[2]; x++ {
				lab, v := uint8(1), uint16(3000)
				switch {
				case x >= 29:
					lab, v = phase.Outside, 0
				case x < 13:
					lab, v = 0, 1000
				case z >= 10 && z < 18 && y >= 4 && y < 12 && x >= 20 && x < 28:
					lab, v = 2, 5000
				}
				l.Set(z, y, x, lab)
				g.Set(z, y, x, v)
			}
		}
	}
	return g, l
}

func TestPixelsMatchPalette(t *testing.T) {
	g, l := scene()
	o := Defaults()
	o.Point = &[3]int{12, 6, 22}
	o.Window = &[2]float64{1000, 5000} // solid → 0, wetting → 128 (127.5 rounds up), nonwetting → 255
	o.Scale = 2
	img, err := Render(g, l, o)
	if err != nil {
		t.Fatal(err)
	}
	w, h := Size(g.Shape(), 2)
	// Size by hand: width 4·8 + (2·28 + 24)·2 = 192 < 460 → 460;
	// height 8 + 16 + max(24, 20)·2 + 8 + 16 + 20 + 8 = 124.
	if w != 460 || h != 124 || img.Bounds().Dx() != w || img.Bounds().Dy() != h {
		t.Fatalf("size %v, Size() %d×%d, want 460×124", img.Bounds(), w, h)
	}
	a := o.Alpha
	// blend by hand: round((1−α)·g + α·c)
	hand := func(gv float64, c color.NRGBA) color.NRGBA {
		f := func(v uint8) uint8 { return uint8(math.Round((1-a)*gv + a*float64(v))) }
		return color.NRGBA{f(c.R), f(c.G), f(c.B), 255}
	}
	// Panel origins: z-slice at x=8, y-slice at 8+28·2+8 = 72, x-slice at
	// 72+56+8 = 136; all panels start at row 8+16 = 24.
	px := func(panelX, col, row int) color.NRGBA { return img.NRGBAAt(panelX+col*2+1, 24+row*2+1) }
	d := uint8(math.Round(OutsideDim * 0))
	for _, c := range []struct {
		name string
		got  color.NRGBA
		want color.NRGBA
	}{
		// z-slice (z = 12): column = x − 3, row = y.
		{"z: solid", px(8, 13-3-1, 2), color.NRGBA{0, 0, 0, 255}},
		{"z: wetting", px(8, 15-3, 2), hand(128, Overlay.Wetting)},
		{"z: nonwetting", px(8, 22-3, 6), hand(255, Overlay.Nonwetting)},
		{"z: outside", px(8, 30-3, 6), color.NRGBA{d, d, d, 255}},
		// y-slice (y = 6): column = x − 3, row = z − 5.
		{"y: nonwetting", px(72, 22-3, 12-5), hand(255, Overlay.Nonwetting)},
		{"y: wetting above block", px(72, 22-3, 9-5), hand(128, Overlay.Wetting)},
		// x-slice (x = 22): column = y, row = z − 5.
		{"x: nonwetting", px(136, 6, 17-5), hand(255, Overlay.Nonwetting)},
		{"x: wetting beside block", px(136, 12, 17-5), hand(128, Overlay.Wetting)},
	} {
		if c.got != c.want {
			t.Errorf("%s: pixel %v, want %v", c.name, c.got, c.want)
		}
	}
	// Legend swatches hold their colours, and text was drawn (black pixels
	// in the legend strip right of the first swatch).
	rects, cols, _ := o.LegendSwatches(h)
	for i, r := range rects {
		if got := img.NRGBAAt(r.Min.X+Swatch/2, r.Min.Y+Swatch/2); got != cols[i] {
			t.Errorf("legend swatch %d: %v, want %v", i, got, cols[i])
		}
	}
	black := 0
	for y := h - Margin - LegendHeight; y < h-Margin; y++ {
		for x := rects[0].Max.X; x < rects[1].Min.X; x++ {
			if img.NRGBAAt(x, y) == (color.NRGBA{0, 0, 0, 255}) {
				black++
			}
		}
	}
	if black < 20 {
		t.Errorf("legend text: %d black pixels", black)
	}
}

func TestPercentileWindowAndPNG(t *testing.T) {
	// Source: numpy.percentile default ('linear', Hyndman & Fan 1996 type 7):
	// for 0…99, the 1st percentile is 0.99 and the 99th 98.01.
	vals := make([]float64, 100)
	for i := range vals {
		vals[i] = float64(i)
	}
	if p1, p99 := Percentile(vals, 0.01), Percentile(vals, 0.99); math.Abs(p1-0.99) > 1e-12 || math.Abs(p99-98.01) > 1e-12 {
		t.Fatalf("percentiles %v %v", p1, p99)
	}
	// A grey ramp along x with one extreme outlier: the outlier must not
	// set the scale. Grey only (no labels), float32 voxels.
	v := volume.NewShape[float32](9, 10, 250, 1e-6)
	for z := 0; z < 9; z++ {
		for y := 0; y < 10; y++ {
			for x := 0; x < 250; x++ {
				v.Set(z, y, x, float32(x))
			}
		}
	}
	v.Set(4, 3, 125, 1e6)
	o := Defaults()
	var buf bytes.Buffer
	if err := WritePNG(&buf, v, nil, o); err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(buf.Bytes()))
	if err != nil {
		t.Fatal(err)
	}
	w, h := Size([3]int{9, 10, 250}, 1)
	if img.Bounds() != image.Rect(0, 0, w, h) || w != 4*8+2*250+10 || h != 8+16+10+8+16+20+8 {
		t.Fatalf("PNG %v, want %d×%d", img.Bounds(), w, h)
	}
	// z-slice at z = 4, row y = 0: x = 125 must be mid-grey, not black.
	r, _, _, _ := img.At(8+125, 24).RGBA()
	if g := r >> 8; g < 100 || g > 160 {
		t.Fatalf("x=125 grey %d: outlier set the scale", g)
	}
	if r, _, _, _ := img.At(8+249, 24).RGBA(); r>>8 != 255 {
		t.Fatalf("x=249 grey %d, want 255 (above the 99th percentile)", r>>8)
	}
}

func TestOverlayDistinctForDichromats(t *testing.T) {
	o := Defaults()
	_, cols, _ := o.LegendSwatches(100)
	for _, sim := range []struct {
		name string
		f    func(color.Color) color.Color
	}{
		{"normal", func(c color.Color) color.Color { return c }},
		{"protanopia", func(c color.Color) color.Color { return plots.Simulate(c, plots.Protanopia) }},
		{"deuteranopia", func(c color.Color) color.Color { return plots.Simulate(c, plots.Deuteranopia) }},
	} {
		min := math.Inf(1)
		for i := range cols {
			for j := i + 1; j < len(cols); j++ {
				min = math.Min(min, plots.DeltaE(sim.f(cols[i]), sim.f(cols[j])))
			}
		}
		t.Logf("%s: smallest ΔE*ab between legend classes %.1f", sim.name, min)
		if min < 15 {
			t.Errorf("%s: legend classes only ΔE %.1f apart", sim.name, min)
		}
	}
}

func TestRejects(t *testing.T) {
	g, l := scene()
	o := Defaults()
	o.Point = &[3]int{0, 0, 0} // z = 0 is outside the box (starts at 5)
	if _, err := Render(g, l, o); err == nil {
		t.Error("point outside accepted")
	}
	o = Defaults()
	o.Scale = 0
	if _, err := Render(g, l, o); err == nil {
		t.Error("scale 0 accepted")
	}
}

func BenchmarkRender(b *testing.B) {
	v := volume.NewShape[uint16](256, 256, 256, 1e-6)
	for i := range v.Pix {
		v.Pix[i] = uint16(i * 7919)
	}
	l := volume.NewShape[uint8](256, 256, 256, 1e-6)
	o := Defaults()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Render(v, l, o); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(3*256*256*b.N)/b.Elapsed().Seconds()/1e6, "Mpix/s")
}
