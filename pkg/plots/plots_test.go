package plots

import (
	"bytes"
	"encoding/json"
	"encoding/xml"
	"fmt"
	"image/color"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"sluice/pkg/events"
	"sluice/pkg/series"
)

func fp(v float64) *float64 { return &v }

// drainage makes an n-step drainage series: S_w falls, Pc rises, contact
// angles centred near 60°; Pc is null at nullPc (−1: none).
func drainage(n, nullPc int) []series.Row {
	rows := make([]series.Row, n)
	for i := range rows {
		f := float64(i) / float64(n-1)
		sw := 1 - 0.7*f
		rows[i] = series.Row{Step: fmt.Sprintf("s%03d", i), Time: 40 * float64(i)}
		rows[i].SatWetting, rows[i].SatNonwetting = fp(sw), fp(1-sw)
		rows[i].Porosity = fp(0.21)
		k := 2/100e-6 + 3e4*f // 1/m
		rows[i].CurvMean, rows[i].CurvMedian = fp(k), fp(0.95*k)
		if i != nullPc {
			rows[i].Pc, rows[i].PcMedian = fp(0.03*k), fp(0.03*0.95*k)
		}
		rows[i].SpecificWN = fp(2000 * f * (1 - f) * 4)
		rows[i].SpecificWS = fp(12000 - 3000*f)
		rows[i].SpecificNS = fp(500 * f)
		// Geometric state: J_wn per bulk volume 1/m², χ_n per bulk volume 1/m³.
		rows[i].SpecificMeanCurvWN = fp(2e6 * f * (1 - f))
		rows[i].SpecificEulerNonwetting = fp(-3e9 * f)
		// Experiment log: the transducer reads 10 % above the image Pc;
		// 1.2 pore volumes injected by the last step.
		rows[i].RigDiffPressure = fp(1.1 * 0.03 * k)
		rows[i].PcConnected = fp(0.03 * k)
		rows[i].PoreVolumesInjected = fp(1.2 * f)
		g := int64(1 + i%5)
		rows[i].GangliaCount = &g
		rows[i].LargestFraction = fp(0.3 + 0.6*f)
		perc := i >= n/2
		rows[i].Percolates = &perc
		h := make([]int64, 180)
		for d := range h {
			h[d] = int64(100 * math.Exp(-math.Pow(float64(d)-60-float64(i), 2)/200))
		}
		rows[i].AngleHist = h
		// A front advancing through 8 bins of 0.5 mm: S_n 1 behind it.
		reach := 1 + int(7*f)
		prof := `{"axis":"z","bin_width_m":0.0005,"front_threshold":0.05,"position_m":[`
		sn := ""
		for k := 0; k < 8; k++ {
			if k > 0 {
				prof += ","
				sn += ","
			}
			prof += fmt.Sprint((float64(k) + 0.5) * 0.0005)
			if k < reach {
				sn += "1"
			} else {
				sn += "0"
			}
		}
		rows[i].Extra = map[string]json.RawMessage{"saturation_profile": json.RawMessage(prof + `],"saturation_nonwetting":[` + sn + `]}`)}
		// Pore-filling events: none before the first step, then i drainage
		// events of 1–2 voxels (1 µm³) per 40 s and one imbibition event.
		pf := `{"previous_step":null,"interval_s":null,"connectivity":26,"drainage":null,"imbibition":null,"note":"first step"}`
		if i > 0 {
			pf = fmt.Sprintf(`{"previous_step":"s%03d","interval_s":40,"connectivity":26,`+
				`"drainage":{"count":%d,"voxels":%d,"volume_m3":%g,"rate_per_s":%g,"volume_histogram":[%d],"volume_bin_low_m3":[1e-18],"largest":[]},`+
				`"imbibition":{"count":1,"voxels":1,"volume_m3":1e-18,"rate_per_s":0.025,"volume_histogram":[1],"volume_bin_low_m3":[1e-18],"largest":[]}}`,
				i-1, i, i, float64(i)*1e-18, float64(i)/40, i)
		}
		rows[i].Extra["pore_filling"] = json.RawMessage(pf)
		if i > 0 {
			rows[i].Extra["ganglion_tracking"] = json.RawMessage(fmt.Sprintf(`{"previous_step":"s%03d","one_to_one":3,"splits":%d,"merges":1,"appeared":0,"vanished":0,`+
				`"trapped_saturation":%g,"trapped_moved_fraction":0.5,"trapped_lifetime_mean_s":%d,"trapped":[]}`, i-1, i%3, 0.01*float64(i), 40*i))
		}
		rows[i].FrontPosition = fp(float64(reach) * 0.0005)
	}
	return rows
}

