package measure

import (
	"strings"
	"testing"

	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// capLabels is a nonwetting drop (code 2) of 70° on a flat wall (solid,
// code 0, below z = 8) in wetting phase (code 1): a three-phase contact
// line all round its foot (synth.CapScene, analytic geometry).
func capLabels() *volume.Labels {
	lab := volume.NewShape[uint8](40, 64, 64, 2e-6)
	synth.CapScene{Wall: 8, R: 22, DropAngle: 70, Centre: [2]float64{31.5, 31.5}}.Draw(lab, 0, 2, 1)
	return lab
}

// TestAngleNote: a step with solid and both fluids but no contact-angle
// sample says why, in one line: a nonwetting drop lifted off the wall by a
// wetting film has no three-phase line at all; nonwetting covering the
// whole wall touches the solid but never beside wetting phase. The drop
// sitting on the wall has samples and no note.
func TestAngleNote(t *testing.T) {
	o := Defaults()
	note := func(lab *volume.Labels) (int64, string) {
		t.Helper()
		r, err := Volume(lab, o, 0, 1)
		if err != nil {
			t.Fatal(err)
		}
		if strings.Contains(r.AngleNote, "\n") {
			t.Errorf("note on several lines: %q", r.AngleNote)
		}
		return r.AngleSamples, r.AngleNote
	}
	if n, s := note(capLabels()); n == 0 || s != "" {
		t.Errorf("drop on the wall: %d samples, note %q; want samples and no note", n, s)
	}

	// A 2-voxel wetting film under the drop: nonwetting voxels in the two
	// layers above the wall become wetting.
	film := capLabels()
	for z := 8; z < 10; z++ {
		for y := 0; y < 64; y++ {
			for x := 0; x < 64; x++ {
				if i := film.Index(z, y, x); film.Pix[i] == 2 {
					film.Pix[i] = 1
				}
			}
		}
	}
	n, s := note(film)
	if n != 0 || !strings.HasPrefix(s, "no three-phase contact line found: the nonwetting phase touches the solid nowhere") || !strings.Contains(s, "wetting film") {
		t.Errorf("drop on a wetting film: %d samples, note %q; want 0 and the film named", n, s)
	}
	t.Logf("film: %s", s)

	// Nonwetting covers the wall (the layer above it), wetting above that.
	cover := volume.NewShape[uint8](24, 32, 32, 2e-6)
	for i := range cover.Pix {
		z := i / (32 * 32)
		switch {
		case z < 8:
			cover.Pix[i] = 0
		case z < 12:
			cover.Pix[i] = 2
		default:
			cover.Pix[i] = 1
		}
	}
	n, s = note(cover)
	if n != 0 || !strings.Contains(s, "touches the solid, but nowhere beside wetting phase") {
		t.Errorf("nonwetting covering the wall: %d samples, note %q", n, s)
	}
	// One nonwetting voxel on the wall: a contact-line point with five
	// interface faces, fewer than a fit needs (contact.DefaultMinFaces).
	speck := volume.NewShape[uint8](24, 32, 32, 2e-6)
	for i := range speck.Pix {
		if i/(32*32) < 8 {
			speck.Pix[i] = 0
		} else {
			speck.Pix[i] = 1
		}
	}
	speck.Pix[speck.Index(8, 16, 16)] = 2
	n, s = note(speck)
	if n != 0 || !strings.HasPrefix(s, "1 contact-line points found but none could be fitted") {
		t.Errorf("one nonwetting voxel on the wall: %d samples, note %q", n, s)
	}
	// Only two phases: no contact line is expected, no note.
	two := capLabels()
	for i, v := range two.Pix {
		if v == 2 {
			two.Pix[i] = 1
		}
	}
	if _, s := note(two); s != "" {
		t.Errorf("no nonwetting phase: note %q; want none", s)
	}
}
