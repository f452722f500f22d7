package report

import (
	"bytes"
	"encoding/json"
	"encoding/xml"
	"fmt"
	"io"
	"math"
	"os"
	"regexp"
	"strings"
	"testing"
	"time"

	"sluice/pkg/events"
	"sluice/pkg/plots"
	"sluice/pkg/series"
)

func fp(v float64) *float64 { return &v }

func campaign(n int) []series.Row {
	rows := make([]series.Row, n)
	for i := range rows {
		f := float64(i) / float64(n-1)
		rows[i] = series.Row{Step: fmt.Sprintf("s%03d", i), Time: 45 * float64(i)}
		rows[i].SatWetting, rows[i].SatNonwetting = fp(1-0.6*f), fp(0.6*f)
		rows[i].Porosity = fp(0.22)
		// κ from 1/(6 vox) to 1/(20 vox) radius at h = 2.5 µm: R/h = 2/(κh).
		r := 6 + 14*f
		k := 2 / (r * 2.5e-6)
		rows[i].CurvMean, rows[i].CurvMedian = fp(k), fp(k)
		rows[i].Pc = fp(0.0728 * k)
		rows[i].SpecificWN = fp(3000 * f)
		rows[i].AngleMean = fp(55 + f)
		g := int64(i + 1)
		rows[i].GangliaCount = &g
		perc := i >= 3
		rows[i].Percolates = &perc
		h := make([]int64, 180)
		h[50+i], h[60] = 10, 5
		rows[i].AngleHist = h
	}
	return rows
}

func render(t *testing.T, in Input) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := Write(&buf, in); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

// elements parses the page as HTML with encoding/xml's HTML mode and
// returns the start elements in document order.
func elements(t *testing.T, b []byte) []xml.StartElement {
	t.Helper()
	d := xml.NewDecoder(bytes.NewReader(b))
	d.Strict = false
	d.AutoClose = xml.HTMLAutoClose
	d.Entity = xml.HTMLEntity
	var out []xml.StartElement
	depth := 0
	for {
		tok, err := d.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("report does not parse: %v", err)
		}
		switch e := tok.(type) {
		case xml.StartElement:
			out = append(out, e.Copy())
			depth++
		case xml.EndElement:
			depth--
		}
	}
	if depth != 0 {
		t.Fatalf("unbalanced elements: depth %d at end", depth)
	}
	return out
}

func attr(e xml.StartElement, name string) (string, bool) {
	for _, a := range e.Attr {
		if a.Name.Local == name {
			return a.Value, true
		}
	}
	return "", false
}

func TestReportIsCompleteAndSelfContained(t *testing.T) {
	const n = 9
	rows := campaign(n)
	evs, err := events.Detect(rows, events.Defaults())
	if err != nil {
		t.Fatal(err)
	}
	in := Input{
		Params: Params{Campaign: "bentheimer-co2", Scenario: "CO2 drainage <synthetic>", VoxelSize: 2.5e-6,
			IFT: fp(0.0728), SmoothingSigma: 1.5, Thresholds: []float64{812, 2250},
			ParameterHash: "9f1c2e", SoftwareVersion: "sluice 0.1.0-test", FlowAxis: "z", Connectivity: 26},
		Rows: rows, Events: evs,
		Checks: []Check{{Name: "ball area within 2 %", Status: Passed, Detail: "−0.8 %"},
			{Name: "tile invariance", Status: Failed, Detail: "off by 1 voxel"}, {Name: "needs σ", Status: NotEvaluated, Detail: "no σ given"}},
		Generated: time.Date(2025, 3, 1, 12, 0, 0, 0, time.UTC),
	}
	page := render(t, in)
	els := elements(t, page)
	text := string(page)

	steps := map[string]bool{}
	figs := map[string]int{}
	var curFig string
	for _, e := range els {
		if s, ok := attr(e, "data-step"); ok && e.Name.Local == "tr" {
			steps[s] = true
		}
		if e.Name.Local == "figure" {
			curFig, _ = attr(e, "id")
		}
		if e.Name.Local == "svg" && curFig != "" {
			figs[curFig]++
			curFig = ""
		}
		for _, a := range e.Attr {
			if a.Name.Space == "xmlns" || a.Name.Local == "xmlns" {
				continue // namespace names, never fetched
			}
			v := strings.ToLower(a.Value)
			if strings.Contains(v, "http://") || strings.Contains(v, "https://") || strings.HasPrefix(v, "//") {
				t.Errorf("external reference in <%s %s=%q>", e.Name.Local, a.Name.Local, a.Value)
			}
		}
		switch e.Name.Local {
		case "script", "link", "img", "iframe", "object", "embed":
			t.Errorf("element <%s> in a self-contained report", e.Name.Local)
		}
	}
	for _, r := range rows {
		if !steps[r.Step] {
			t.Errorf("no table row for step %s", r.Step)
		}
	}
	if len(steps) != n {
		t.Errorf("%d step rows, want %d", len(steps), n)
	}
	for _, name := range plots.Names {
		if figs["fig-"+name] != 1 {
			t.Errorf("figure %s embedded %d times", name, figs["fig-"+name])
		}
	}
	// The saturation figure holds a line through all n steps (Ink colour).
	start := strings.Index(text, `id="fig-saturation"`)
	end := start + strings.Index(text[start:], "</figure>")
	if c := strings.Count(text[start:end], "stroke:#1C4A8C"); c < 2 {
		t.Errorf("saturation figure has %d ink strokes", c)
	}
	for _, c := range Cautions {
		if !strings.Contains(text, template_escape(c)) {
			t.Errorf("caution missing: %q", c)
		}
	}
	for _, want := range []string{"pressurised cells", "ionising radiation", "few voxels", "2.5 µm", "72.8 mN/m",
		"9f1c2e", "sluice 0.1.0-test", "812, 2250", "3 checks: 1 passed, 1 failed, 1 not evaluated", "FAILED", "breakthrough/s003",
		"CO2 drainage &lt;synthetic&gt;"} {
		if !strings.Contains(text, want) {
			t.Errorf("report lacks %q", want)
		}
	}
	// Steps with radius of curvature below 10 voxels are flagged: R/h runs
	// 6 + 14·i/8, so i = 0, 1, 2 (6, 7.75, 9.5 voxels) and no others.
	if c := strings.Count(text, `class="unresolved"`); c != 3 {
		t.Errorf("%d unresolved rows, want 3", c)
	}
	if os.Getenv("SLUICE_REPORT_OUT") != "" {
		os.WriteFile(os.Getenv("SLUICE_REPORT_OUT"), page, 0o644)
	}
}

