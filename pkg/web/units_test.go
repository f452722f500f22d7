package web

import (
	"fmt"
	"os"
	"os/exec"
	"regexp"
	"strings"
	"testing"

	"sluice/pkg/plots"
	"sluice/pkg/series"
)

// TestPageUnitsMatchFigures: the live page writes each axis unit as the
// report's figures do (pkg/plots), so the specific interfacial area reads
// "mm²/mm³ of bulk volume" in both places (issue 13: units written the same
// way on the page and in PNG/SVG; the area is per bulk volume), and no
// label of the page still says the bare "1/mm" it used for a_wn.
func TestPageUnitsMatchFigures(t *testing.T) {
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	js := string(b)
	m := regexp.MustCompile(`(?m)^const U = \{(.*)\};$`).FindStringSubmatch(js)
	if m == nil {
		t.Fatal("app.js has no line `const U = { … };` with the axis units")
	}
	units := map[string]string{}
	for _, kv := range regexp.MustCompile(`(\w+): "([^"]*)"`).FindAllStringSubmatch(m[1], -1) {
		units[kv[1]] = kv[2]
	}
	for key, want := range map[string]string{"none": plots.UnitDimensionless, "pressure": plots.UnitPressure,
		"area": plots.UnitSpecificArea, "angleDensity": plots.UnitAngleDensity,
		"meanCurvDensity": plots.UnitMeanCurvDensity, "eulerDensity": plots.UnitEulerDensity, "shift": plots.UnitShift} {
		if units[key] != want {
			t.Errorf("page unit %s = %q, figures write %q", key, units[key], want)
		}
	}
	if !strings.Contains(js, "`a_wn (${U.area})`") {
		t.Error("the a_wn axes do not use the page's area unit")
	}
	if strings.Contains(js, "(1/mm)") {
		t.Error(`app.js still labels an axis "(1/mm)"`)
	}
	html, _ := static.ReadFile("static/index.html")
	if !strings.Contains(string(html), "Specific interfacial area per bulk volume") {
		t.Error("index.html: the a_wn figure does not say per bulk volume")
	}
}

// TestPageTimeUnitMatchesFigures runs the page's timeUnit (app.js) in Node
// on campaigns of several lengths and compares it with pkg/plots.TimeUnit,
// which the PNG/SVG figures use, so the page and the figures put the same
// unit on their time axes. Lengths at both sides of each switch (10 min,
// 3 h). Spoiled once (600 → 900 s in app.js): the 600 s and 899 s cases
// failed.
func TestPageTimeUnitMatchesFigures(t *testing.T) {
	node, err := exec.LookPath("node")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("node is not installed (scripts/setup-test-env installs it)")
		}
		t.Skip("node is not installed")
	}
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	fn := regexp.MustCompile(`(?s)\nfunction timeUnit\(\) \{.*?\n\}\n`).FindString(string(b))
	if fn == "" {
		t.Fatal("app.js has no function timeUnit()")
	}
	spans := []float64{0, 300, 599, 600, 899, 10799, 10800, 36000}
	lit := make([]string, len(spans))
	for i, v := range spans {
		lit[i] = fmt.Sprint(v)
	}
	script := "function num(v) { return (v === null || v === undefined || Number.isNaN(v)) ? null : v; }\nlet state;\n" + fn +
		"for (const s of [" + strings.Join(lit, ",") + "]) { state = { series: [{ time_s: 30 }, { time_s: 30 + s }] }; console.log(timeUnit().name); }\n"
	out, err := exec.Command(node, "-e", script).CombinedOutput()
	if err != nil {
		t.Fatalf("node: %v\n%s", err, out)
	}
	got := strings.Fields(string(out))
	if len(got) != len(spans) {
		t.Fatalf("node printed %q for %d spans", out, len(spans))
	}
	for i, s := range spans {
		want, _ := plots.TimeUnit([]series.Row{{Time: 30}, {Time: 30 + s}})
		if got[i] != want {
			t.Errorf("campaign of %g s: page uses %q, figures %q", s, got[i], want)
		}
	}
}

// TestPageProfilePoints runs the page's profilePts (app.js) in Node: the
// latest step with a saturation_profile gives [distance (mm), S_n] points
// from the bin centres (Source: the rows below, m → mm by hand), null S_n
// kept as a gap; steps without a profile are skipped.
func TestPageProfilePoints(t *testing.T) {
	node, err := exec.LookPath("node")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("node is not installed (scripts/setup-test-env installs it)")
		}
		t.Skip("node is not installed")
	}
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	fn := regexp.MustCompile(`(?s)\nfunction profilePts\(series\) \{.*?\n\}\n`).FindString(string(b))
	if fn == "" {
		t.Fatal("app.js has no function profilePts(series)")
	}
	script := "function num(v) { return (v === null || v === undefined || Number.isNaN(v)) ? null : v; }\n" + fn +
		`const s = [{ step: "a", saturation_profile: { axis: "x", position_m: [0.0005, 0.0015], saturation_nonwetting: [1, 0.25] } },
		  { step: "b", saturation_profile: { axis: "x", position_m: [0.0005, 0.0015, 0.0025], saturation_nonwetting: [0.5, null, 0] } },
		  { step: "c" }];
		console.log(JSON.stringify(profilePts(s)), JSON.stringify(profilePts([{ step: "d" }])));`
	out, err := exec.Command(node, "-e", script).CombinedOutput()
	if err != nil {
		t.Fatalf("node: %v\n%s", err, out)
	}
	want := `{"step":"b","axis":"x","pts":[[0.5,0.5],[1.5,null],[2.5,0]]} {"step":"","axis":"z","pts":[]}`
	if got := strings.TrimSpace(string(out)); got != want {
		t.Errorf("profilePts: %s\nwant %s", got, want)
	}
}

