// Package plots draws the figures of a campaign's series with gonum/plot,
// as PNG and SVG, for the live page, papers and logbooks:
//
//	saturation          S_w and S_n against time, axis fixed to 0–1
//	capillary_pressure  Pc (kPa; area-weighted mean and median, Pc = σκ, and the mean
//	                    over the interfaces of the connected and of the trapped
//	                    nonwetting ganglia) against time, or the total curvature κ
//	                    (1/mm) when σ is not set; means with ±1 standard error bars
//	curvature           total curvature κ of the w–n interface (1/mm), mean (± standard
//	                    error) and median, against time
//	specific_area       specific interfacial areas a_wn, a_ws, a_ns per bulk volume
//	                    (mm²/mm³ of bulk volume) against time
//	pc_saturation       Pc–S_w trajectory (κ–S_w without σ), ± standard error bars
//	area_saturation     a_wn–S_w trajectory
//	contact_angle       contact-angle distribution of the latest step (bars) with the
//	                    running distribution of all steps (line), 5° bins, per degree,
//	                    and the latest step's mean angle ± standard error
//
// Standard errors come from the spread between spatial blocks (package
// blockse; docs/capillary-pressure-uncertainty.md); a point without one
// has no bar.
//
//	contact_angles      the contact angle of each step three ways side by side against time:
//	                    geometric (median with the 25–75 % range of the step's distribution,
//	                    and mean ± SE), thermodynamic (energy balance with the previous
//	                    step, ± SE from the connected Pc) and topological (Gauss–Bonnet on
//	                    the trapped ganglia's surfaces)
//	ganglia             nonwetting ganglia count and largest-ganglion volume fraction against time
//	saturation_profile  time × position map of the nonwetting saturation along the flow
//	                    axis (one column per step, reaching halfway to its neighbours;
//	                    white S_n = 0 to dark blue S_n = 1, colour bar below; bins without
//	                    pore space blank) with the front position (mm from the inlet) on top
//	pore_filling        drainage and imbibition pore-filling event rates (1/s) against time,
//	                    and the event-volume distribution of the latest step with events
//	                    (bins that double, x = log₁₀ of the bin's low edge in µm³)
//	ganglion_tracking   trapped saturation and the fraction of trapped ganglia that moved
//	                    (top), ganglion splits and merges per step (bottom), against time
//	geometric_state     trajectory of the geometric state (McClure et al. 2018, Phys. Rev.
//	                    Fluids 3:084306): J_wn = ∫H dA over the w–n interface and χ_n,
//	                    each per bulk volume, against S_w in two stacked panels (a_wn
//	                    against S_w is area_saturation), the latest step ringed
//	experiment_log      the rig log (package riglog): the rig's differential-pressure
//	                    transducer and the image Pc of the connected nonwetting ganglia
//	                    (± SE) against time (kPa), and S_w against the pore volumes
//	                    injected (empty without a rig log)
//
// Every figure's title names the campaign and the run (short parameter
// hash). Time axes are in s, min or h chosen by the campaign's length (see
// TimeUnit); numeric axes end on round ticks (1, 2 or 5 × 10^k apart,
// RoundTicks), counts on integers; fractions are fixed to 0–1. Units are
// written as in the Unit constants, the same on the live page and in the
// report.
//
// Time plots mark breakthrough and steady-state events with vertical lines.
// Null values leave gaps in lines. Colours come from Palette (see its
// documentation for why they stay distinguishable with colour-vision
// deficiencies); series also differ by dash and glyph.
package plots

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"sluice/pkg/events"
	"sluice/pkg/series"
)

// Figure size: 6 × 4 inches; PNG at DPI dots per inch is PixelWidth ×
// PixelHeight pixels.
const (
	Width       = 6 * vg.Inch
	Height      = 4 * vg.Inch
	DPI         = 100
	PixelWidth  = 600
	PixelHeight = 400
)

// AngleBin is the bin width, in degrees, of the contact-angle figure (the
// series stores 1° bins; 5 are summed for a readable figure).
const AngleBin = 5

// Names lists the figures Build always returns, in that order. The
// Registration figure follows when a row carries a registration shift
// (reference-scan mode with registration on).
var Names = []string{"saturation", "capillary_pressure", "curvature", "specific_area",
	"pc_saturation", "area_saturation", "contact_angle", "ganglia", "saturation_profile", "pore_filling", "contact_angles", "ganglion_tracking",
	"geometric_state", "experiment_log"}