func hexOf(c color.NRGBA) string { return fmt.Sprintf("#%02X%02X%02X", c.R, c.G, c.B) }

var (
	pathRe   = regexp.MustCompile(`<path d="([^"]*)" style="([^"]*)"`)
	vertexRe = regexp.MustCompile(`[ML]`)
)

// strokeVertices returns the vertex counts of the unfilled paths stroked
// in colour c, and the number of paths filled with c.
func svgPaths(svg string, c color.NRGBA) (lines []int, filled int) {
	h := hexOf(c)
	for _, m := range pathRe.FindAllStringSubmatch(svg, -1) {
		st := m[2]
		if strings.Contains(st, "fill:none") && strings.Contains(st, "stroke:"+h) {
			lines = append(lines, len(vertexRe.FindAllString(m[1], -1)))
		}
		if strings.Contains(st, "fill:"+h) {
			filled++
		}
	}
	return lines, filled
}

func render(t *testing.T, f Figure) (svg []byte, pngb []byte) {
	t.Helper()
	var s, p bytes.Buffer
	if err := f.WriteSVG(&s); err != nil {
		t.Fatal(err)
	}
	if err := f.WritePNG(&p); err != nil {
		t.Fatal(err)
	}
	return s.Bytes(), p.Bytes()
}

func wellFormed(t *testing.T, name string, b []byte) {
	t.Helper()
	d := xml.NewDecoder(bytes.NewReader(b))
	n := 0
	for {
		_, err := d.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("%s: SVG is not well-formed XML: %v", name, err)
		}
		n++
	}
	if n < 10 {
		t.Fatalf("%s: SVG has only %d tokens", name, n)
	}
}

func byName(fs []Figure, name string) Figure {
	for _, f := range fs {
		if f.Name == name {
			return f
		}
	}
	panic(name)
}

func TestWriteFilesProducesDecodablePNGAndSVG(t *testing.T) {
	rows := drainage(17, -1)
	evs, err := events.Detect(rows, events.Defaults())
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	paths, err := WriteFiles(dir, rows, evs, Run{Campaign: "drainage-test", Hash: "0123456789abcdef"})
	if err != nil {
		t.Fatal(err)
	}
	if len(paths) != 2*len(Names) {
		t.Fatalf("%d files, want %d", len(paths), 2*len(Names))
	}
	for _, name := range Names {
		pb, err := os.ReadFile(filepath.Join(dir, name+".png"))
		if err != nil {
			t.Fatal(err)
		}
		img, err := png.Decode(bytes.NewReader(pb))
		if err != nil {
			t.Fatalf("%s.png: %v", name, err)
		}
		if b := img.Bounds(); b.Dx() != PixelWidth || b.Dy() != PixelHeight {
			t.Fatalf("%s.png is %v, want %d×%d", name, b, PixelWidth, PixelHeight)
		}
		// The first series colour must appear in the raster (data drawn).
		found := false
		for y := 0; y < PixelHeight && !found; y++ {
			for x := 0; x < PixelWidth; x++ {
				r, g, b, _ := img.At(x, y).RGBA()
				c := Palette.Ink
				if name == "contact_angle" {
					c = Palette.Sky
				}
				if uint8(r>>8) == c.R && uint8(g>>8) == c.G && uint8(b>>8) == c.B {
					found = true
					break
				}
			}
		}
		if !found {
			t.Errorf("%s.png: no pixel in the data colour", name)
		}
		sb, err := os.ReadFile(filepath.Join(dir, name+".svg"))
		if err != nil {
			t.Fatal(err)
		}
		wellFormed(t, name, sb)
	}
}

// TestSVGHoldsEveryPoint counts the vertices of the data lines and the
// glyphs in the SVG: one per step, plus one glyph for the legend.
func TestSVGHoldsEveryPoint(t *testing.T) {
	const n = 17
	rows := drainage(n, 5) // Pc null at step 5: the Pc line breaks there
	figs := Build(rows, nil, Run{})
	for _, c := range []struct {
		fig       string
		lines     []int // vertex counts of Ink-coloured data lines, legend thumbnails (2) included
		inkGlyphs int
	}{
		{"saturation", []int{n, 2}, n + 1},
		{"curvature", []int{n, 2}, n + 1},
		{"specific_area", []int{n, 2}, n + 1},
		{"area_saturation", []int{n, 2}, n + 1},
		{"capillary_pressure", []int{5, n - 6, 2}, n - 1 + 1},
		{"pc_saturation", []int{5, n - 6, 2}, n - 1 + 1},
		{"ganglia", []int{n, 2}, n + 1},
	} {
		svg, _ := render(t, byName(figs, c.fig))
		lines, filled := svgPaths(string(svg), Palette.Ink)
		if fmt.Sprint(lines) != fmt.Sprint(c.lines) || filled != c.inkGlyphs {
			t.Errorf("%s: ink lines with vertices %v (want %v), ink glyphs %d (want %d)", c.fig, lines, c.lines, filled, c.inkGlyphs)
		}
	}
	// Dropping one step must change what is drawn (the check can fail).
	svg, _ := render(t, byName(Build(rows[:n-1], nil, Run{}), "saturation"))
	if lines, _ := svgPaths(string(svg), Palette.Ink); lines[0] != n-1 {
		t.Fatalf("n−1 rows drew %v vertices", lines)
	}
}