func template_escape(s string) string {
	r := strings.NewReplacer("'", "&#39;", "&", "&amp;", "<", "&lt;", ">", "&gt;", `"`, "&#34;")
	return r.Replace(s)
}

func TestRadiusColumn(t *testing.T) {
	// κ = 2/R with R = 12 voxels of 2 µm: R/h = 12.0.
	r := series.Row{Step: "a", CurvMean: fp(2 / (12 * 2e-6))}
	tr := tabulate(&r, 2e-6)
	if tr.RVox != "12.0" || tr.Unresolved {
		t.Fatalf("R/h %q unresolved %v", tr.RVox, tr.Unresolved)
	}
	r.CurvMean = fp(-2 / (4 * 2e-6)) // negative curvature: the radius is still 4
	if tr := tabulate(&r, 2e-6); tr.RVox != "4.0" || !tr.Unresolved {
		t.Fatalf("R/h %q unresolved %v", tr.RVox, tr.Unresolved)
	}
	if tr := tabulate(&series.Row{Step: "b"}, 2e-6); tr.RVox != "—" || tr.Pc != "—" {
		t.Fatalf("null row %+v", tr)
	}
	_ = math.Pi
}

func TestEmptyAndInvalid(t *testing.T) {
	page := render(t, Input{})
	elements(t, page)
	if !bytes.Contains(page, []byte("0 steps")) || !bytes.Contains(page, []byte("not detected")) {
		t.Fatal("empty report lacks its empty-state text")
	}
	if err := Write(io.Discard, Input{Params: Params{Campaign: "../x"}}); err == nil {
		t.Fatal("invalid campaign accepted")
	}
}

// TestReportListsRejectedScans: scans given up at ingest appear in the
// report with their reasons (issue 13 item 8), and a campaign without any
// says none were.
func TestReportListsRejectedScans(t *testing.T) {
	rej := []Rejected{
		{Step: "scan-0002", File: "in/scan-0002.raw", Reason: "truncated raw volume: got 2000 of 4096 bytes", Attempts: 5, At: "2026-12-04T18:00:00Z"},
		{Step: "scan-0003", File: "in/scan-0003.raw", Reason: "shape 20×20×20 differs from the campaign's reference 32×32×32", Attempts: 5, At: "2026-12-04T18:00:01Z"},
		{Step: "scan-0004", File: "in/scan-0004.raw", Reason: "raw volume without scan-0004.raw.sluice.json & <no> shape", Attempts: 5, At: "2026-12-04T18:00:02Z"},
	}
	b := string(render(t, Input{Params: Params{Campaign: "c"}, Rows: campaign(5), Rejected: rej}))
	if !strings.Contains(b, "3 scans were given up at ingest") {
		t.Errorf("report does not count the 3 rejected scans")
	}
	for _, r := range rej {
		if !strings.Contains(b, `data-rejected="`+r.Step+`"`) {
			t.Errorf("report has no row for %s", r.Step)
		}
	}
	for _, want := range []string{"truncated raw volume: got 2000 of 4096 bytes", "shape 20×20×20 differs", "without scan-0004.raw.sluice.json &amp; &lt;no&gt; shape"} {
		if !strings.Contains(b, want) {
			t.Errorf("report lacks the reason %q (escaped)", want)
		}
	}
	none := string(render(t, Input{Params: Params{Campaign: "c"}, Rows: campaign(5)}))
	if strings.Contains(none, "data-rejected=") || !strings.Contains(none, "None: every scan that arrived was ingested.") {
		t.Errorf("a report without rejected scans should say none were")
	}
}