// TestPageFillingPoints runs the page's fillingPts (app.js) in Node: the
// rates of every step as stored (null for the first step), and the latest
// step's volume distribution at x = log10(bin low edge in µm³) (Source: by
// hand, 1e-18 m³ = 1 µm³ → 0, 1e-17 m³ → 1), the shorter histogram padded
// with zeros.
func TestPageFillingPoints(t *testing.T) {
	node, err := exec.LookPath("node")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("node is not installed (scripts/setup-test-env installs it)")
		}
		t.Skip("node is not installed")
	}
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	fn := regexp.MustCompile(`(?s)\nfunction fillingPts\(series\) \{.*?\n\}\n`).FindString(string(b))
	if fn == "" {
		t.Fatal("app.js has no function fillingPts(series)")
	}
	script := "function num(v) { return (v === null || v === undefined || Number.isNaN(v)) ? null : v; }\n" + fn +
		`const s = [{ step: "a", time_s: 0, pore_filling: { previous_step: null, drainage: null, imbibition: null } },
		  { step: "b", time_s: 10, pore_filling: { drainage: { rate_per_s: 0.3, volume_histogram: [2, 1], volume_bin_low_m3: [1e-18, 1e-17] },
		    imbibition: { rate_per_s: 0, volume_histogram: [], volume_bin_low_m3: [] } } },
		  { step: "c", time_s: 20 }];
		console.log(JSON.stringify(fillingPts(s), (k, v) => typeof v === "number" ? Math.round(v * 1e9) / 1e9 : v));`
	out, err := exec.Command(node, "-e", script).CombinedOutput()
	if err != nil {
		t.Fatalf("node: %v\n%s", err, out)
	}
	want := `{"drainage":[[0,null],[10,0.3],[20,null]],"imbibition":[[0,null],[10,0],[20,null]],"step":"b","histD":[[0,2],[1,1]],"histI":[[0,0],[1,0]]}`
	if got := strings.TrimSpace(string(out)); got != want {
		t.Errorf("fillingPts: %s\nwant %s", got, want)
	}
}

// TestPageAnglePoints runs the page's anglePts (app.js) in Node: the three
// contact-angle curves of the wettability panel read the series keys
// contact_angle_mean_deg, contact_angle_median_deg,
// contact_angle_thermodynamic_deg and contact_angle_topological_deg against time in the panel's unit (Source:
// the rows below, s → min by hand), null where a step has none.
func TestPageAnglePoints(t *testing.T) {
	node, err := exec.LookPath("node")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("node is not installed (scripts/setup-test-env installs it)")
		}
		t.Skip("node is not installed")
	}
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	fn := regexp.MustCompile(`(?s)\nfunction anglePts\(series, tuS\) \{.*?\n\}\n`).FindString(string(b))
	if fn == "" {
		t.Fatal("app.js has no function anglePts(series, tuS)")
	}
	script := "function num(v) { return (v === null || v === undefined || Number.isNaN(v)) ? null : v; }\n" + fn +
		`const s = [{ step: "a", time_s: 60, contact_angle_mean_deg: 52.5, contact_angle_median_deg: 50, contact_angle_thermodynamic_deg: null, contact_angle_topological_deg: 66.5 },
		  { step: "b", time_s: 180, contact_angle_mean_deg: 61, contact_angle_median_deg: 58.5, contact_angle_thermodynamic_deg: 47.25 }];
		console.log(JSON.stringify(anglePts(s, 60)));`
	out, err := exec.Command(node, "-e", script).CombinedOutput()
	if err != nil {
		t.Fatalf("node: %v\n%s", err, out)
	}
	want := `{"mean":[[1,52.5],[3,61]],"median":[[1,50],[3,58.5]],"thermo":[[1,null],[3,47.25]],"topo":[[1,66.5],[3,null]]}`
	if got := strings.TrimSpace(string(out)); got != want {
		t.Errorf("anglePts: %s\nwant %s", got, want)
	}
}