func TestContactAngleFigure(t *testing.T) {
	rows := drainage(6, -1)
	rows[5].AngleHist = nil // latest step without samples: step 4 is the latest with data
	last, running, latest := AngleDistributions(rows)
	if latest != 4 {
		t.Fatalf("latest = %d", latest)
	}
	var sl, sr float64
	for k := range last {
		sl += last[k] * AngleBin
		sr += running[k] * AngleBin
	}
	if math.Abs(sl-1) > 1e-12 || math.Abs(sr-1) > 1e-12 {
		t.Fatalf("densities integrate to %v and %v", sl, sr)
	}
	// Bin 12 ([60°, 65°)) of step 4: direct sum of its 1° counts.
	var want, tot float64
	for d, c := range rows[4].AngleHist {
		tot += float64(c)
		if d >= 60 && d < 65 {
			want += float64(c)
		}
	}
	if got := last[12]; math.Abs(got-want/tot/AngleBin) > 1e-15 {
		t.Fatalf("bin [60,65): %v, want %v", got, want/tot/AngleBin)
	}
	svg, _ := render(t, byName(Build(rows, nil, Run{}), "contact_angle"))
	_, bars := svgPaths(string(svg), Palette.Sky)
	// One filled polygon per 5° bin plus the legend swatch.
	if bars != 180/AngleBin+1 {
		t.Fatalf("%d sky-filled paths, want %d", bars, 180/AngleBin+1)
	}
	lines, _ := svgPaths(string(svg), Palette.Umber)
	if len(lines) == 0 || lines[0] != 180/AngleBin {
		t.Fatalf("running line vertices %v, want %d", lines, 180/AngleBin)
	}
}

func TestEmptySeriesStillDraws(t *testing.T) {
	for _, f := range Build(nil, nil, Run{}) {
		svg, pngb := render(t, f)
		wellFormed(t, f.Name, svg)
		if _, err := png.Decode(bytes.NewReader(pngb)); err != nil {
			t.Fatalf("%s: %v", f.Name, err)
		}
		if !bytes.Contains(svg, []byte("(no data)")) {
			t.Errorf("%s: empty figure not marked", f.Name)
		}
	}
}

func TestEventMarkers(t *testing.T) {
	rows := drainage(12, -1)
	evs := []events.Event{{Kind: events.Breakthrough, Step: rows[6].Step, Time: rows[6].Time}}
	svg, _ := render(t, byName(Build(rows, evs, Run{}), "saturation"))
	without, _ := render(t, byName(Build(rows, nil, Run{}), "saturation"))
	black := func(b []byte) int {
		n := 0
		for _, m := range pathRe.FindAllStringSubmatch(string(b), -1) {
			if strings.Contains(m[2], "stroke:#000000") && strings.Contains(m[2], "stroke-dasharray") {
				n++
			}
		}
		return n
	}
	// Marker line plus its legend thumbnail.
	if got := black(svg) - black(without); got != 2 {
		t.Fatalf("breakthrough added %d dashed black paths, want 2", got)
	}
	if !bytes.Contains(svg, []byte("breakthrough")) {
		t.Fatal("no legend entry")
	}
}

func BenchmarkBuildAndRender(b *testing.B) {
	rows := drainage(200, -1)
	b.ReportAllocs()
	for i := 0; i < b.N; i++ {
		for _, f := range Build(rows, nil, Run{}) {
			if err := f.WriteSVG(io.Discard); err != nil {
				b.Fatal(err)
			}
		}
	}
	b.ReportMetric(float64(len(Names)*b.N)/b.Elapsed().Seconds(), "figures/s")
}