// TestSettingsPerStep: every step shows its own thresholds, phases and
// sample cylinder, and only thresholds beyond ThresholdDrift of the scale
// are flagged. Arithmetic by hand: s000 has no plan and s008 holds the
// wetting fluid only (one threshold, alone in its group: not compared), so
// s001…s007 are compared. Their T2 are 2249 ×4, 2250, 2350, 2600 (median
// 2249) and their gaps T2 − T1 are 1447, 1448 ×3, 1449, 1550, 1799 (median
// 1448), so the limit is 10 % · 1448 = 144.8 grey values. Step s004's
// T2 = 2600 is 351 off (24 %, flagged); s006's T2 = 2350 is 101 off (7 %,
// not flagged).
func TestSettingsPerStep(t *testing.T) {
	rows := campaign(9)
	var steps []StepSettings
	for i, r := range rows {
		s := StepSettings{Step: r.Step, Method: "otsu", Fluids: "both", Filter: "median",
			Thresholds: []float64{800 + float64(i%3), 2250 - float64(i%2)}, Sample: [3]float64{31.5 + float64(i)/10, 32, 28}, HasSample: true}
		switch r.Step {
		case "s004":
			s.Thresholds[1] = 2600
		case "s006":
			s.Thresholds[1] = 2350
		case "s008":
			s.Fluids, s.Thresholds = "wetting", []float64{1500}
			rows[i].Extra = map[string]json.RawMessage{"phases_detected": json.RawMessage("2"),
				"phases_note": json.RawMessage(`"one fluid: wetting"`), "voxel_size_assumed": json.RawMessage("true")}
		}
		if i == 0 {
			continue // s000 has no plan: dashes
		}
		steps = append(steps, s)
	}
	for i := range rows {
		rows[i].VoxelSize = fp(2.5e-6)
	}
	rows[7].VoxelSize = fp(5e-6) // s007 imaged at another resolution: flagged
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows, Steps: steps}))
	got := map[string]string{}
	for _, m := range regexp.MustCompile(`(?s)<tr data-settings="([^"]+)"( class="drift")?>(.*?)</tr>`).FindAllStringSubmatch(page, -1) {
		got[m[1]] = m[2] + m[3]
	}
	if len(got) != len(rows) {
		t.Fatalf("%d settings rows, want %d", len(got), len(rows))
	}
	for _, c := range []struct{ step, want string }{
		{"s000", `<td class="thr">—</td>`},
		{"s001", `<td class="thr">801, 2249</td>`},
		{"s001", `<td>31.6</td><td>32.0</td><td>28.0</td>`},
		{"s001", `3 (rock, both fluids)`},
		{"s003", `<td>135.0</td>`},
		{"s004", `<td class="thr">801, 2600</td>`},
		{"s004", `threshold drift: threshold 2 is 2600, the median of 7 steps is 2249: off by 24 % of the scale`},
		{"s008", `2 (rock, wetting only)`},
		{"s008", `title="one fluid: wetting"`},
		{"s008", `2.5 (assumed: the scan gave none)`},
		{"s008", `<td class="thr">1500</td>`},
		{"s007", `<td class="differs">5</td>`},
		{"s007", `voxel size differs from the campaign's 2.5 µm (2.5e-06 m)`},
	} {
		if !strings.Contains(got[c.step], c.want) {
			t.Errorf("step %s: row lacks %q:\n%s", c.step, c.want, got[c.step])
		}
	}
	for step, row := range got {
		if flagged := strings.HasPrefix(row, ` class="drift"`); flagged != (step == "s004") {
			t.Errorf("step %s flagged %v", step, flagged)
		}
		if differs := strings.Contains(row, `class="differs"`); differs != (step == "s007") {
			t.Errorf("step %s voxel size flagged %v", step, differs)
		}
	}
	for _, want := range []string{"by more than 10 % of the scale: the median grey-value gap between the two thresholds of three-class steps (1448)",
		"Medians need at least 3 such steps (7 of 9 steps compared)", "2 steps flagged"} {
		if !strings.Contains(page, want) {
			t.Errorf("report lacks %q", want)
		}
	}
}

