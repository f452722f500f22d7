package main

import (
	"encoding/json"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// filmScene is capScene with the nonwetting voxels of the first n layers
// above the wall turned wetting: the drop rests on a wetting film and
// touches the solid nowhere.
func filmScene(n int) *volume.Labels {
	lab := capScene()
	s := lab.Shape()
	for z := 8; z < 8+n; z++ {
		for y := 0; y < s[1]; y++ {
			for x := 0; x < s[2]; x++ {
				if i := lab.Index(z, y, x); lab.Pix[i] == 2 {
					lab.Pix[i] = 1
				}
			}
		}
	}
	return lab
}

// TestMeasureSaysWhyNoAngle: `sluice measure` on a scan with solid and
// both fluids but no contact-angle sample used to print "— / — / — °
// (0 samples)" without a word. Now the table has a note line and the JSON
// a contact_angle_note saying no three-phase contact line was found and
// why. Through grey input the invariant is: samples, or the note.
func TestMeasureSaysWhyNoAngle(t *testing.T) {
	dir := t.TempDir()
	lab := filmScene(2)
	raw := filepath.Join(dir, "film.raw")
	if err := volio.WriteRaw(raw, lab, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	code, out, errs := runCLI(t, "measure", "--labels", "--voxel-size", "2um", raw)
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	const want = "note: contact angle: no three-phase contact line found: the nonwetting phase touches the solid nowhere in the labels (a wetting film separates them"
	if !strings.Contains(out, "(0 samples)") || !strings.Contains(out, want) {
		t.Errorf("table without the note:\n%s", out)
	}
	code, out, errs = runCLI(t, "measure", "--labels", "--json", "--voxel-size", "2um", raw)
	var m struct {
		N    int64  `json:"contact_angle_samples"`
		Note string `json:"contact_angle_note"`
	}
	if code != exitOK || json.Unmarshal([]byte(out), &m) != nil || m.N != 0 || !strings.Contains(m.Note, "wetting film") {
		t.Errorf("--json: exit %d, samples %d, note %q (%s)", code, m.N, m.Note, errs)
	}
	// The drop on the wall: samples, no note.
	ok := filepath.Join(dir, "cap.raw")
	if err := volio.WriteRaw(ok, capScene(), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	if _, out, _ := runCLI(t, "measure", "--labels", "--voxel-size", "2um", ok); strings.Contains(out, "note: contact angle") || strings.Contains(out, "(0 samples)") {
		t.Errorf("drop on the wall:\n%s", out)
	}

	// Grey: the forward model's rendering of a drop on a 3-voxel film.
	g, err := forward.Render(filmScene(3), forward.Default())
	if err != nil {
		t.Fatal(err)
	}
	grey := filepath.Join(dir, "film-grey.raw")
	if err := volio.WriteRaw(grey, forward.Uint16(g), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	code, out, errs = runCLI(t, "measure", "--no-sample", "--json", "--voxel-size", "2um", grey)
	if code != exitOK || json.Unmarshal([]byte(out), &m) != nil {
		t.Fatalf("grey: exit %d: %s", code, errs)
	}
	t.Logf("grey drop on a film: %d samples, note %q", m.N, m.Note)
	if m.N == 0 && m.Note == "" {
		t.Errorf("grey drop on a film: 0 samples and no note")
	}
}

// TestMeasureGreyAngleNote: contact angles measured on a grey scan that
// measure segmented itself carry a note about the layers on the rock unless
// measure.contact_wall_gap is set, and setting it moves the mean towards the
// angle measured on the labels the scan was rendered from (pkg/segment
// TestContactAngleOnGreyCapsWallGap holds the accuracy figures).
func TestMeasureGreyAngleNote(t *testing.T) {
	dir := t.TempDir()
	lab := capScene()
	labels := filepath.Join(dir, "cap-labels.raw")
	if err := volio.WriteRaw(labels, lab, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		t.Fatal(err)
	}
	grey := filepath.Join(dir, "cap-grey.raw")
	if err := volio.WriteRaw(grey, forward.Uint16(g), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	gap := writeFile(t, dir, "gap.yaml", "measure:\n  contact_wall_gap: 3\n")
	type out struct {
		N    int64    `json:"contact_angle_samples"`
		Mean *float64 `json:"contact_angle_mean_deg"`
		Note string   `json:"contact_angle_note"`
	}
	run := func(args ...string) out {
		t.Helper()
		code, stdout, errs := runCLI(t, append([]string{"measure", "--json", "--voxel-size", "2um"}, args...)...)
		var o out
		if code != exitOK || json.Unmarshal([]byte(stdout), &o) != nil || o.N == 0 || o.Mean == nil {
			t.Fatalf("measure %v: exit %d, %d samples: %s", args, code, o.N, errs)
		}
		return o
	}
	truth := run("--labels", labels)
	plain := run("--no-sample", grey)
	fixed := run("--no-sample", "--config", gap, grey)
	t.Logf("labels %.1f°, grey %.1f° (note %q), grey with wall gap 3 %.1f°", *truth.Mean, *plain.Mean, plain.Note, *fixed.Mean)
	if truth.Note != "" || !strings.Contains(plain.Note, "contact_wall_gap") || fixed.Note != "" {
		t.Errorf("notes: labels %q, grey %q (want the wall-gap note), grey with the gap %q", truth.Note, plain.Note, fixed.Note)
	}
	if math.Abs(*fixed.Mean-*truth.Mean) >= math.Abs(*plain.Mean-*truth.Mean) {
		t.Errorf("the wall gap did not bring the grey angle closer to the labels' %.1f°: %.1f° without, %.1f° with", *truth.Mean, *plain.Mean, *fixed.Mean)
	}
}