// TestErrorBars: every mean with a standard error gets a bar of ±SE in its
// series' colour (one stroke and two caps), a mean without one gets none,
// and the contact-angle figure shows the latest step's mean ± SE.
func TestErrorBars(t *testing.T) {
	const n = 5
	rows := drainage(n, -1)
	for i := 0; i < n-1; i++ { // the last step has no SE
		rows[i].PcSE = fp(0.05 * *rows[i].Pc)
		rows[i].PcConnected, rows[i].PcConnectedSE = fp(0.9**rows[i].Pc), fp(10)
	}
	rows[n-1].AngleMean, rows[n-1].AngleMeanSE = fp(63.2), fp(2.5)
	count2 := func(svg []byte, c color.NRGBA) int {
		lines, _ := svgPaths(string(svg), c)
		k := 0
		for _, v := range lines {
			if v == 2 {
				k++
			}
		}
		return k
	}
	figs := Build(rows, nil, Run{})
	svg, _ := render(t, byName(figs, "capillary_pressure"))
	// Ink: n−1 bars × 3 strokes + the legend thumbnail. Sky (third
	// style, connected): the same.
	if got, want := count2(svg, Palette.Ink), 3*(n-1)+1; got != want {
		t.Errorf("Pc mean: %d two-vertex ink strokes, want %d", got, want)
	}
	if got, want := count2(svg, styles[2].colour), 3*(n-1)+1; got != want {
		t.Errorf("Pc connected: %d two-vertex strokes, want %d", got, want)
	}
	if !strings.Contains(string(svg), "Pc connected ganglia ± SE") {
		t.Error("legend lacks the connected Pc")
	}
	svg, _ = render(t, byName(figs, "pc_saturation"))
	if got, want := count2(svg, Palette.Ink), 3*(n-1)+1; got != want {
		t.Errorf("Pc–S_w: %d two-vertex ink strokes, want %d", got, want)
	}
	// The bars are ±SE long: the points errorPoints keeps.
	x := []float64{0, 1, 2}
	ep := errorPoints(x, []float64{1, math.NaN(), 3}, []float64{0.5, 0.1, math.NaN()})
	if ep.Len() != 1 || ep.xy[0].Y != 1 {
		t.Fatalf("errorPoints kept %+v", ep)
	}
	if lo, hi := ep.YError(0); lo != 0.5 || hi != 0.5 {
		t.Fatalf("bar ±%v/%v, want ±0.5", lo, hi)
	}
	svg, _ = render(t, byName(figs, "contact_angle"))
	if !strings.Contains(string(svg), "mean 63.2 ± 2.5° SE (latest step)") {
		t.Error("contact-angle figure lacks the mean ± SE")
	}
	if got := count2(svg, Palette.Ink); got < 3 {
		t.Errorf("contact-angle figure: %d two-vertex ink strokes, want the bar and its caps", got)
	}
}

// TestRegistrationFigure: the registration figure is drawn only for a
// series whose rows carry a shift (reference-scan mode), after the
// others; it then holds one point per step for each axis, in µm, and its
// axis names the unit.
func TestRegistrationFigure(t *testing.T) {
	const n = 9
	rows := drainage(n, -1)
	for _, f := range Build(rows, nil, Run{}) {
		if f.Name == Registration {
			t.Fatal("registration figure drawn for a series without registration")
		}
	}
	for i := range rows {
		d := 2.5 * float64(i) / (n - 1)
		rows[i].RegZ, rows[i].RegY, rows[i].RegX = fp(0.6*d), fp(0.48*d), fp(0.64*d)
		rows[i].RegZM, rows[i].RegYM, rows[i].RegXM = fp(0.6*d*4e-6), fp(0.48*d*4e-6), fp(0.64*d*4e-6)
	}
	figs := Build(rows, nil, Run{})
	if figs[len(figs)-1].Name != Registration {
		t.Fatalf("last figure %s, want %s", figs[len(figs)-1].Name, Registration)
	}
	f := byName(figs, Registration)
	svg, _ := render(t, f)
	for _, c := range []struct {
		colour color.NRGBA
		name   string
	}{{Palette.Ink, "z"}, {Palette.Amber, "y"}, {Palette.Sky, "x"}} {
		lines, _ := svgPaths(string(svg), c.colour)
		if len(lines) == 0 || lines[0] != n {
			t.Errorf("%s: lines with vertices %v, want a first line through %d steps", c.name, lines, n)
		}
	}
	if !strings.Contains(string(svg), "shift (µm)") {
		t.Error("no axis label shift (µm)")
	}
	// The z shift reaches 0.6 × 2.5 × 4 µm = 6 µm: the axis covers it.
	if p := f.panels[0]; !(p.Y.Max >= 6) {
		t.Errorf("y axis up to %g µm, want at least 6", p.Y.Max)
	}
}