// Registration is the name of the figure of the steps' drift registration.
const Registration = "registration"

// Unit texts of the figures' axes, written the same way in the report
// and on the live page. Dimensionless quantities carry "–".
const (
	UnitDimensionless = "–"
	UnitPressure      = "kPa"
	UnitCurvature     = "1/mm"
	// UnitSpecificArea: interfacial area per bulk volume of the sample
	// (solid included), numerically equal to 1/mm.
	UnitSpecificArea = "mm²/mm³ of bulk volume"
	UnitAngle        = "°"
	UnitAngleDensity = "1/°"
	UnitShift        = "µm"
)

// Run names the campaign and run a figure belongs to; each figure's title
// carries them.
type Run struct {
	Campaign string
	// Hash is the run's parameter hash; the title shows its first 8
	// characters.
	Hash string
}

// Caption returns "campaign NAME, run HASH8" (parts left out when empty).
func (r Run) Caption() string {
	h := r.Hash
	if len(h) > 8 {
		h = h[:8]
	}
	switch {
	case r.Campaign != "" && h != "":
		return "campaign " + r.Campaign + ", run " + h
	case r.Campaign != "":
		return "campaign " + r.Campaign
	case h != "":
		return "run " + h
	}
	return ""
}

// Figure is one drawn figure: one panel, or several stacked with aligned
// axes.
type Figure struct {
	Name  string
	Title string
	// TimeUnit is the unit of the time axis ("s", "min" or "h"; empty for
	// figures without one).
	TimeUnit string
	panels   []*plot.Plot
	specs    []axes
	// heights, when set, are the fractions of the figure height of each
	// panel, top first (panels are then drawn without aligning their axes).
	heights []float64
	// sharedX makes the stacked panels one time axis: every panel gets the
	// union of their x ranges (only the bottom one shows it).
	sharedX bool
	empty   bool
}

// axes says how a panel's axes are finished: fixed ranges stay as set,
// integer axes get integer ticks.
type axes struct{ fixedX, fixedY, intY bool }

// Build draws every figure of the series (rows sorted by time; see
// series.Sort) with the given events marked, titled with the run. Figures
// without data are still drawn, with "(no data)" in the title.
func Build(rows []series.Row, evs []events.Event, run Run) []Figure {
	unit, per := TimeUnit(rows)
	b := builder{rows: rows, evs: evs, unit: unit, perUnit: per}
	figs := []Figure{
		b.saturation(), b.pressure(), b.curvature(), b.area(),
		b.pcTrajectory(), b.areaTrajectory(), b.angles(), b.ganglia(), b.profile(), b.filling(), b.wettability(), b.tracking(),
		b.geometric(), b.experimentLog(),
	}
	if b.hasRegistration() {
		figs = append(figs, b.registration())
	}
	for i := range figs {
		f := &figs[i]
		for j, p := range f.panels {
			var a axes
			if j < len(f.specs) {
				a = f.specs[j]
			}
			if !a.fixedY {
				headroom(p)
			}
			finish(p, a)
		}
		if f.sharedX {
			shareX(f.panels, b.times())
		}
		t := f.Title
		if f.empty {
			t += " (no data)"
		}
		if c := run.Caption(); c != "" {
			t += "\n" + c
		}
		f.panels[0].Title.Text = t
	}
	return figs
}

