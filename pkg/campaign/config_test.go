package campaign

import (
	"encoding/json"
	"math"
	"strings"
	"testing"
)

func TestDefaultValidAndRoundTrip(t *testing.T) {
	c := Default()
	if err := c.Validate(); err != nil {
		t.Fatalf("defaults invalid: %v", err)
	}
	b, err := json.Marshal(c)
	if err != nil {
		t.Fatal(err)
	}
	// JSON is YAML: a saved config reads back identical.
	d, err := Parse("saved.json", b)
	if err != nil {
		t.Fatal(err)
	}
	if d.Hash() != c.Hash() {
		t.Errorf("round trip changed the hash: %s → %s", c.Hash(), d.Hash())
	}
}

func TestUnknownKeyIsAnError(t *testing.T) {
	_, err := Parse("c.yaml", []byte("ift_n_per_m: 0.03\nsegment:\n  filtr: median\n"))
	if err == nil || !strings.Contains(err.Error(), "c.yaml") || !strings.Contains(err.Error(), "filtr") {
		t.Fatalf("want an error naming the file and the key, got %v", err)
	}
	if strings.Contains(err.Error(), "\n") {
		t.Errorf("error is not one line: %q", err)
	}
}

func TestHashCoversResultsOnly(t *testing.T) {
	base := Default()
	h := base.Hash()
	tiled := base
	tiled.Tile = 64
	if tiled.Hash() != h {
		t.Errorf("tile size changed the hash (results do not depend on it)")
	}
	for name, change := range map[string]func(*Config){
		"ift":         func(c *Config) { c.IFT = 0.035 },
		"threshold":   func(c *Config) { c.Segment.Threshold = "fixed"; c.Segment.Fixed = []float64{1, 2} },
		"filter":      func(c *Config) { c.Segment.Filter.Method = "gaussian" },
		"exclusion":   func(c *Config) { c.Measure.CurvatureExclude = 2 },
		"connectivty": func(c *Config) { c.Measure.Connectivity = 6 },
		"voxel size":  func(c *Config) { c.VoxelSize = "2um" },
	} {
		c := Default()
		change(&c)
		if c.Hash() == h {
			t.Errorf("%s does not change the parameter hash", name)
		}
	}
}

func TestYAMLConfig(t *testing.T) {
	c, err := Parse("c.yaml", []byte(`
voxel_size: 2.5um
ift_n_per_m: 0.052
tile: 96
segment:
  order: nsw
  threshold: fixed
  fixed: [18000, 30000]
  min_island: 8
measure:
  connectivity: 6
  flow_axis: x
`))
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(c.VoxelSizeM()-2.5e-6) > 1e-18 || c.Tile != 96 || c.Segment.Order != "nsw" || c.Segment.MinIsland != 8 || c.Measure.Connectivity != 6 {
		t.Errorf("values not read: %+v", c)
	}
	mo, err := c.MeasureOptions()
	if err != nil || mo.FlowAxis != 2 || mo.IFT != 0.052 {
		t.Errorf("measure options %+v, %v", mo, err)
	}
	if _, err := Parse("bad.yaml", []byte("tile: 8\n")); err == nil {
		t.Errorf("tile 8 accepted")
	}
}
