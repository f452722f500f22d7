package series

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"io/fs"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// resultJSON has the shape of `sluice measure --json` (pkg/measure.Result),
// including keys this package does not decode.
const resultJSON = `{"voxels":1000,"voxel_size_m":2.5e-06,"shape_zyx":[10,10,10],
"voxels_solid":400,"voxels_wetting":450,"voxels_nonwetting":150,"voxels_outside":0,
"bulk_volume_m3":1.5625e-14,"porosity":0.6,"saturation_wetting":0.75,"saturation_nonwetting":0.25,
"area_wn_m2":1.2e-09,"area_ws_m2":3e-09,"area_ns_m2":5e-10,
"specific_area_wn_per_m":76800,"specific_area_ws_per_m":192000,"specific_area_ns_per_m":32000,
"curvature_wn_mean_per_m":40000,"curvature_wn_median_per_m":39000,"curvature_wn_area_m2":1e-09,
"ift_n_per_m":null,"capillary_pressure_pa":null,"capillary_pressure_median_pa":null,
"contact_angle_mean_deg":62.5,"contact_angle_median_deg":61,"contact_angle_std_deg":18.25,
"contact_angle_samples":3,"contact_angle_histogram":[0,0,1,2],
"euler_nonwetting":3,"euler_wetting":-2,"euler_solid":1,
"ganglia_count":3,"ganglion_largest_fraction":0.5,"nonwetting_percolates":false,
"nonwetting_trapped_fraction":0.5,"connectivity":26,"flow_axis":"z",
"minkowski":{"solid":{"volume_m3":1e-15,"surface_m2":2e-9,"mean_curvature_integral_m":3e-5,"euler_6":1,"euler_26":1}},
"clusters":{"count":3,"volumes":[10,20,30]}}`

