package main

import (
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/synth"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// codedScene is labels coded 1 solid, 2 wetting, 3 nonwetting, with 255
// outside, and its true porosity. Read with the default codes (0 solid,
// 1 wetting, 2 nonwetting) the solid was taken for brine and code 3 for
// solid: porosity 0.97 where the truth was 0.79.
func codedScene() (*volume.Labels, float64, int) {
	lab := volume.NewShape[uint8](20, 30, 40, 2e-6)
	var pore, inside, n3 int
	for i := range lab.Pix {
		x := i % 40
		switch {
		case x < 2:
			lab.Pix[i] = 255
			continue
		case i%5 == 0:
			lab.Pix[i] = 1
		case i%7 == 0:
			lab.Pix[i] = 3
			n3++
		default:
			lab.Pix[i] = 2
		}
		inside++
		if lab.Pix[i] != 1 {
			pore++
		}
	}
	return lab, float64(pore) / float64(inside), n3
}

// Label codes that are none of solid, wetting, nonwetting and outside are
// refused (exit 2, the code, its count and the flags to set) wherever a
// user's labels come in: measure --labels, a reference mask, and the
// labels segment wrote read back with other codes.
func TestUnknownLabelCodesRefused(t *testing.T) {
	dir := t.TempDir()
	lab, porosity, n3 := codedScene()
	path := filepath.Join(dir, "labels.raw")
	if err := volio.WriteRaw(path, lab, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	code, _, errs := runCLI(t, "measure", "--labels", path)
	if code != exitBadInput {
		t.Errorf("unknown code: exit %d, want %d", code, exitBadInput)
	}
	oneLineError(t, "unknown code", code, errs, "labels.raw: label code 3 ("+grouped(n3)+" voxels) is none of solid 0, wetting 1, nonwetting 2, outside 255; set --solid/--wetting/--nonwetting")

	// With the codes given the same file measures the truth (voxel counts,
	// exact up to rounding).
	m := measureJSON(t, "--labels", "--solid", "1", "--wetting", "2", "--nonwetting", "3", path)
	if p := num(m, "porosity"); math.Abs(p-porosity) > 1e-12 {
		t.Errorf("porosity %.4f with the right codes, truth %.4f", p, porosity)
	}

	// A reference mask holding a code that is no phase.
	grey := volume.NewShape[uint16](20, 30, 40, 2e-6)
	for i := range grey.Pix {
		grey.Pix[i] = uint16(1000 * (i % 3))
	}
	gpath := filepath.Join(dir, "grey.raw")
	if err := volio.WriteRaw(gpath, grey, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	mask := volume.NewShape[uint8](20, 30, 40, 2e-6)
	for i := range mask.Pix {
		mask.Pix[i] = []uint8{0, 1, 7}[i%3]
	}
	mpath := filepath.Join(dir, "mask.raw")
	if err := volio.WriteRaw(mpath, mask, volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	for _, cmd := range [][]string{
		{"measure", "--no-sample", "--reference", mpath, gpath},
		{"segment", "--no-sample", "--reference", mpath, gpath, filepath.Join(dir, "out.raw")},
	} {
		code, _, errs = runCLI(t, cmd...)
		if code != exitBadInput {
			t.Errorf("%s --reference with code 7: exit %d, want %d", cmd[0], code, exitBadInput)
		}
		oneLineError(t, cmd[0]+" --reference with code 7", code, errs, "mask.raw: label code 7 ("+grouped(len(mask.Pix)/3)+" voxels) is none of solid 0, wetting 1, nonwetting 2, outside 255")
	}
}

// grouped writes n with a space between groups of three digits.
func grouped(n int) string {
	s := strconv.Itoa(n)
	for i := len(s) - 3; i > 0; i -= 3 {
		s = s[:i] + " " + s[i:]
	}
	return s
}

// Labels that segment wrote with the campaign's own codes are read back
// with those codes or refused: segment names the codes it wrote (on
// stdout and in the Zarr attributes), measure --labels without them exits
// 2 naming the code, and with the config gives segment's own counts.
func TestSegmentCodesReRead(t *testing.T) {
	dir := t.TempDir()
	lab := volume.NewShape[uint8](30, 40, 40, 2e-6)
	synth.CapScene{Wall: 8, R: 16, DropAngle: 90, Centre: [2]float64{19.5, 19.5}}.Draw(lab, 0, 2, 1)
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		t.Fatal(err)
	}
	grey := filepath.Join(dir, "grey.raw")
	if err := volio.WriteRaw(grey, forward.Uint16(g), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	cfg := writeFile(t, dir, "codes.yaml", "voxel_size: 2um\nsegment:\n  codes: {solid: 10, wetting: 20, nonwetting: 30}\n")
	out := filepath.Join(dir, "labels.zarr")
	code, text, errs := runCLI(t, "segment", "--no-sample", "--config", cfg, grey, out)
	if code != 0 {
		t.Fatalf("segment: exit %d: %s", code, errs)
	}
	if !strings.Contains(text, "(10 solid, 20 wetting, 30 nonwetting, 255 outside the sample)") {
		t.Errorf("segment does not name the codes it wrote: %q", text)
	}
	attrs, err := os.ReadFile(filepath.Join(out, ".zattrs"))
	if err != nil {
		t.Fatal(err)
	}
	var a struct{ Phases map[string]int }
	if err := json.Unmarshal(attrs, &a); err != nil || a.Phases["solid"] != 10 || a.Phases["wetting"] != 20 || a.Phases["nonwetting"] != 30 || a.Phases["outside"] != 255 {
		t.Errorf("Zarr attributes %s, want phases solid 10, wetting 20, nonwetting 30, outside 255", attrs)
	}
	z, err := volio.OpenZarr(context.Background(), volio.Dir(dir), "labels.zarr")
	if err != nil {
		t.Fatal(err)
	}
	v, err := z.ReadBox(context.Background(), lab.Box)
	if err != nil {
		t.Fatal(err)
	}
	var solid, pore int
	for _, c := range v.(*volume.Labels).Pix {
		switch c {
		case 10:
			solid++
		case 20, 30:
			pore++
		}
	}
	code, _, errs = runCLI(t, "measure", "--labels", out)
	if code != exitBadInput {
		t.Errorf("re-read with default codes: exit %d, want %d", code, exitBadInput)
	}
	oneLineError(t, "re-read with default codes", code, errs, "labels.zarr: label code 10 ("+grouped(solid)+" voxels) is none of solid 0, wetting 1, nonwetting 2")
	m := measureJSON(t, "--labels", "--config", cfg, out)
	// Source: voxel counts of the labels segment wrote, read by the
	// independent Zarr reader above.
	if p := num(m, "porosity"); math.Abs(p-float64(pore)/float64(pore+solid)) > 1e-12 {
		t.Errorf("porosity %.6f read with the config's codes, counts give %.6f", p, float64(pore)/float64(pore+solid))
	}
}