// TimeUnit chooses the time axis unit from the campaign's length (last
// minus first step time): seconds below 10 min, minutes below 3 h, hours
// from 3 h. It returns the unit and its length in seconds.
func TimeUnit(rows []series.Row) (string, float64) {
	if len(rows) == 0 {
		return "s", 1
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for i := range rows {
		lo, hi = math.Min(lo, rows[i].Time), math.Max(hi, rows[i].Time)
	}
	switch span := hi - lo; {
	case span < 600:
		return "s", 1
	case span < 3*3600:
		return "min", 60
	}
	return "h", 3600
}

// RoundStep returns the tick spacing for the range [lo, hi]: 1, 2 or 5 ×
// 10^k, the smallest giving at most 6 intervals; at least 1 when integer.
func RoundStep(lo, hi float64, integer bool) float64 {
	raw := (hi - lo) / 6
	if !(raw > 0) {
		return 1
	}
	mag := math.Pow(10, math.Floor(math.Log10(raw)))
	step := 10 * mag
	for _, m := range []float64{1, 2, 5} {
		if m*mag >= raw*(1-1e-12) {
			step = m * mag
			break
		}
	}
	if integer && step < 1 {
		step = 1
	}
	return step
}

// RoundTicks labels multiples of RoundStep(min, max) within the axis
// range, with as many decimals as the step needs.
type RoundTicks struct{ Integer bool }

// Ticks implements plot.Ticker.
func (r RoundTicks) Ticks(lo, hi float64) []plot.Tick {
	step := RoundStep(lo, hi, r.Integer)
	dec := 0
	if step < 1 {
		dec = int(math.Ceil(-math.Log10(step) - 1e-9))
	}
	var ticks []plot.Tick
	for k := math.Ceil(lo/step - 1e-9); k*step <= hi+step*1e-9; k++ {
		v := k * step
		if v == 0 {
			v = 0 // no "-0"
		}
		ticks = append(ticks, plot.Tick{Value: v, Label: strconv.FormatFloat(v, 'f', dec, 64)})
	}
	return ticks
}

// finish rounds a panel's free axes outwards to multiples of their tick
// step and sets round tickers (fixed axes keep their range).
func finish(p *plot.Plot, a axes) {
	round := func(ax *plot.Axis, fixed, integer bool) {
		if _, ok := ax.Tick.Marker.(plot.ConstantTicks); ok {
			return
		}
		ax.Tick.Marker = RoundTicks{Integer: integer}
		if fixed {
			return
		}
		if math.IsInf(ax.Min, 0) || math.IsInf(ax.Max, 0) || ax.Min > ax.Max {
			ax.Min, ax.Max = 0, 1
		}
		if ax.Min == ax.Max {
			d := math.Max(math.Abs(ax.Min)*0.1, 1)
			ax.Min, ax.Max = ax.Min-d, ax.Max+d
		}
		for range 3 { // the step of the widened range can differ once
			step := RoundStep(ax.Min, ax.Max, integer)
			ax.Min, ax.Max = math.Floor(ax.Min/step+1e-9)*step, math.Ceil(ax.Max/step-1e-9)*step
		}
	}
	round(&p.X, a.fixedX, false)
	round(&p.Y, a.fixedY, a.intY)
}

// shareX gives every panel the union of the panels' x ranges and of the
// steps' times, rounded out to the tick step, so that a time drawn in one
// panel lies above the same time in the others even when their series
// start or end at different steps, and the axis spans the whole campaign.
func shareX(ps []*plot.Plot, times []float64) {
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, p := range ps {
		lo, hi = math.Min(lo, p.X.Min), math.Max(hi, p.X.Max)
	}
	for _, t := range times {
		if !math.IsNaN(t) {
			lo, hi = math.Min(lo, t), math.Max(hi, t)
		}
	}
	for range 3 {
		step := RoundStep(lo, hi, false)
		lo, hi = math.Floor(lo/step+1e-9)*step, math.Ceil(hi/step-1e-9)*step
	}
	for _, p := range ps {
		p.X.Min, p.X.Max = lo, hi
	}
}

// WriteSVG renders f as SVG.
func (f *Figure) WriteSVG(w io.Writer) error {
	c := vgsvg.New(Width, Height)
	f.draw(draw.New(c))
	if _, err := c.WriteTo(w); err != nil {
		return fmt.Errorf("plots: %s: write SVG: %w", f.Name, err)
	}
	return nil
}

// WritePNG renders f as a PixelWidth × PixelHeight PNG.
func (f *Figure) WritePNG(w io.Writer) error {
	c := vgimg.NewWith(vgimg.UseWH(Width, Height), vgimg.UseDPI(DPI))
	f.draw(draw.New(c))
	if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(w); err != nil {
		return fmt.Errorf("plots: %s: write PNG: %w", f.Name, err)
	}
	return nil
}

// WriteFiles writes every figure as dir/<name>.png and dir/<name>.svg and
// returns the paths written.
func WriteFiles(dir string, rows []series.Row, evs []events.Event, run Run) ([]string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("plots: %w", err)
	}
	var paths []string
	for _, f := range Build(rows, evs, run) {
		for _, ext := range []string{".png", ".svg"} {
			p := filepath.Join(dir, f.Name+ext)
			if err := writeFile(p, &f, ext); err != nil {
				return paths, err
			}
			paths = append(paths, p)
		}
	}
	return paths, nil
}