func mustRow(t *testing.T, step string, time float64) Row {
	t.Helper()
	r, err := FromResult(step, time, []byte(resultJSON))
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func TestFromResultDecodesKeysAndKeepsExtras(t *testing.T) {
	r := mustRow(t, "s001", 45)
	if r.Step != "s001" || r.Time != 45 {
		t.Fatalf("step/time %q %v", r.Step, r.Time)
	}
	if F(r.SatWetting) != 0.75 || F(r.Porosity) != 0.6 || F(r.CurvMean) != 40000 {
		t.Fatalf("decoded %v %v %v", F(r.SatWetting), F(r.Porosity), F(r.CurvMean))
	}
	if r.Pc != nil || r.IFT != nil {
		t.Fatal("null Pc/IFT decoded as a value")
	}
	if *r.GangliaCount != 3 || *r.Percolates || *r.FlowAxis != "z" || len(r.AngleHist) != 4 {
		t.Fatalf("ganglia %v percolates %v axis %v hist %v", *r.GangliaCount, *r.Percolates, *r.FlowAxis, r.AngleHist)
	}
	for _, k := range []string{"voxels", "shape_zyx", "minkowski", "clusters", "bulk_volume_m3"} {
		if _, ok := r.Extra[k]; !ok {
			t.Errorf("extra key %q lost", k)
		}
	}
	if _, ok := r.Extra["porosity"]; ok {
		t.Error("known key kept in Extra")
	}
	// Every key of the input survives a round trip with its value.
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	var in, out map[string]any
	json.Unmarshal([]byte(resultJSON), &in)
	json.Unmarshal(b, &out)
	for k, v := range in {
		ov, ok := out[k]
		if !ok {
			t.Errorf("key %q lost in round trip", k)
			continue
		}
		vb, _ := json.Marshal(v)
		ob, _ := json.Marshal(ov)
		if !bytes.Equal(vb, ob) {
			t.Errorf("key %q: %s became %s", k, vb, ob)
		}
	}
	if out["step"] != "s001" || out["time_s"] != 45.0 {
		t.Errorf("step/time in output: %v %v", out["step"], out["time_s"])
	}
}

func TestUpsertIdempotentReplacesAndSorts(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	s := Dir(dir)
	if rows, err := Load(ctx, s, "c1"); err != nil || rows != nil {
		t.Fatalf("missing series: rows %v err %v", rows, err)
	}
	// Steps arrive out of order.
	for _, st := range []struct {
		name string
		t    float64
	}{{"s003", 90}, {"s001", 0}, {"s002", 45}} {
		if _, err := Upsert(ctx, s, "c1", mustRow(t, st.name, st.t)); err != nil {
			t.Fatal(err)
		}
	}
	jk, ck, _ := Keys("c1")
	first, _ := s.Get(ctx, jk)
	firstCSV, _ := s.Get(ctx, ck)
	// The same row again: files unchanged byte for byte.
	if _, err := Upsert(ctx, s, "c1", mustRow(t, "s002", 45)); err != nil {
		t.Fatal(err)
	}
	again, _ := s.Get(ctx, jk)
	againCSV, _ := s.Get(ctx, ck)
	if !bytes.Equal(first, again) || !bytes.Equal(firstCSV, againCSV) {
		t.Fatal("re-upserting an identical row changed the files")
	}
	// A changed row replaces the old one.
	r := mustRow(t, "s002", 45)
	sw := 0.5
	r.SatWetting = &sw
	rows, err := Upsert(ctx, s, "c1", r)
	if err != nil {
		t.Fatal(err)
	}
	rows, err = Load(ctx, s, "c1")
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, r := range rows {
		names = append(names, r.Step)
	}
	if strings.Join(names, ",") != "s001,s002,s003" {
		t.Fatalf("order %v", names)
	}
	if F(rows[1].SatWetting) != 0.5 {
		t.Fatalf("replacement not stored: %v", F(rows[1].SatWetting))
	}
	// Atomic writes leave no temporary files behind.
	ents, _ := os.ReadDir(filepath.Join(dir, "campaigns", "c1"))
	if len(ents) != 2 {
		var n []string
		for _, e := range ents {
			n = append(n, e.Name())
		}
		t.Fatalf("files in campaign dir: %v", n)
	}
}

func TestSortTiesByStep(t *testing.T) {
	rows := Merge(nil, Row{Step: "b", Time: 1})
	rows = Merge(rows, Row{Step: "a", Time: 1})
	rows = Merge(rows, Row{Step: "c", Time: 0})
	if rows[0].Step != "c" || rows[1].Step != "a" || rows[2].Step != "b" {
		t.Fatalf("order %v %v %v", rows[0].Step, rows[1].Step, rows[2].Step)
	}
}

func TestCSVColumnsAndNulls(t *testing.T) {
	rows := []Row{mustRow(t, "s001", 0), mustRow(t, "s002", 45.5)}
	rows[1].CurvMean = nil
	b, err := EncodeCSV(rows)
	if err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(recs) != 3 {
		t.Fatalf("%d records", len(recs))
	}
	h := recs[0]
	if h[0] != "step" || h[1] != "time_s" || h[2] != "voxel_size_m" || len(h) != 2+len(Columns) {
		t.Fatalf("header %v", h)
	}
	col := map[string]int{}
	for i, k := range h {
		col[k] = i
	}
	if _, ok := col["contact_angle_histogram"]; ok {
		t.Fatal("histogram in CSV")
	}
	if recs[2][col["time_s"]] != "45.5" || recs[2][col["curvature_wn_mean_per_m"]] != "" ||
		recs[1][col["curvature_wn_mean_per_m"]] != "40000" || recs[1][col["capillary_pressure_pa"]] != "" ||
		recs[1][col["nonwetting_percolates"]] != "false" || recs[1][col["ganglia_count"]] != "3" {
		t.Fatalf("cells %v", recs[1:])
	}
}

func TestRejectsBadInput(t *testing.T) {
	ctx := context.Background()
	s := Dir(t.TempDir())
	for _, name := range []string{"", "A", "../x", "-a", "a/b", strings.Repeat("a", 65)} {
		if _, err := Upsert(ctx, s, name, Row{Step: "s1"}); err == nil {
			t.Errorf("campaign %q accepted", name)
		}
		if _, err := Upsert(ctx, s, "c", Row{Step: name}); err == nil {
			t.Errorf("step %q accepted", name)
		}
	}
	nan := math.NaN()
	if _, err := Upsert(ctx, s, "c", Row{Step: "s1", Porosity: &nan}); err == nil {
		t.Error("NaN porosity accepted")
	}
	if _, err := s.Get(ctx, "campaigns/none/series.json"); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("missing key error %v does not wrap fs.ErrNotExist", err)
	}
	if err := s.Put(ctx, "../escape", nil); err == nil {
		t.Error("key with .. accepted")
	}
	if _, err := Decode([]byte(`[{"step":"s1","time_s":"x"}]`)); err == nil {
		t.Error("string time accepted")
	}
}

