package campaign

import (
	"strings"
	"testing"
)

func TestSetDottedKeys(t *testing.T) {
	base := Default()
	base.IFT = 0.03
	c, err := base.Set([]string{"segment.threshold=fixed", "segment.fixed=[18000, 30000]", "measure.curvature_exclude=2"})
	if err != nil {
		t.Fatal(err)
	}
	if c.Segment.Threshold != "fixed" || len(c.Segment.Fixed) != 2 || c.Segment.Fixed[0] != 18000 || c.Segment.Fixed[1] != 30000 ||
		c.Measure.CurvatureExclude != 2 {
		t.Errorf("values not set: %+v", c)
	}
	// Values not named keep theirs.
	if c.IFT != 0.03 || c.Measure.Connectivity != 26 || c.Segment.Filter.Method != base.Segment.Filter.Method {
		t.Errorf("other values changed: ift %g conn %d filter %q", c.IFT, c.Measure.Connectivity, c.Segment.Filter.Method)
	}
	if c.Hash() == base.Hash() {
		t.Error("hash unchanged by a threshold change")
	}
	d := Diff(base, c)
	want := []string{"measure.curvature_exclude: 3 → 2", "segment.fixed: unset → [18000,30000]", `segment.threshold: "otsu" → "fixed"`}
	for _, w := range want {
		found := false
		for _, x := range d {
			found = found || x == w
		}
		if !found {
			t.Errorf("diff %q lacks %q", d, w)
		}
	}
	if len(Diff(base, base)) != 0 {
		t.Errorf("diff of equal configs: %q", Diff(base, base))
	}
	// A shorter list replaces a longer one entirely.
	e, err := c.Set([]string{"segment.fixed=[20000, 31000]"})
	if err != nil || e.Segment.Fixed[0] != 20000 || len(e.Segment.Fixed) != 2 {
		t.Errorf("replacing a list: %v %v", e.Segment.Fixed, err)
	}
}

func TestSetErrors(t *testing.T) {
	for _, a := range []string{"segment.tresh=1", "nokey", "=3", "segment=3", "measure.connectivity=5", "tile=8", "segment..fixed=1", "ift_n_per_m=[1"} {
		_, err := Default().Set([]string{a})
		if err == nil {
			t.Errorf("%q accepted", a)
			continue
		}
		if strings.Contains(err.Error(), "\n") {
			t.Errorf("%q: error is not one line: %q", a, err)
		}
	}
	if _, err := Default().Set([]string{"segment.bogus=1"}); err == nil || !strings.Contains(err.Error(), "bogus") {
		t.Errorf("unknown key not named: %v", err)
	}
}

func FuzzSet(f *testing.F) {
	for _, s := range []string{"segment.threshold=fixed", "segment.fixed=[1,2]", "measure.curvature_exclude=2", "a.b.c=", "x=[", "=="} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, a string) {
		c, err := Default().Set([]string{a})
		if err != nil {
			if strings.Contains(err.Error(), "\n") {
				t.Fatalf("multi-line error %q", err)
			}
			return
		}
		if err := c.Validate(); err != nil {
			t.Fatalf("Set returned an invalid config for %q: %v", a, err)
		}
	})
}
