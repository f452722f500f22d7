package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"image/color"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/plots"
	"sluice/pkg/series"
)

// quantity is one key quantity compared between runs, in display units.
type quantity struct {
	name, label, unit string
	scale             float64
	get               func(*series.Row) (float64, bool)
}

func fq(f func(*series.Row) *float64) func(*series.Row) (float64, bool) {
	return func(r *series.Row) (float64, bool) {
		p := f(r)
		if p == nil {
			return math.NaN(), false
		}
		return *p, true
	}
}

func iq(f func(*series.Row) *int64) func(*series.Row) (float64, bool) {
	return func(r *series.Row) (float64, bool) {
		p := f(r)
		if p == nil {
			return math.NaN(), false
		}
		return float64(*p), true
	}
}

// compared are the key quantities of `sluice compare`.
var compared = []quantity{
	{"saturation_wetting", "S_w", "", 1, fq(func(r *series.Row) *float64 { return r.SatWetting })},
	{"porosity", "φ", "", 1, fq(func(r *series.Row) *float64 { return r.Porosity })},
	{"capillary_pressure", "Pc", "kPa", 1e-3, fq(func(r *series.Row) *float64 { return r.Pc })},
	{"specific_area_wn", "a_wn", "1/mm", 1e-3, fq(func(r *series.Row) *float64 { return r.SpecificWN })},
	{"contact_angle_mean", "θ mean", "°", 1, fq(func(r *series.Row) *float64 { return r.AngleMean })},
	{"ganglia_count", "ganglia", "", 1, iq(func(r *series.Row) *int64 { return r.GangliaCount })},
	{"euler_nonwetting", "χ_n", "", 1, iq(func(r *series.Row) *int64 { return r.EulerNonwetting })},
	{"front_position", "front", "mm", 1e3, fq(func(r *series.Row) *float64 { return r.FrontPosition })},
}

// stepDiff is one step present in both runs: values of A and B per
// quantity (display units, NaN when null).
type stepDiff struct {
	Step string
	Time float64
	A, B []float64
}

// Delta returns B − A of quantity q (NaN when either is null).
func (d stepDiff) Delta(q int) float64 { return d.B[q] - d.A[q] }

// diffRuns joins two series by step. onlyA and onlyB are the steps present
// in one run only.
func diffRuns(a, b []series.Row) (both []stepDiff, onlyA, onlyB []string) {
	idx := map[string]*series.Row{}
	for i := range b {
		idx[b[i].Step] = &b[i]
	}
	seen := map[string]bool{}
	for i := range a {
		ra := &a[i]
		rb := idx[ra.Step]
		if rb == nil {
			onlyA = append(onlyA, ra.Step)
			continue
		}
		seen[ra.Step] = true
		d := stepDiff{Step: ra.Step, Time: ra.Time}
		for _, q := range compared {
			va, _ := q.get(ra)
			vb, _ := q.get(rb)
			d.A, d.B = append(d.A, va*q.scale), append(d.B, vb*q.scale)
		}
		both = append(both, d)
	}
	for _, r := range b {
		if !seen[r.Step] {
			onlyB = append(onlyB, r.Step)
		}
	}
	return both, onlyA, onlyB
}

func fmtDelta(v float64) string {
	if math.IsNaN(v) {
		return "—"
	}
	return fmt.Sprintf("%+.4g", v)
}

