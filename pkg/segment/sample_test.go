package segment

import (
	"math"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// detectOn renders a rock in a cylinder (or none) and detects the sample.
func detectOn(t *testing.T, cyl *forward.Cylinder, block int) Sample {
	t.Helper()
	n := 96
	lab := volume.NewShape[uint8](32, n, n, 1e-6)
	forward.Rock{GrainRadius: 7, Porosity: 0.35, BlobRadius: 5, BlobFrac: 0.4, Seed: 9}.Draw(lab, phase.Default())
	fp := forward.Default()
	fp.Sample = cyl
	img, err := forward.Render(lab, fp)
	if err != nil {
		t.Fatal(err)
	}
	p := Defaults()
	p.SampleBlock = block
	h, err := Histogram(forward.Uint16(img), lab.Box, p, nil)
	if err != nil {
		t.Fatal(err)
	}
	s, err := DetectSample(h, p, 0)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// TestDetectSampleFillingView: a core that fills the field of view, with
// only the corners outside and a thin sleeve (as in the demo), is found
// whole — a linear split of the block deviations would cut into the rock.
// Source: the rendered cylinder (forward model); tolerance one block.
func TestDetectSampleFillingView(t *testing.T) {
	truth := forward.Cylinder{Y: 47.5, X: 47.5, Radius: 46, Wall: 2}
	s := detectOn(t, &truth, 8)
	if math.Hypot(s.Y-truth.Y, s.X-truth.X) > 4 || math.Abs(s.Radius-truth.Radius) > 8 {
		t.Errorf("detected %+v, want centre (%g, %g) radius %g", s, truth.Y, truth.X, truth.Radius)
	}
	t.Logf("detected %+v (truth radius %g)", s, truth.Radius)
}

// TestDetectSampleNoneInView: with rock everywhere in view there is no
// cylinder to find, and no voxel is masked out.
func TestDetectSampleNoneInView(t *testing.T) {
	if s := detectOn(t, nil, 8); s.Radius != 0 {
		t.Errorf("detected a cylinder %+v in a view that is all rock", s)
	}
}
