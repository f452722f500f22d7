// Package preview renders a quick look at one step: three orthogonal slices
// (z, y, x) through a chosen voxel of the grey volume, with the segmented
// phases overlaid semi-transparently and a legend, as one PNG.
//
// Grey values are mapped linearly to 0…255 between the 1st and 99th
// percentiles of the voxels shown (linear interpolation between order
// statistics, Hyndman & Fan 1996 type 7, the default of numpy.percentile),
// so a few very bright or dark voxels do not wash the picture out. For a
// live series pass a fixed Window so successive steps share one scale.
//
// Overlay: each pixel is (1−α)·grey + α·colour, per channel, rounded, with
// colour from Overlay by phase. Solid is left untinted (the grey already
// shows the grains); voxels outside the sample are dimmed to 40 %.
//
// Layout (pixels; s = Options.Scale; NZ, NY, NX the grey volume's shape):
//
//	Margin | z-slice NX·s × NY·s | Margin | y-slice NX·s × NZ·s | Margin | x-slice NY·s × NZ·s | Margin
//
// Width  = max(4·Margin + (2·NX + NY)·s, MinWidth)
// Height = Margin + TitleHeight + max(NY, NZ)·s + Margin + ScaleHeight + LegendHeight + Margin
//
// Each slice has a title above it ("z = 12", the global index); the z-slice
// is drawn with y downwards, the y- and x-slices with z downwards. Below the
// slices runs the scale strip: a black bar of a round length (1, 2 or 5 ×
// 10^k, in µm, mm or m) about a fifth of the z-slice's width, under the
// z-slice, with its length written beside it; all slices share its scale.
// Without a known voxel size the strip says so and draws no bar. The legend
// strip runs along the bottom.
package preview