// TestUncertaintyCells: means carry "± SE" when the row has one, and the
// connected, trapped and trapped-ganglia cells come from the row.
func TestUncertaintyCells(t *testing.T) {
	r := series.Row{Step: "a", Pc: fp(1234.5), PcSE: fp(12.25), PcConnected: fp(1000), PcConnectedSE: fp(20),
		PcTrapped: fp(1500), AngleMean: fp(63.24), AngleMeanSE: fp(2.51),
		Extra: map[string]json.RawMessage{"trapped_ganglia_curvature": json.RawMessage(`{"count": 4, "pc_median_pa": 1600}`)}}
	tr := tabulate(&r, 2e-6)
	for name, c := range map[string][2]string{
		"Pc": {tr.Pc, "1.234 ± 0.012"}, "connected": {tr.PcConnected, "1.000 ± 0.020"},
		"trapped": {tr.PcTrapped, "1.500"}, "ganglia": {tr.Trapped, "1.600 (4)"}, "θ": {tr.AMean, "63.2 ± 2.5"},
	} {
		if c[0] != c[1] {
			t.Errorf("%s cell %q, want %q", name, c[0], c[1])
		}
	}
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2e-6}, Rows: []series.Row{r}}))
	if !strings.Contains(page, "<td>1.234 ± 0.012</td><td>1.000 ± 0.020</td><td>1.500</td><td>1.600 (4)</td>") {
		t.Error("series table lacks the Pc cells with standard errors")
	}
}

// TestCampaignThresholdsShown: in threshold scope campaign the report shows
// the campaign thresholds (source, values, phase levels), the histogram
// they came from as a figure with a line per threshold, each step's grey
// drift as a fraction of the contrast, and flags a step whose drift went
// beyond the bound.
func TestCampaignThresholdsShown(t *testing.T) {
	rows := campaign(4)
	rows[2].DriftNFraction, rows[2].DriftWFraction, rows[2].DriftSFraction = fp(-0.021), fp(-0.034), fp(-0.06)
	beyond, within := true, false
	rows[2].DriftBeyond = &within
	rows[3].DriftSFraction, rows[3].DriftBeyond = fp(-0.56), &beyond
	counts := make([]int64, 64)
	for i := range counts {
		counts[i] = int64(1000 * (math.Exp(-sq(float64(i-14)/3)) + math.Exp(-sq(float64(i-24)/3)) + math.Exp(-sq(float64(i-40)/3))))
	}
	ct := &CampaignThresholds{Source: "first-step", Step: "s001", Order: "nws", T: []float64{19124.7, 32062.5},
		Levels: []*float64{fp(14069.8), fp(24179.6), nil}, Lo: 0, Width: 1024, Counts: counts}
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows, FixedThresholds: ct,
		Steps: []StepSettings{{Step: "s003", Method: "campaign", Thresholds: []float64{18000, 29000}}}}))
	sec := regexp.MustCompile(`(?s)<section id="campaign-thresholds">(.*?)</section>`).FindStringSubmatch(page)
	if sec == nil {
		t.Fatal("no campaign-thresholds section")
	}
	for _, want := range []string{"19124.7, 32062.5", "first-step", "step s001", "nonwetting 14070", "wetting 24180", "solid not measured",
		`<figure id="fig-campaign-histogram">`, "<polyline", ">T1 19125<", ">T2 32062<"} {
		if !strings.Contains(sec[1], want) {
			t.Errorf("campaign section lacks %q", want)
		}
	}
	if !strings.Contains(page, `campaign thresholds 19124.7, 32062.5 (first-step)`) {
		t.Errorf("parameters do not name the campaign thresholds")
	}
	got := map[string]string{}
	for _, m := range regexp.MustCompile(`(?s)<tr data-settings="([^"]+)"( class="drift")?>(.*?)</tr>`).FindAllStringSubmatch(page, -1) {
		got[m[1]] = m[2] + m[3]
	}
	if !strings.Contains(got["s002"], "n -2.1 %, w -3.4 %, s -6.0 %") || strings.HasPrefix(got["s002"], ` class="drift"`) {
		t.Errorf("s002 (drift within the bound): %s", got["s002"])
	}
	if !strings.HasPrefix(got["s003"], ` class="drift"`) || !strings.Contains(got["s003"], "s -56.0 %") || !strings.Contains(got["s003"], "threshold shift capped") {
		t.Errorf("s003 (drift beyond the bound) not flagged: %s", got["s003"])
	}
	// Scope step: the section says so and draws nothing.
	page = string(render(t, Input{Params: Params{Campaign: "c"}, Rows: rows}))
	if strings.Contains(page, "fig-campaign-histogram") || !strings.Contains(page, "Thresholds per step") {
		t.Errorf("scope step: campaign section wrong")
	}
}

func sq(x float64) float64 { return x * x }