// printCompare writes the per-step differences and a summary per quantity.
func printCompare(w io.Writer, name, ha, hb string, both []stepDiff, onlyA, onlyB []string) {
	fmt.Fprintf(w, "campaign %s: run B %s − run A %s, %d common steps\n\n", name, hb, ha, len(both))
	tw := tabwriter.NewWriter(w, 0, 2, 2, ' ', tabwriter.AlignRight)
	head := []string{"step", "time s"}
	for _, q := range compared {
		head = append(head, strings.TrimSpace("Δ"+q.label+" "+q.unit))
	}
	fmt.Fprintln(tw, strings.Join(head, "\t")+"\t")
	for _, d := range both {
		cells := []string{d.Step, fmt.Sprintf("%.0f", d.Time)}
		for i := range compared {
			cells = append(cells, fmtDelta(d.Delta(i)))
		}
		fmt.Fprintln(tw, strings.Join(cells, "\t")+"\t")
	}
	tw.Flush()
	fmt.Fprintln(w)
	tw = tabwriter.NewWriter(w, 0, 2, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "quantity\tunit\tmean A\tmean B\tmean Δ\tmax |Δ|\tat step\t")
	for i, q := range compared {
		var sa, sb, sd, na, nb, nd float64
		maxAbs, at := math.NaN(), "—"
		for _, d := range both {
			if !math.IsNaN(d.A[i]) {
				sa, na = sa+d.A[i], na+1
			}
			if !math.IsNaN(d.B[i]) {
				sb, nb = sb+d.B[i], nb+1
			}
			if x := d.Delta(i); !math.IsNaN(x) {
				sd, nd = sd+x, nd+1
				if math.IsNaN(maxAbs) || math.Abs(x) > maxAbs {
					maxAbs, at = math.Abs(x), d.Step
				}
			}
		}
		mean := func(s, n float64) string {
			if n == 0 {
				return "—"
			}
			return fmt.Sprintf("%.4g", s/n)
		}
		md := "—"
		if nd > 0 {
			md = fmtDelta(sd / nd)
		}
		mx := "—"
		if !math.IsNaN(maxAbs) {
			mx = fmt.Sprintf("%.4g", maxAbs)
		}
		unit := q.unit
		if unit == "" {
			unit = "–"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", q.label, unit, mean(sa, na), mean(sb, nb), md, mx, at)
	}
	tw.Flush()
	if len(onlyA) > 0 {
		fmt.Fprintf(w, "\nonly in run A (%d): %s\n", len(onlyA), strings.Join(onlyA, ", "))
	}
	if len(onlyB) > 0 {
		fmt.Fprintf(w, "\nonly in run B (%d): %s\n", len(onlyB), strings.Join(onlyB, ", "))
	}
}

// writeComparePlots draws each quantity of runs A and B against time in
// one figure, as dir/<quantity>.png and .svg, and returns the paths.
func writeComparePlots(dir, ha, hb string, a, b []series.Row) ([]string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("compare: %w", err)
	}
	var paths []string
	for _, q := range compared {
		p := plot.New()
		p.Title.Text = q.label + ": run A vs run B"
		p.X.Label.Text = "time t (s)"
		p.Y.Label.Text = q.label
		if q.unit != "" {
			p.Y.Label.Text += " (" + q.unit + ")"
		}
		p.Legend.Top = true
		p.Add(plotter.NewGrid())
		for i, run := range []struct {
			hash string
			rows []series.Row
		}{{ha, a}, {hb, b}} {
			var pts plotter.XYs
			for j := range run.rows {
				if v, ok := q.get(&run.rows[j]); ok && !math.IsNaN(v) && !math.IsInf(v, 0) {
					pts = append(pts, plotter.XY{X: run.rows[j].Time, Y: v * q.scale})
				}
			}
			if len(pts) == 0 {
				continue
			}
			col := []color.NRGBA{plots.Palette.Ink, plots.Palette.Amber}[i]
			l, err := plotter.NewLine(pts)
			if err != nil {
				return paths, fmt.Errorf("compare: %s: %w", q.name, err)
			}
			l.Color, l.Width = col, vg.Points(1.5)
			if i == 1 {
				l.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
			}
			sc, _ := plotter.NewScatter(pts)
			sc.GlyphStyle = draw.GlyphStyle{Color: col, Radius: vg.Points(2.5), Shape: []draw.GlyphDrawer{draw.CircleGlyph{}, draw.TriangleGlyph{}}[i]}
			p.Add(l, sc)
			p.Legend.Add(fmt.Sprintf("%s %s", []string{"A", "B"}[i], run.hash), l, sc)
		}
		for _, ext := range []string{".png", ".svg"} {
			path := filepath.Join(dir, q.name+ext)
			if err := p.Save(plots.Width, plots.Height, path); err != nil {
				return paths, fmt.Errorf("compare: %s: %w", path, err)
			}
			paths = append(paths, path)
		}
	}
	return paths, nil
}

// loadRunSeries reads the series of one run.
func loadRunSeries(ctx context.Context, st runStore, c layout.Campaign, hash string) ([]series.Row, error) {
	jk, _ := campaign.RunSeriesKeys(c, hash)
	b, err := st.Get(ctx, jk)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, fmt.Errorf("campaign %s: run %s has no series yet (%s)", c.Name(), hash, jk)
	}
	if err != nil {
		return nil, err
	}
	rows, err := series.Decode(b)
	if err != nil {
		return nil, fmt.Errorf("campaign %s: %s: %w", c.Name(), jk, err)
	}
	return rows, nil
}

// runCompare is `sluice compare`.
func runCompare(args []string) int {
	fs := flag.NewFlagSet("compare", flag.ContinueOnError)
	var cf campaignFlags
	cf.register(fs)
	runs := fs.String("runs", "", "the two runs `A,B` (parameter hashes, unique prefixes or \"current\")")
	out := fs.String("out", "", "directory for the overlaid plots (default DATA/compare/<campaign>-<A>-<B>; \"off\" for none)")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	ab := strings.Split(*runs, ",")
	if len(pos) != 1 || len(ab) != 2 {
		return fail(exitBadInput, "compare: usage: sluice compare CAMPAIGN --runs A,B")
	}
	ctx, stop := signalContext()
	defer stop()
	st, err := cf.open(ctx)
	if err != nil {
		return fail(exitBadInput, "compare: %v", err)
	}
	c, err := layout.NewCampaign(pos[0])
	if err != nil {
		return fail(exitBadInput, "compare: %v", err)
	}
	rec, err := campaign.LoadRecord(ctx, st, c)
	if err != nil {
		return fail(exitBadInput, "compare: %v", err)
	}
	var hashes [2]string
	var rows [2][]series.Row
	for i, s := range ab {
		if hashes[i], err = resolveRun(rec, strings.TrimSpace(s)); err != nil {
			return fail(exitBadInput, "compare: %v", err)
		}
		if rows[i], err = loadRunSeries(ctx, st, c, hashes[i]); err != nil {
			return fail(exitBadInput, "compare: %v", err)
		}
	}
	both, onlyA, onlyB := diffRuns(rows[0], rows[1])
	printCompare(stdout, c.Name(), hashes[0], hashes[1], both, onlyA, onlyB)
	if *out == "off" {
		return exitOK
	}
	dir := *out
	if dir == "" {
		dir = filepath.Join(cf.data, "compare", fmt.Sprintf("%s-%.8s-%.8s", c.Name(), hashes[0], hashes[1]))
	}
	paths, err := writeComparePlots(dir, hashes[0], hashes[1], rows[0], rows[1])
	if err != nil {
		return fail(exitFailure, "compare: campaign %s: %v", c.Name(), err)
	}
	fmt.Fprintf(stdout, "\nplots: %s (%d files, PNG and SVG)\n", dir, len(paths))
	return exitOK
}