import (
	"fmt"
	"image"
	"image/color"
	"image/draw"
	"image/png"
	"io"
	"math"
	"sort"
	"strconv"

	"golang.org/x/image/font"
	"golang.org/x/image/font/basicfont"
	"golang.org/x/image/math/fixed"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Layout constants in pixels.
const (
	Margin       = 8
	TitleHeight  = 16
	LegendHeight = 20
	ScaleHeight  = 16
	// BarThickness is the height of the scale bar in pixels.
	BarThickness = 4
	MinWidth     = 460
	// Swatch is the edge of a legend colour square.
	Swatch = 12
)

// Overlay is sluice's phase overlay palette, chosen for this project.
// Wetting is a mid blue and nonwetting an amber: they differ along the
// blue–yellow axis that protanopes and deuteranopes keep, and in lightness,
// so they stay apart for them (checked with plots.Simulate in the tests);
// solid carries no tint, so three classes never depend on a red–green
// difference.
var Overlay = struct {
	Wetting, Nonwetting color.NRGBA
}{
	Wetting:    color.NRGBA{0x1F, 0x66, 0xD1, 0xFF},
	Nonwetting: color.NRGBA{0xF5, 0xA6, 0x14, 0xFF},
}

// OutsideDim is the factor applied to grey outside the sample.
const OutsideDim = 0.4

// Options choose the slices and the look.
type Options struct {
	// Point is the global (z, y, x) voxel the slices pass through; nil
	// means the centre of the grey volume.
	Point *[3]int
	// Codes are the label values of the phases.
	Codes phase.Codes
	// Alpha is the overlay opacity in [0, 1].
	Alpha float64
	// Window fixes the grey values mapped to 0 and 255; nil uses the 1st
	// and 99th percentiles of the three slices.
	Window *[2]float64
	// Scale is an integer magnification ≥ 1.
	Scale int
	// VoxelSize is the voxel edge in metres for the scale bar; 0 means
	// unknown. VoxelSizeAssumed marks a size that was assumed rather than
	// given (measure's 1 µm fallback): no bar is drawn for it either.
	VoxelSize        float64
	VoxelSizeAssumed bool
	// Marks are points to highlight (the centroids of the largest
	// pore-filling events), drawn on every slice at their projection.
	Marks []Mark
}

// Mark is a highlighted voxel: drawn on each slice at its projection onto
// the slice plane as a hollow square (drainage) or diamond (imbibition),
// MarkRadius pixels from centre to edge, black with a white inner line so
// it shows on dark and light grey alike. The scale strip says what the
// marks are, at its right end.
type Mark struct {
	At         [3]int
	Imbibition bool
}

// MarkRadius is the half-width of a mark in pixels.
const MarkRadius = 6

// MarkNote is the explanation of the marks written in the scale strip.
const MarkNote = "[] drainage, <> imbibition: largest events"

// Defaults returns the default codes, α = 0.45, scale 1, centre point.
func Defaults() Options { return Options{Codes: phase.Default(), Alpha: 0.45, Scale: 1} }

// Size returns the PNG size in pixels for a grey volume of the given
// shape (NZ, NY, NX).
func Size(shape [3]int, scale int) (w, h int) {
	nz, ny, nx := shape[0]*scale, shape[1]*scale, shape[2]*scale
	w = 4*Margin + 2*nx + ny
	if w < MinWidth {
		w = MinWidth
	}
	h = Margin + TitleHeight + max(ny, nz) + Margin + ScaleHeight + LegendHeight + Margin
	return w, h
}

// ScaleBarTarget is the fraction of the z-slice width a scale bar aims
// for; the bar is the 1, 2 or 5 × 10^k length nearest to it (in ratio),
// so it spans about 13–32 % of the slice, mostly 15–25 %.
const ScaleBarTarget = 0.2

// Bar is the scale bar of a preview.
type Bar struct {
	// Length in metres and Pixels its drawn length, round(Length/h · s).
	Length float64
	Pixels int
	// Label is the length as written ("50 µm", "2 mm").
	Label string
	// Note replaces the bar when the voxel size is not known; empty when a
	// bar is drawn.
	Note string
}

// ScaleBar chooses the scale bar for a slice nx voxels wide drawn at
// magnification scale, with voxel edge h metres (0: unknown; assumed: h is
// not known but assumed).
func ScaleBar(h float64, assumed bool, nx, scale int) Bar {
	switch {
	case assumed:
		return Bar{Note: "no scale bar: voxel size assumed, not known"}
	case !(h > 0) || math.IsInf(h, 0):
		return Bar{Note: "no scale bar: voxel size unknown"}
	}
	target := ScaleBarTarget * float64(nx) * h
	best, bestErr := 0.0, math.Inf(1)
	for k := -10; k <= 3; k++ {
		for _, m := range []float64{1, 2, 5} {
			l := m * math.Pow(10, float64(k))
			if e := math.Abs(math.Log(l / target)); e < bestErr {
				best, bestErr = l, e
			}
		}
	}
	return Bar{Length: best, Pixels: int(math.Round(best / h * float64(scale))), Label: lengthLabel(best)}
}

// lengthLabel writes a round length in µm below 1 mm, mm below 1 m, else m.
func lengthLabel(l float64) string {
	num := func(v float64) string { return strconv.FormatFloat(v, 'g', 3, 64) }
	switch {
	case l < 1e-3*(1-1e-9):
		return num(l*1e6) + " µm"
	case l < 1*(1-1e-9):
		return num(l*1e3) + " mm"
	}
	return num(l) + " m"
}

// sampler reads a grey voxel as float64.
func sampler(a volume.Any) (func(z, y, x int) float64, error) {
	switch v := a.(type) {
	case *volume.Volume[uint8]:
		return func(z, y, x int) float64 { return float64(v.At(z, y, x)) }, nil
	case *volume.Volume[uint16]:
		return func(z, y, x int) float64 { return float64(v.At(z, y, x)) }, nil
	case *volume.Volume[float32]:
		return func(z, y, x int) float64 { return float64(v.At(z, y, x)) }, nil
	}
	return nil, fmt.Errorf("preview: unsupported grey volume %T", a)
}

// Percentile returns the p-quantile (0 ≤ p ≤ 1) of sorted values by
// linear interpolation between order statistics (Hyndman & Fan type 7).
func Percentile(sorted []float64, p float64) float64 {
	if len(sorted) == 0 {
		return math.NaN()
	}
	h := p * float64(len(sorted)-1)
	lo := int(math.Floor(h))
	if lo >= len(sorted)-1 {
		return sorted[len(sorted)-1]
	}
	return sorted[lo] + (h-float64(lo))*(sorted[lo+1]-sorted[lo])
}

// slice describes one panel: which global axes run across and down, and
// the fixed coordinate.
type slice struct {
	title        string
	fixedAxis    int
	fixed        int
	across, down int // axes of the columns and rows
}

// Render draws the preview. labels may be nil (grey only); where labels
// do not cover a voxel, no overlay is drawn.
func Render(grey volume.Any, labels *volume.Labels, o Options) (*image.NRGBA, error) {
	if grey == nil {
		return nil, fmt.Errorf("preview: no grey volume")
	}
	at, err := sampler(grey)
	if err != nil {
		return nil, err
	}
	label := func(z, y, x int) (uint8, bool) {
		if labels == nil || !labels.Box.Contains(z, y, x) {
			return 0, false
		}
		return labels.At(z, y, x), true
	}
	return render(grey.Bounds(), at, label, o)
}

// RenderPlanes draws the same preview from the three planes alone: planes[a]
// is the one-voxel-thick slab of whole at the point's coordinate along axis a
// (z, y, x), labels likewise (entries may be nil). Large scans need only
// these three planes in memory. o.Point is required.
func RenderPlanes(whole volume.Box, planes [3]volume.Any, labels [3]*volume.Labels, o Options) (*image.NRGBA, error) {
	if o.Point == nil {
		return nil, fmt.Errorf("preview: RenderPlanes needs a point")
	}
	var at [3]func(z, y, x int) float64
	for a := range planes {
		if planes[a] == nil {
			return nil, fmt.Errorf("preview: plane %d missing", a)
		}
		f, err := sampler(planes[a])
		if err != nil {
			return nil, err
		}
		at[a] = f
	}
	pt := *o.Point
	which := func(z, y, x int) int {
		switch {
		case z == pt[0] && planes[0].Bounds().Contains(z, y, x):
			return 0
		case y == pt[1] && planes[1].Bounds().Contains(z, y, x):
			return 1
		}
		return 2
	}
	value := func(z, y, x int) float64 { return at[which(z, y, x)](z, y, x) }
	label := func(z, y, x int) (uint8, bool) {
		l := labels[which(z, y, x)]
		if l == nil || !l.Box.Contains(z, y, x) {
			return 0, false
		}
		return l.At(z, y, x), true
	}
	return render(whole, value, label, o)
}

// EncodePNG writes an image as PNG.
func EncodePNG(w io.Writer, img image.Image) error { return png.Encode(w, img) }

func render(box volume.Box, at func(z, y, x int) float64, label func(z, y, x int) (uint8, bool), o Options) (*image.NRGBA, error) {
	if box.Empty() {
		return nil, volume.ErrEmpty
	}
	if o.Scale < 1 {
		return nil, fmt.Errorf("preview: scale %d, want ≥ 1", o.Scale)
	}
	if !(o.Alpha >= 0 && o.Alpha <= 1) {
		return nil, fmt.Errorf("preview: alpha %v, want 0…1", o.Alpha)
	}
	if err := o.Codes.Validate(); err != nil {
		return nil, fmt.Errorf("preview: %w", err)
	}
	var pt [3]int
	if o.Point != nil {
		pt = *o.Point
		if !box.Contains(pt[0], pt[1], pt[2]) {
			return nil, fmt.Errorf("preview: point %v outside volume %v", pt, box)
		}
	} else {
		for i := range pt {
			pt[i] = (box.Min[i] + box.Max[i]) / 2
		}
	}
	slices := []slice{
		{fmt.Sprintf("z = %d", pt[0]), 0, pt[0], 2, 1},
		{fmt.Sprintf("y = %d", pt[1]), 1, pt[1], 2, 0},
		{fmt.Sprintf("x = %d", pt[2]), 2, pt[2], 1, 0},
	}
	coord := func(s slice, col, row int) (z, y, x int) {
		var c [3]int
		c[s.fixedAxis] = s.fixed
		c[s.across] = box.Min[s.across] + col
		c[s.down] = box.Min[s.down] + row
		return c[0], c[1], c[2]
	}
	size := box.Size()
	lo, hi := 0.0, 0.0
	if o.Window != nil {
		lo, hi = o.Window[0], o.Window[1]
	} else {
		var vals []float64
		for _, s := range slices {
			for row := 0; row < size[s.down]; row++ {
				for col := 0; col < size[s.across]; col++ {
					vals = append(vals, at(coord(s, col, row)))
				}
			}
		}
		sort.Float64s(vals)
		lo, hi = Percentile(vals, 0.01), Percentile(vals, 0.99)
	}
	w, h := Size(size, o.Scale)
	img := image.NewNRGBA(image.Rect(0, 0, w, h))
	draw.Draw(img, img.Bounds(), image.White, image.Point{}, draw.Src)

	x0 := Margin
	top := Margin + TitleHeight
	for _, s := range slices {
		text(img, x0, Margin+TitleHeight-4, s.title)
		for row := 0; row < size[s.down]; row++ {
			for col := 0; col < size[s.across]; col++ {
				z, y, x := coord(s, col, row)
				c := o.pixel(grey8(at(z, y, x), lo, hi), label, z, y, x)
				for dy := 0; dy < o.Scale; dy++ {
					for dx := 0; dx < o.Scale; dx++ {
						img.SetNRGBA(x0+col*o.Scale+dx, top+row*o.Scale+dy, c)
					}
				}
			}
		}
		x0 += size[s.across]*o.Scale + Margin
	}
	x0 = Margin
	for _, s := range slices {
		clip := image.Rect(x0, top, x0+size[s.across]*o.Scale, top+size[s.down]*o.Scale)
		for _, m := range o.Marks {
			if !box.Contains(m.At[0], m.At[1], m.At[2]) {
				continue
			}
			cx := x0 + (m.At[s.across]-box.Min[s.across])*o.Scale + o.Scale/2
			cy := top + (m.At[s.down]-box.Min[s.down])*o.Scale + o.Scale/2
			drawMark(img, clip, cx, cy, m.Imbibition)
		}
		x0 += size[s.across]*o.Scale + Margin
	}
	o.scaleBar(img, top+max(size[0], size[1])*o.Scale+Margin, size[2])
	if len(o.Marks) > 0 {
		text(img, w-Margin-7*len(MarkNote), top+max(size[0], size[1])*o.Scale+Margin+12, MarkNote)
	}
	o.legend(img)
	return img, nil
}

// drawMark draws a mark centred on (cx, cy), clipped to clip: the outline
// in black at radius MarkRadius and in white one pixel inside it.
func drawMark(img *image.NRGBA, clip image.Rectangle, cx, cy int, diamond bool) {
	set := func(x, y int, c color.NRGBA) {
		if (image.Point{x, y}).In(clip) {
			img.SetNRGBA(x, y, c)
		}
	}
	black, white := color.NRGBA{0, 0, 0, 0xFF}, color.NRGBA{0xFF, 0xFF, 0xFF, 0xFF}
	for _, ring := range []struct {
		r int
		c color.NRGBA
	}{{MarkRadius, black}, {MarkRadius - 1, white}} {
		r := ring.r
		for d := -r; d <= r; d++ {
			if diamond {
				e := r - abs(d)
				set(cx+d, cy-e, ring.c)
				set(cx+d, cy+e, ring.c)
				continue
			}
			set(cx+d, cy-r, ring.c)
			set(cx+d, cy+r, ring.c)
			set(cx-r, cy+d, ring.c)
			set(cx+r, cy+d, ring.c)
		}
	}
}

func abs(v int) int {
	if v < 0 {
		return -v
	}
	return v
}

// scaleBar draws the scale strip whose top row is y0, under the z-slice
// (nx voxels wide).
func (o *Options) scaleBar(img *image.NRGBA, y0, nx int) {
	b := ScaleBar(o.VoxelSize, o.VoxelSizeAssumed, nx, o.Scale)
	baseline := y0 + 12
	if b.Note != "" {
		text(img, Margin, baseline, b.Note)
		return
	}
	yb := y0 + (ScaleHeight-BarThickness)/2 - 1
	draw.Draw(img, image.Rect(Margin, yb, Margin+b.Pixels, yb+BarThickness), image.Black, image.Point{}, draw.Src)
	text(img, Margin+b.Pixels+6, baseline, b.Label)
}

// grey8 maps v to 0…255 between lo and hi, clamped.
func grey8(v, lo, hi float64) uint8 {
	if !(hi > lo) {
		if v > lo {
			return 255
		}
		return 0
	}
	t := (v - lo) / (hi - lo)
	return uint8(math.Round(255 * math.Max(0, math.Min(1, t))))
}

// Blend returns (1−α)·g + α·c per channel, rounded, opaque.
func Blend(g uint8, c color.NRGBA, alpha float64) color.NRGBA {
	mix := func(a uint8) uint8 { return uint8(math.Round((1-alpha)*float64(g) + alpha*float64(a))) }
	return color.NRGBA{mix(c.R), mix(c.G), mix(c.B), 0xFF}
}

func (o *Options) pixel(g uint8, label func(z, y, x int) (uint8, bool), z, y, x int) color.NRGBA {
	grey := color.NRGBA{g, g, g, 0xFF}
	l, ok := label(z, y, x)
	if !ok {
		return grey
	}
	switch l {
	case o.Codes.Wetting:
		return Blend(g, Overlay.Wetting, o.Alpha)
	case o.Codes.Nonwetting:
		return Blend(g, Overlay.Nonwetting, o.Alpha)
	case phase.Outside:
		d := uint8(math.Round(OutsideDim * float64(g)))
		return color.NRGBA{d, d, d, 0xFF}
	}
	return grey
}

// LegendSwatches returns the rectangles and colours of the legend squares
// (wetting, nonwetting, solid, outside) in an image of height h.
// Swatches show the overlay over mid grey (128), as it appears on the data.
func (o *Options) LegendSwatches(h int) ([]image.Rectangle, []color.NRGBA, []string) {
	y := h - Margin - LegendHeight + (LegendHeight-Swatch)/2
	names := []string{"wetting", "nonwetting", "solid (no tint)", "outside sample"}
	d := uint8(math.Round(OutsideDim * 128))
	cols := []color.NRGBA{
		Blend(128, Overlay.Wetting, o.Alpha),
		Blend(128, Overlay.Nonwetting, o.Alpha),
		{128, 128, 128, 0xFF},
		{d, d, d, 0xFF},
	}
	var rects []image.Rectangle
	x := Margin
	for _, n := range names {
		rects = append(rects, image.Rect(x, y, x+Swatch, y+Swatch))
		x += Swatch + 4 + 7*len([]rune(n)) + 14
	}
	return rects, cols, names
}

func (o *Options) legend(img *image.NRGBA) {
	rects, cols, names := o.LegendSwatches(img.Bounds().Dy())
	for i, r := range rects {
		draw.Draw(img, r, image.NewUniform(cols[i]), image.Point{}, draw.Src)
		text(img, r.Max.X+4, r.Max.Y, names[i])
	}
}

// text draws s with its baseline at y, starting at x, in black. The face
// is ASCII only: µ is drawn as u with its left stem carried below the
// baseline.
func text(img *image.NRGBA, x, y int, s string) {
	d := font.Drawer{Dst: img, Src: image.Black, Face: basicfont.Face7x13, Dot: fixed.P(x, y)}
	for _, r := range s {
		if r != 'µ' {
			d.DrawString(string(r))
			continue
		}
		gx := d.Dot.X.Round()
		d.DrawString("u")
		for cx := gx; cx < gx+basicfont.Face7x13.Advance; cx++ {
			if img.NRGBAAt(cx, y-1) == (color.NRGBA{0, 0, 0, 0xFF}) {
				for dy := 0; dy < 3; dy++ {
					img.SetNRGBA(cx, y+dy, color.NRGBA{0, 0, 0, 0xFF})
				}
				break
			}
		}
	}
}

// WritePNG renders the preview and encodes it as PNG.
func WritePNG(w io.Writer, grey volume.Any, labels *volume.Labels, o Options) error {
	img, err := Render(grey, labels, o)
	if err != nil {
		return err
	}
	if err := png.Encode(w, img); err != nil {
		return fmt.Errorf("preview: encode PNG: %w", err)
	}
	return nil
}