func writeFile(p string, f *Figure, ext string) error {
	out, err := os.Create(p)
	if err != nil {
		return fmt.Errorf("plots: %w", err)
	}
	if ext == ".png" {
		err = f.WritePNG(out)
	} else {
		err = f.WriteSVG(out)
	}
	if cerr := out.Close(); err == nil && cerr != nil {
		err = fmt.Errorf("plots: %s: %w", p, cerr)
	}
	return err
}

func (f *Figure) draw(c draw.Canvas) {
	c.SetColor(color.White)
	c.Fill(c.Rectangle.Path())
	if len(f.panels) == 1 {
		f.panels[0].Draw(c)
		return
	}
	if len(f.heights) == len(f.panels) {
		top := c.Max.Y
		full := c.Max.Y - c.Min.Y
		for i, p := range f.panels {
			sub := c
			sub.Max.Y = top
			sub.Min.Y = top - vg.Length(f.heights[i])*full
			top = sub.Min.Y
			p.Draw(sub)
		}
		return
	}
	grid := make([][]*plot.Plot, len(f.panels))
	for i, p := range f.panels {
		grid[i] = []*plot.Plot{p}
	}
	tiles := draw.Tiles{Rows: len(f.panels), Cols: 1, PadY: vg.Points(6), PadTop: vg.Points(2), PadBottom: vg.Points(2)}
	cs := plot.Align(grid, tiles, c)
	for i, p := range f.panels {
		p.Draw(cs[i][0])
	}
}

type builder struct {
	rows    []series.Row
	evs     []events.Event
	unit    string  // time axis unit
	perUnit float64 // seconds per time unit
}

// style is the look of one data series.
type style struct {
	label  string
	colour color.NRGBA
	dashes []vg.Length
	glyph  draw.GlyphDrawer
}

var styles = []style{
	{colour: Palette.Ink, glyph: draw.CircleGlyph{}},
	{colour: Palette.Amber, dashes: []vg.Length{vg.Points(5), vg.Points(3)}, glyph: draw.SquareGlyph{}},
	{colour: Palette.Sky, dashes: []vg.Length{vg.Points(1.5), vg.Points(2)}, glyph: draw.TriangleGlyph{}},
	{colour: Palette.Umber, dashes: []vg.Length{vg.Points(6), vg.Points(2), vg.Points(1.5), vg.Points(2)}, glyph: draw.PyramidGlyph{}},
}

func newPlot(title, x, y string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = x
	p.Y.Label.Text = y
	p.Legend.Top = true
	// Off the right edge of the figure by a few points: the thumbnails'
	// glyphs would otherwise be cut by it.
	p.Legend.XOffs = -vg.Points(6)
	p.Add(plotter.NewGrid())
	return p
}

// addSeries adds the points (x[i], y[i]) with finite coordinates as glyphs
// joined by lines, breaking the line at NaN. It returns the number of
// points drawn.
func addSeries(p *plot.Plot, s style, label string, x, y []float64) int {
	var pts plotter.XYs
	var seg plotter.XYs
	var lines []plot.Plotter
	flush := func() {
		if len(seg) > 1 {
			l, _ := plotter.NewLine(seg)
			l.Color, l.Width, l.Dashes = s.colour, vg.Points(1.5), s.dashes
			lines = append(lines, l)
		}
		seg = nil
	}
	for i := range x {
		if finite(x[i]) && finite(y[i]) {
			pts = append(pts, plotter.XY{X: x[i], Y: y[i]})
			seg = append(seg, plotter.XY{X: x[i], Y: y[i]})
		} else {
			flush()
		}
	}
	flush()
	if len(pts) == 0 {
		return 0
	}
	sc, _ := plotter.NewScatter(pts)
	sc.GlyphStyle = draw.GlyphStyle{Color: s.colour, Radius: vg.Points(2.5), Shape: s.glyph}
	p.Add(lines...)
	p.Add(sc)
	l, _ := plotter.NewLine(plotter.XYs{{}, {}})
	l.Color, l.Width, l.Dashes = s.colour, vg.Points(1.5), s.dashes
	p.Legend.Add(label, l, sc)
	return len(pts)
}

