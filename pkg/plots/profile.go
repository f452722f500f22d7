package plots

import (
	"fmt"
	"image/color"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"sluice/pkg/series"
)

// ProfileColour is the colour of a nonwetting saturation s ∈ [0, 1] in the
// saturation-profile map: a single-hue ramp from white (0) to Palette.Ink
// (1), linear in each sRGB channel, so the order of values is read from
// lightness alone (also with colour-vision deficiencies). Values outside
// [0, 1] are clamped.
func ProfileColour(s float64) color.NRGBA {
	s = math.Max(0, math.Min(1, s))
	mix := func(c uint8) uint8 { return uint8(math.Round(255 + s*(float64(c)-255))) }
	return color.NRGBA{R: mix(Palette.Ink.R), G: mix(Palette.Ink.G), B: mix(Palette.Ink.B), A: 255}
}

// cell is one filled rectangle of a map, in data coordinates.
type cell struct {
	x0, x1, y0, y1 float64
	c              color.NRGBA
}

// cells draws filled rectangles; it sets the data range to their extent.
type cells []cell

func (cs cells) Plot(c draw.Canvas, p *plot.Plot) {
	tx, ty := p.Transforms(&c)
	for _, r := range cs {
		var path vg.Path
		path.Move(vg.Point{X: tx(r.x0), Y: ty(r.y0)})
		path.Line(vg.Point{X: tx(r.x1), Y: ty(r.y0)})
		path.Line(vg.Point{X: tx(r.x1), Y: ty(r.y1)})
		path.Line(vg.Point{X: tx(r.x0), Y: ty(r.y1)})
		path.Close()
		c.SetColor(r.c)
		c.Fill(path)
	}
}

func (cs cells) DataRange() (xmin, xmax, ymin, ymax float64) {
	xmin, ymin = math.Inf(1), math.Inf(1)
	xmax, ymax = math.Inf(-1), math.Inf(-1)
	for _, r := range cs {
		xmin, xmax = math.Min(xmin, r.x0), math.Max(xmax, r.x1)
		ymin, ymax = math.Min(ymin, r.y0), math.Max(ymax, r.y1)
	}
	return
}

// span returns the time extent of step i in the map: halfway to its
// neighbours (the first and last steps extend as far on their open side;
// a single step spans ±½ time unit).
func span(ts []float64, i int) (lo, hi float64) {
	switch {
	case len(ts) == 1:
		return ts[0] - 0.5, ts[0] + 0.5
	case i == 0:
		h := (ts[1] - ts[0]) / 2
		return ts[0] - h, ts[0] + h
	case i == len(ts)-1:
		h := (ts[i] - ts[i-1]) / 2
		return ts[i] - h, ts[i] + h
	}
	return (ts[i-1] + ts[i]) / 2, (ts[i] + ts[i+1]) / 2
}

// profile draws the time × position map of the nonwetting saturation along
// the flow axis (one column per step, one cell per profile bin; bins
// without pore space are left blank) with the front position on top, and a
// colour bar below.
func (b *builder) profile() Figure {
	title := "Saturation profile along the flow axis"
	ts := b.times()
	axis := "z"
	var cs cells
	front := make([]float64, len(b.rows))
	thr := math.NaN()
	for i := range b.rows {
		front[i] = series.F(b.rows[i].FrontPosition) * 1e3
		p := b.rows[i].Profile()
		if p == nil {
			continue
		}
		if p.Axis != "" {
			axis = p.Axis
		}
		thr = p.FrontThreshold
		lo, hi := span(ts, i)
		cs = append(cs, profileCells(p, lo, hi)...)
	}
	top := newPlot(title, b.timeLabel(), "distance from the inlet along "+axis+" (mm)")
	n := len(cs)
	spec := axes{}
	if n > 0 {
		top.Add(cs)
		// The time axis spans the columns exactly.
		top.X.Min, top.X.Max, _, _ = cs.DataRange()
		spec.fixedX = true
		label := "front"
		if !math.IsNaN(thr) {
			label = fmt.Sprintf("front (farthest bin with S_n > %g)", thr)
		}
		addSeries(top, styles[1], label, ts, front)
		b.markEvents(top)
	}
	bar := newPlot("", "nonwetting saturation S_n ("+UnitDimensionless+")", "")
	const steps = 20
	var scale cells
	for k := 0; k < steps; k++ {
		scale = append(scale, cell{x0: float64(k) / steps, x1: float64(k+1) / steps, y0: 0, y1: 1, c: ProfileColour((float64(k) + 0.5) / steps)})
	}
	bar.Add(scale)
	bar.X.Min, bar.X.Max, bar.Y.Min, bar.Y.Max = 0, 1, 0, 1
	bar.HideY()
	return Figure{Name: "saturation_profile", Title: title, TimeUnit: b.unit, panels: []*plot.Plot{top, bar},
		specs: []axes{spec, {fixedX: true, fixedY: true}}, heights: []float64{0.8, 0.2}, empty: n == 0}
}

// profileCells returns the cells of one step's profile between times lo
// and hi (axis units), positions in mm: bin k starts at k bin widths from
// the inlet and ends as far past its centre (so a thinner last bin ends at
// the end of the sample); bins without pore space have no cell.
func profileCells(p *series.Profile, lo, hi float64) cells {
	var cs cells
	for k, s := range p.SatNonwetting {
		if s == nil {
			continue
		}
		y0 := float64(k) * p.BinWidth * 1e3
		y1 := 2*p.Position[k]*1e3 - y0
		cs = append(cs, cell{x0: lo, x1: hi, y0: y0, y1: y1, c: ProfileColour(*s)})
	}
	return cs
}