// TestPageTrackingPoints runs the page's trackingPts (app.js) in Node: the
// trapped saturation and moved fraction as stored (Source: the rows
// below), null without tracking or when the object carries a note.
func TestPageTrackingPoints(t *testing.T) {
	node, err := exec.LookPath("node")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("node is not installed (scripts/setup-test-env installs it)")
		}
		t.Skip("node is not installed")
	}
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	fn := regexp.MustCompile(`(?s)\nfunction trackingPts\(series\) \{.*?\n\}\n`).FindString(string(b))
	if fn == "" {
		t.Fatal("app.js has no function trackingPts(series)")
	}
	script := "function num(v) { return (v === null || v === undefined || Number.isNaN(v)) ? null : v; }\n" + fn +
		`const s = [{ step: "a", time_s: 0 },
		  { step: "b", time_s: 10, ganglion_tracking: { trapped_saturation: 0.125, trapped_moved_fraction: 0.5 } },
		  { step: "c", time_s: 20, ganglion_tracking: { trapped_saturation: 0, trapped_moved_fraction: null, note: "previous step b failed" } }];
		console.log(JSON.stringify(trackingPts(s)));`
	out, err := exec.Command(node, "-e", script).CombinedOutput()
	if err != nil {
		t.Fatalf("node: %v\n%s", err, out)
	}
	want := `{"trapped":[[0,null],[10,0.125],[20,null]],"moved":[[0,null],[10,0.5],[20,null]]}`
	if got := strings.TrimSpace(string(out)); got != want {
		t.Errorf("trackingPts: %s\nwant %s", got, want)
	}
}

// TestPageRigSummary runs the page's rigSummary (app.js) in Node: pore
// volumes injected to 3 decimals, Ca in e-notation, the transducer in kPa
// (Source: the row below, Pa → kPa by hand), dashes without a rig log.
func TestPageRigSummary(t *testing.T) {
	node, err := exec.LookPath("node")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("node is not installed (scripts/setup-test-env installs it)")
		}
		t.Skip("node is not installed")
	}
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	fn := regexp.MustCompile(`(?s)\nfunction rigSummary\(r\) \{.*?\n\}\n`).FindString(string(b))
	if fn == "" {
		t.Fatal("app.js has no function rigSummary(r)")
	}
	script := "function num(v) { return (v === null || v === undefined || Number.isNaN(v)) ? null : v; }\n" +
		"function fmt(v, d) { return v === null || v === undefined ? \"—\" : Number(v).toFixed(d); }\n" + fn +
		`console.log(JSON.stringify(rigSummary({ pore_volumes_injected: 0.5, capillary_number: 6.88385e-8, rig_differential_pressure_pa: 3000 })),
		  JSON.stringify(rigSummary({ pore_volumes_injected: null })));`
	out, err := exec.Command(node, "-e", script).CombinedOutput()
	if err != nil {
		t.Fatalf("node: %v\n%s", err, out)
	}
	want := `[["PV injected","0.500"],["Ca","6.88e-8"],["Δp transducer","3.00 kPa"]] [["PV injected","—"],["Ca","—"],["Δp transducer","—"]]`
	if got := strings.TrimSpace(string(out)); got != want {
		t.Errorf("rigSummary: %s\nwant %s", got, want)
	}
}

// TestPageAccuracyRows runs the page's accuracyRows (app.js) in Node: the
// latest step's values (Pa → kPa, 1/m → 1/mm by hand) beside the stored
// bias ± spread (fractions → per cent for a_wn and Pc), dashes for what is
// missing.
func TestPageAccuracyRows(t *testing.T) {
	node, err := exec.LookPath("node")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("node is not installed (scripts/setup-test-env installs it)")
		}
		t.Skip("node is not installed")
	}
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	fn := regexp.MustCompile(`(?s)\nfunction accuracyRows\(a, r\) \{.*?\n\}\n`).FindString(string(b))
	if fn == "" {
		t.Fatal("app.js has no function accuracyRows(a, r)")
	}
	script := "function num(v) { return (v === null || v === undefined || Number.isNaN(v)) ? null : v; }\n" +
		"function fmt(v, d) { return v === null || v === undefined ? \"—\" : Number(v).toFixed(d); }\n" + fn +
		`const a = { labels_path: { saturation_wetting_abs: { bias: 0, spread: 0, n: 2 }, capillary_pressure_rel: { bias: -0.04, spread: null, n: 1 } },
		  grey_path: { saturation_wetting_abs: { bias: 0.0123, spread: 0.004, n: 2 }, specific_area_wn_rel: { bias: 0.1, spread: 0.02, n: 2 },
		    capillary_pressure_rel: { bias: 0.04, spread: 0.015, n: 2 }, contact_angle_deg: { bias: -5, spread: 1.5, n: 2 } } };
		console.log(JSON.stringify(accuracyRows(a, { saturation_wetting: 0.4, specific_area_wn_per_m: 3180, capillary_pressure_pa: 1935, contact_angle_mean_deg: null })));`
	out, err := exec.Command(node, "-e", script).CombinedOutput()
	if err != nil {
		t.Fatalf("node: %v\n%s", err, out)
	}
	want := `[["S_w","0.400","+0.0000 ± 0.0000","+0.0123 ± 0.0040"],["a_wn","3.18 1/mm","—","+10.0 ± 2.0 %"],["Pc","1.935 kPa","-4.0 %","+4.0 ± 1.5 %"],["θ mean","—","—","-5.0 ± 1.5°"]]`
	if got := strings.TrimSpace(string(out)); got != want {
		t.Errorf("accuracyRows: %s\nwant %s", got, want)
	}
}