// headroom raises the top of the y axis by a quarter of its range so the
// legend (drawn top right, inside the axes) does not cover data.
func headroom(p *plot.Plot) {
	if p.Y.Max > p.Y.Min {
		p.Y.Max += 0.25 * (p.Y.Max - p.Y.Min)
	}
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func (b *builder) col(get func(*series.Row) *float64, scale float64) []float64 {
	out := make([]float64, len(b.rows))
	for i := range b.rows {
		out[i] = series.F(get(&b.rows[i])) * scale
	}
	return out
}

func (b *builder) times() []float64 {
	out := make([]float64, len(b.rows))
	for i := range b.rows {
		out[i] = b.rows[i].Time / b.perUnit
	}
	return out
}

func (b *builder) timeLabel() string { return "time t (" + b.unit + ")" }

func (b *builder) timePlot(name, title, ylabel string, curves []curve) Figure {
	p := newPlot(title, b.timeLabel(), ylabel)
	n := 0
	for i, c := range curves {
		n += addSeries(p, styles[i], c.label, b.times(), c.y)
		if c.se != nil {
			addErrorBars(p, styles[i], b.times(), c.y, c.se)
		}
	}
	if n > 0 {
		b.markEvents(p)
	}
	return Figure{Name: name, Title: title, TimeUnit: b.unit, panels: []*plot.Plot{p}, empty: n == 0}
}

type curve struct {
	label string
	y     []float64
	// se, when set, is the standard error of y: drawn as bars y ± se.
	se []float64
}

// errPoints are the points with a finite value and a finite positive
// standard error: (x, y) and the half-length of their bar.
type errPoints struct {
	xy plotter.XYs
	e  []float64
}

func (e errPoints) Len() int                    { return len(e.xy) }
func (e errPoints) XY(i int) (float64, float64) { return e.xy[i].X, e.xy[i].Y }
func (e errPoints) YError(i int) (float64, float64) {
	return e.e[i], e.e[i]
}
func (e errPoints) XError(i int) (float64, float64) {
	return e.e[i], e.e[i]
}

// errorPoints keeps the points of x, y, se that get a bar.
func errorPoints(x, y, se []float64) errPoints {
	var ep errPoints
	for i := range x {
		if finite(x[i]) && finite(y[i]) && finite(se[i]) && se[i] > 0 {
			ep.xy = append(ep.xy, plotter.XY{X: x[i], Y: y[i]})
			ep.e = append(ep.e, se[i])
		}
	}
	return ep
}

// addErrorBars draws y ± se as vertical bars in the colour of s; it
// returns the number of bars.
func addErrorBars(p *plot.Plot, s style, x, y, se []float64) int {
	ep := errorPoints(x, y, se)
	if ep.Len() == 0 {
		return 0
	}
	eb, err := plotter.NewYErrorBars(ep)
	if err != nil {
		return 0
	}
	eb.LineStyle = draw.LineStyle{Color: s.colour, Width: vg.Points(1)}
	eb.CapWidth = vg.Points(4)
	p.Add(eb)
	return ep.Len()
}

func (b *builder) saturation() Figure {
	f := b.timePlot("saturation", "Saturation", "saturation ("+UnitDimensionless+")", []curve{
		{"S_w (wetting)", b.col(func(r *series.Row) *float64 { return r.SatWetting }, 1), nil},
		{"S_n (nonwetting)", b.col(func(r *series.Row) *float64 { return r.SatNonwetting }, 1), nil},
	})
	f.panels[0].Y.Min, f.panels[0].Y.Max = 0, 1
	f.specs = []axes{{fixedY: true}}
	return f
}

// hasPc reports whether any row has a capillary pressure.
func (b *builder) hasPc() bool {
	for i := range b.rows {
		if b.rows[i].Pc != nil {
			return true
		}
	}
	return false
}

var (
	pcMean    = func(r *series.Row) *float64 { return r.Pc }
	pcMedian  = func(r *series.Row) *float64 { return r.PcMedian }
	pcSE      = func(r *series.Row) *float64 { return r.PcSE }
	kSE       = func(r *series.Row) *float64 { return r.CurvMeanSE }
	kMean     = func(r *series.Row) *float64 { return r.CurvMean }
	kMedian   = func(r *series.Row) *float64 { return r.CurvMedian }
	satWet    = func(r *series.Row) *float64 { return r.SatWetting }
	areaWN    = func(r *series.Row) *float64 { return r.SpecificWN }
	perMetreT = 1e-3 // 1/m → 1/mm
	pascalToK = 1e-3 // Pa → kPa
)

func (b *builder) pressure() Figure {
	if b.hasPc() {
		return b.timePlot("capillary_pressure", "Capillary pressure", "capillary pressure Pc ("+UnitPressure+")", []curve{
			{"Pc mean ± SE", b.col(pcMean, pascalToK), b.col(pcSE, pascalToK)},
			{"Pc median", b.col(pcMedian, pascalToK), nil},
			{"Pc connected ganglia ± SE", b.col(func(r *series.Row) *float64 { return r.PcConnected }, pascalToK),
				b.col(func(r *series.Row) *float64 { return r.PcConnectedSE }, pascalToK)},
			{"Pc trapped ganglia ± SE", b.col(func(r *series.Row) *float64 { return r.PcTrapped }, pascalToK),
				b.col(func(r *series.Row) *float64 { return r.PcTrappedSE }, pascalToK)},
		})
	}
	return b.timePlot("capillary_pressure", "Interface curvature (no σ: Pc not computed)", "total curvature κ ("+UnitCurvature+")", []curve{
		{"κ mean ± SE", b.col(kMean, perMetreT), b.col(kSE, perMetreT)},
		{"κ median", b.col(kMedian, perMetreT), nil},
		{"κ connected ganglia ± SE", b.col(func(r *series.Row) *float64 { return r.CurvConnected }, perMetreT),
			b.col(func(r *series.Row) *float64 { return r.CurvConnectedSE }, perMetreT)},
		{"κ trapped ganglia ± SE", b.col(func(r *series.Row) *float64 { return r.CurvTrapped }, perMetreT),
			b.col(func(r *series.Row) *float64 { return r.CurvTrappedSE }, perMetreT)},
	})
}

// hasRegistration reports whether any row carries a registration shift.
func (b *builder) hasRegistration() bool {
	for i := range b.rows {
		if b.rows[i].RegZM != nil || b.rows[i].RegZ != nil {
			return true
		}
	}
	return false
}

// registration draws each step's shift against the reference scan, per
// axis, in µm (pkg/register; the scan shows at p what the reference shows
// at p − shift).
func (b *builder) registration() Figure {
	const toMicro = 1e6
	return b.timePlot(Registration, "Drift registration: shift of each step against the reference scan", "shift ("+UnitShift+")", []curve{
		{"z", b.col(func(r *series.Row) *float64 { return r.RegZM }, toMicro), nil},
		{"y", b.col(func(r *series.Row) *float64 { return r.RegYM }, toMicro), nil},
		{"x", b.col(func(r *series.Row) *float64 { return r.RegXM }, toMicro), nil},
	})
}

func (b *builder) curvature() Figure {
	return b.timePlot("curvature", "Curvature of the w–n interface", "total curvature κ ("+UnitCurvature+")", []curve{
		{"κ mean (area-weighted) ± SE", b.col(kMean, perMetreT), b.col(kSE, perMetreT)},
		{"κ median", b.col(kMedian, perMetreT), nil},
	})
}

func (b *builder) area() Figure {
	return b.timePlot("specific_area", "Specific interfacial area per bulk volume", "specific area a ("+UnitSpecificArea+")", []curve{
		{"a_wn", b.col(areaWN, perMetreT), nil},
		{"a_ws", b.col(func(r *series.Row) *float64 { return r.SpecificWS }, perMetreT), nil},
		{"a_ns", b.col(func(r *series.Row) *float64 { return r.SpecificNS }, perMetreT), nil},
	})
}

func (b *builder) trajectory(name, title, ylabel, label string, y, se []float64) Figure {
	p := newPlot(title, "wetting saturation S_w ("+UnitDimensionless+")", ylabel)
	n := addSeries(p, styles[0], label, b.col(satWet, 1), y)
	if se != nil {
		addErrorBars(p, styles[0], b.col(satWet, 1), y, se)
	}
	if n > 0 {
		// Ring the latest point so the direction of travel is visible.
		x := b.col(satWet, 1)
		for i := len(y) - 1; i >= 0; i-- {
			if finite(x[i]) && finite(y[i]) {
				sc, _ := plotter.NewScatter(plotter.XYs{{X: x[i], Y: y[i]}})
				sc.GlyphStyle = draw.GlyphStyle{Color: Palette.Amber, Radius: vg.Points(5), Shape: draw.RingGlyph{}}
				p.Add(sc)
				p.Legend.Add("latest step "+b.rows[i].Step, sc)
				break
			}
		}
	}
	p.X.Min, p.X.Max = 0, 1
	return Figure{Name: name, Title: title, panels: []*plot.Plot{p}, specs: []axes{{fixedX: true}}, empty: n == 0}
}

func (b *builder) pcTrajectory() Figure {
	if b.hasPc() {
		return b.trajectory("pc_saturation", "Capillary pressure – saturation", "capillary pressure Pc ("+UnitPressure+")", "Pc mean ± SE", b.col(pcMean, pascalToK), b.col(pcSE, pascalToK))
	}
	return b.trajectory("pc_saturation", "Curvature – saturation (no σ)", "total curvature κ ("+UnitCurvature+")", "κ mean ± SE", b.col(kMean, perMetreT), b.col(kSE, perMetreT))
}

func (b *builder) areaTrajectory() Figure {
	return b.trajectory("area_saturation", "Interfacial area – saturation", "specific area a_wn ("+UnitSpecificArea+")", "a_wn", b.col(areaWN, perMetreT), nil)
}

// AngleDistributions returns the contact-angle distribution of the latest
// step with samples and the running distribution over all steps, each
// rebinned to AngleBin degrees and normalised to a density per degree
// (sums × AngleBin = 1). latest is the index of that step in rows, −1 when
// no step has samples.
func AngleDistributions(rows []series.Row) (last, running []float64, latest int) {
	nb := 180 / AngleBin
	last, running = make([]float64, nb), make([]float64, nb)
	latest = -1
	var totLast, totRun float64
	for i := range rows {
		var n float64
		for _, c := range rows[i].AngleHist {
			n += float64(c)
		}
		if n > 0 {
			latest = i
		}
	}
	for i := range rows {
		for deg, c := range rows[i].AngleHist {
			if deg >= 180 || c <= 0 {
				continue
			}
			running[deg/AngleBin] += float64(c)
			totRun += float64(c)
			if i == latest {
				last[deg/AngleBin] += float64(c)
				totLast += float64(c)
			}
		}
	}
	for k := range last {
		if totLast > 0 {
			last[k] /= totLast * AngleBin
		}
		if totRun > 0 {
			running[k] /= totRun * AngleBin
		}
	}
	return last, running, latest
}

func (b *builder) angles() Figure {
	title := "Contact angle through the wetting phase"
	p := newPlot(title, "contact angle θ ("+UnitAngle+")", "fraction of samples per degree ("+UnitAngleDensity+")")
	last, running, latest := AngleDistributions(b.rows)
	p.X.Min, p.X.Max = 0, 180
	var ticks []plot.Tick
	for d := 0; d <= 180; d += 30 {
		ticks = append(ticks, plot.Tick{Value: float64(d), Label: fmt.Sprint(d)})
	}
	p.X.Tick.Marker = plot.ConstantTicks(ticks)
	if latest < 0 {
		return Figure{Name: "contact_angle", Title: title, panels: []*plot.Plot{p}, specs: []axes{{fixedX: true}}, empty: true}
	}
	h := &plotter.Histogram{Width: AngleBin, FillColor: Palette.Sky}
	h.LineStyle = draw.LineStyle{Color: Palette.Ink, Width: vg.Points(0.5)}
	var line plotter.XYs
	for k := range last {
		lo := float64(k * AngleBin)
		h.Bins = append(h.Bins, plotter.HistogramBin{Min: lo, Max: lo + AngleBin, Weight: last[k]})
		line = append(line, plotter.XY{X: lo + AngleBin/2.0, Y: running[k]})
	}
	p.Add(h)
	p.Legend.Add("latest step "+b.rows[latest].Step, h)
	l, sc, _ := plotter.NewLinePoints(line)
	l.Color, l.Width, l.Dashes = Palette.Umber, vg.Points(1.5), styles[1].dashes
	sc.GlyphStyle = draw.GlyphStyle{Color: Palette.Umber, Radius: vg.Points(2), Shape: draw.SquareGlyph{}}
	p.Add(l, sc)
	p.Legend.Add(fmt.Sprintf("all steps (%d)", len(b.rows)), l, sc)
	p.Add(&vline{x: 90, style: draw.LineStyle{Color: Palette.Slate, Width: vg.Points(0.8), Dashes: []vg.Length{vg.Points(2), vg.Points(2)}}})
	// The latest step's mean angle ± SE, a horizontal bar above the bars.
	if r := &b.rows[latest]; r.AngleMean != nil {
		top := 0.0
		for k := range last {
			top = math.Max(top, math.Max(last[k], running[k]))
		}
		se := math.NaN()
		if r.AngleMeanSE != nil {
			se = *r.AngleMeanSE
		}
		pt := plotter.XYs{{X: *r.AngleMean, Y: 1.08 * top}}
		sc, _ := plotter.NewScatter(pt)
		sc.GlyphStyle = draw.GlyphStyle{Color: Palette.Ink, Radius: vg.Points(3), Shape: draw.CircleGlyph{}}
		p.Add(sc)
		label := fmt.Sprintf("mean %.1f° (latest step)", *r.AngleMean)
		if ep := errorPoints([]float64{pt[0].X}, []float64{pt[0].Y}, []float64{se}); ep.Len() > 0 {
			eb, err := plotter.NewXErrorBars(ep)
			if err == nil {
				eb.LineStyle = draw.LineStyle{Color: Palette.Ink, Width: vg.Points(1.2)}
				eb.CapWidth = vg.Points(5)
				p.Add(eb)
				label = fmt.Sprintf("mean %.1f ± %.1f° SE (latest step)", *r.AngleMean, se)
			}
		}
		p.Legend.Add(label, sc)
	}
	return Figure{Name: "contact_angle", Title: title, panels: []*plot.Plot{p}, specs: []axes{{fixedX: true}}}
}

func (b *builder) ganglia() Figure {
	count := make([]float64, len(b.rows))
	for i := range b.rows {
		count[i] = math.NaN()
		if c := b.rows[i].GangliaCount; c != nil {
			count[i] = float64(*c)
		}
	}
	top := newPlot("Nonwetting ganglia", "", "number of ganglia ("+UnitDimensionless+")")
	n := addSeries(top, styles[0], "ganglia", b.times(), count)
	top.Y.Min = 0 // counts start at zero
	bottom := newPlot("", b.timeLabel(), "largest ganglion fraction ("+UnitDimensionless+")")
	n += addSeries(bottom, styles[1], "largest / all nonwetting volume",
		b.times(), b.col(func(r *series.Row) *float64 { return r.LargestFraction }, 1))
	bottom.Y.Min, bottom.Y.Max = 0, 1
	if n > 0 {
		b.markEvents(top)
		b.markEvents(bottom)
	}
	top.HideX()
	return Figure{Name: "ganglia", Title: "Nonwetting ganglia", TimeUnit: b.unit, panels: []*plot.Plot{top, bottom}, sharedX: true,
		specs: []axes{{intY: true}, {fixedY: true}}, empty: n == 0}
}

var eventStyles = map[events.Kind]draw.LineStyle{
	events.Breakthrough:      {Color: color.Black, Width: vg.Points(1), Dashes: []vg.Length{vg.Points(4), vg.Points(2)}},
	events.SteadyState:       {Color: Palette.Slate, Width: vg.Points(1.2), Dashes: []vg.Length{vg.Points(1), vg.Points(2)}},
	events.GreyDrift:         {Color: Palette.Umber, Width: vg.Points(1)},
	events.RegistrationShift: {Color: Palette.Umber, Width: vg.Points(1.2), Dashes: []vg.Length{vg.Points(6), vg.Points(2)}},
}

func (b *builder) markEvents(p *plot.Plot) {
	seen := map[events.Kind]bool{}
	for _, e := range b.evs {
		v := &vline{x: e.Time / b.perUnit, style: eventStyles[e.Kind]}
		p.Add(v)
		if !seen[e.Kind] {
			seen[e.Kind] = true
			p.Legend.Add(string(e.Kind), v)
		}
	}
}

// vline is a vertical line across the data area at x; it does not change
// the axis ranges.
type vline struct {
	x     float64
	style draw.LineStyle
}

func (v *vline) Plot(c draw.Canvas, p *plot.Plot) {
	if v.x < p.X.Min || v.x > p.X.Max {
		return
	}
	tx, _ := p.Transforms(&c)
	x := tx(v.x)
	c.StrokeLine2(v.style, x, c.Min.Y, x, c.Max.Y)
}

func (v *vline) Thumbnail(c *draw.Canvas) {
	x := (c.Min.X + c.Max.X) / 2
	c.StrokeLine2(v.style, x, c.Min.Y, x, c.Max.Y)
}
