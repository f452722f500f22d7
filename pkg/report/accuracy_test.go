package report

import (
	"strings"
	"testing"
)

// accuracyJSON is a stored estimate as `sluice accuracy` writes it (keys of
// DEVELOPERS.md), with two states.
const accuracyJSON = `{"campaign":"c","step":"s003","param_hash":"abc","region_min_zyx":[8,8,8],"region_shape_zyx":[96,96,96],
"ift_n_per_m":0.0728,"theta_prescribed_deg":45,"min_radius_voxels":8,
"scan":{"grey_solid":40000,"grey_wetting":24000,"grey_nonwetting":14000,"noise_sigma":2000,"blur_sigma_voxels":0.7},"cnr":5,
"states":[{"curvature_prescribed_per_m":50000,"capillary_pressure_prescribed_pa":3640,"corner_radius_voxels":8,"relaxation_converged":true,
  "saturation_nonwetting_true":0.4,"saturation_wetting":{"truth":0.6,"labels":0.6,"grey":0.61},"specific_area_wn_per_m":{"truth":1000,"labels":1000,"grey":1100},
  "curvature_wn_mean_per_m":{"truth":50000,"labels":48000,"grey":52000},"contact_angle_mean_deg":{"truth":45,"labels":41,"grey":50}},
 {"curvature_prescribed_per_m":60000,"corner_radius_voxels":6.7,"relaxation_converged":false,"saturation_nonwetting_true":0.001,"skipped":"nonwetting saturation 0.0010 below 0.005"}],
"labels_path":{"saturation_wetting_abs":{"bias":0,"spread":null,"n":1},"specific_area_wn_rel":{"bias":0,"spread":null,"n":1},
  "capillary_pressure_rel":{"bias":-0.04,"spread":null,"n":1},"contact_angle_deg":{"bias":-4,"spread":null,"n":1}},
"grey_path":{"saturation_wetting_abs":{"bias":0.0123,"spread":0.004,"n":2},"specific_area_wn_rel":{"bias":0.1,"spread":0.02,"n":2},
  "capillary_pressure_rel":{"bias":0.04,"spread":0.015,"n":2},"contact_angle_deg":{"bias":5,"spread":1.5,"n":2}},
"notes":["Image-derived capillary pressure and contact angles are estimates."],"created_at":"2026-12-05T19:00:00Z"}`

// TestAccuracySection: the report shows the stored estimate next to the
// measured series — the latest value and range of each quantity (from the
// rows: S_w 1…0.4, a_wn 0…3 1/mm, Pc 0.0728·κ) beside the bias ± spread of
// both paths (fractions × 100 for a_wn and Pc, by hand: 0.1 → +10.0 %,
// 0.04 ± 0.015 → +4.0 ± 1.5 %; html/template writes + as &#43;), one row per state, the notes; a stale
// hash is flagged; without an estimate the section says how to make one.
func TestAccuracySection(t *testing.T) {
	rows := campaign(4)
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows}))
	if !strings.Contains(page, "No accuracy estimate for this run") || strings.Contains(page, `id="accuracy-table"`) {
		t.Fatal("a report without an estimate shows a table or lacks the note")
	}
	a, err := DecodeAccuracy([]byte(accuracyJSON))
	if err != nil {
		t.Fatal(err)
	}
	a.Current = "abc"
	page = string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows, Accuracy: a}))
	for _, want := range []string{
		`<tr><td>S_w</td><td>0.400</td><td>0.400 … 1.000</td><td>&#43;0.0000 (1 states)</td><td>&#43;0.0123 ± 0.0040 (2 states)</td></tr>`,
		`<tr><td>a_wn (1/mm)</td><td>3.00</td><td>0.00 … 3.00</td><td>&#43;0.0 % (1 states)</td><td>&#43;10.0 ± 2.0 % (2 states)</td></tr>`,
		`<td>-4.0 % (1 states)</td><td>&#43;4.0 ± 1.5 % (2 states)</td></tr>`,
		`<tr><td>θ mean (°)</td>`,
		`<td>-4.0° (1 states)</td><td>&#43;5.0 ± 1.5° (2 states)</td></tr>`,
		`<tr><td>50.00</td><td>3.640</td><td>8.0</td><td>0.400</td><td>0.600</td><td>0.610</td><td>1.00</td><td>1.10</td><td>48.00</td><td>52.00</td><td>41.0</td><td>50.0</td><td></td></tr>`,
		`<td>nonwetting saturation 0.0010 below 0.005</td></tr>`,
		"noise σ 2000.0 grey (CNR 5.0)",
		"<li>Image-derived capillary pressure and contact angles are estimates.</li>",
	} {
		if !strings.Contains(page, want) {
			t.Errorf("report lacks %s", want)
		}
	}
	if strings.Contains(page, "not the campaign's current run") {
		t.Error("an estimate of the current run flagged as stale")
	}
	a.Current = "def"
	page = string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 2.5e-6}, Rows: rows, Accuracy: a}))
	if !strings.Contains(page, "not the campaign's current run") {
		t.Error("an estimate of another run not flagged")
	}
}