// TestPythonReadsSameValues reads series.json with Python's json module and
// series.csv with Python's csv module and checks every CSV cell against the
// JSON value of the same key.
// Source: CPython standard library json and csv (RFC 8259, RFC 4180 readers).
func TestPythonReadsSameValues(t *testing.T) {
	py := "/usr/bin/python3"
	if _, err := os.Stat(py); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s missing in CI", py)
		}
		t.Skip("/usr/bin/python3 missing")
	}
	rows := []Row{mustRow(t, "s001", 0), mustRow(t, "s002", 45.5)}
	rows[1].Pc = new(float64)
	*rows[1].Pc = 1234.5678
	rows[1].SatWetting = nil
	dir := t.TempDir()
	if err := Save(context.Background(), Dir(dir), "c1", rows); err != nil {
		t.Fatal(err)
	}
	script := `
import csv, json, sys
d = sys.argv[1] + "/campaigns/c1/"
js = json.load(open(d + "series.json"))
rs = list(csv.DictReader(open(d + "series.csv", newline="")))
assert len(js) == len(rs), (len(js), len(rs))
n = 0
for j, r in zip(js, rs):
    for k, cell in r.items():
        v = j.get(k)
        if v is None:
            assert cell == "", (k, cell)
        elif isinstance(v, bool):
            assert cell == str(v).lower(), (k, cell)
        elif isinstance(v, str):
            assert cell == v, (k, cell)
        else:
            assert float(cell) == float(v), (k, cell, v)
        n += 1
print(n)
`
	out, err := exec.Command(py, "-c", script, dir).CombinedOutput()
	if err != nil {
		t.Fatalf("python: %v\n%s", err, out)
	}
	if want := len(rows) * (2 + len(Columns)); strings.TrimSpace(string(out)) != itoa(want) {
		t.Fatalf("python compared %s cells, want %d", out, want)
	}
}

func itoa(n int) string { b, _ := json.Marshal(n); return string(b) }

func FuzzDecode(f *testing.F) {
	f.Add([]byte("[" + resultJSON + "]"))
	f.Add([]byte(`[{"step":"s1","time_s":1,"porosity":null}]`))
	f.Add([]byte(`[]`))
	f.Add([]byte(`{"step":1}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		rows, err := Decode(b)
		if err != nil {
			return
		}
		// Whatever decodes must encode and decode to the same rows.
		enc, err := EncodeJSON(rows)
		if err != nil {
			t.Fatalf("re-encode: %v", err)
		}
		back, err := Decode(enc)
		if err != nil {
			t.Fatalf("re-decode: %v", err)
		}
		enc2, _ := EncodeJSON(back)
		if !bytes.Equal(enc, enc2) {
			t.Fatalf("unstable encoding:\n%s\n%s", enc, enc2)
		}
		if _, err := EncodeCSV(rows); err != nil {
			t.Fatalf("csv: %v", err)
		}
	})
}

// TestUncertaintyColumns: the standard errors, the connected and trapped
// Pc and the trapped-ganglia distribution of a result reach their CSV
// columns, and the nested object survives in series.json.
func TestUncertaintyColumns(t *testing.T) {
	res := []byte(`{"capillary_pressure_pa": 1000, "capillary_pressure_se_pa": 12.5,
		"capillary_pressure_connected_pa": 900, "capillary_pressure_connected_se_pa": 20,
		"capillary_pressure_trapped_pa": 1500, "capillary_pressure_trapped_se_pa": null,
		"contact_angle_mean_se_deg": 1.75,
		"trapped_ganglia_curvature": {"min_area_m2": 1e-10, "count": 7, "below_threshold": 3, "pc_p10_pa": 1100, "pc_median_pa": 1400, "pc_p90_pa": 1900}}`)
	r, err := FromResult("s1", 1, res)
	if err != nil {
		t.Fatal(err)
	}
	b, err := EncodeCSV([]Row{r})
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	head, cells := strings.Split(lines[0], ","), strings.Split(lines[1], ",")
	got := map[string]string{}
	for i, h := range head {
		got[h] = cells[i]
	}
	for k, want := range map[string]string{"capillary_pressure_se_pa": "12.5", "capillary_pressure_connected_pa": "900",
		"capillary_pressure_connected_se_pa": "20", "capillary_pressure_trapped_pa": "1500", "capillary_pressure_trapped_se_pa": "",
		"contact_angle_mean_se_deg": "1.75", "trapped_ganglia_count": "7", "trapped_ganglia_pc_p10_pa": "1100",
		"trapped_ganglia_pc_median_pa": "1400", "trapped_ganglia_pc_p90_pa": "1900"} {
		if got[k] != want {
			t.Errorf("column %s = %q, want %q", k, got[k], want)
		}
	}
	j, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(j), `"below_threshold":3`) {
		t.Errorf("series.json lost the trapped-ganglia object: %s", j)
	}
}
