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
		"assign":      func(c *Config) { c.Segment.Assign = "threshold" },
		"ws steps":    func(c *Config) { c.Segment.Watershed.Steps = 3 },
		"ws cost":     func(c *Config) { c.Segment.Watershed.Cost = "max" },
		"ws wall":     func(c *Config) { c.Segment.Watershed.Wall = true },
		"exclusion":   func(c *Config) { c.Measure.CurvatureExclude = 2 },
		"connectivty": func(c *Config) { c.Measure.Connectivity = 6 },
		"voxel size":  func(c *Config) { c.VoxelSize = "2um" },
		"wall gap":    func(c *Config) { c.Measure.ContactWallGap = 3 },
		"front":       func(c *Config) { c.Measure.FrontThreshold = 0.1 },
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

// TestUnitsChecked: σ must be in N/m within 1e-3…0.5 and the voxel size
// must carry a unit and lie within 0.05 µm…1 mm, else Parse refuses the
// config in one line naming the key (issue 13, item 6).
func TestUnitsChecked(t *testing.T) {
	bad := []struct{ yaml, want string }{
		{"voxel_size: 4um\nift_n_per_m: 35\n", "35 looks like mN/m; did you mean 0.035?"},
		{"voxel_size: 4um\nift_n_per_m: 72.8\n", "did you mean 0.0728?"},
		{"voxel_size: 4um\nift_n_per_m: -0.035\n", "must be > 0 N/m"},
		{"voxel_size: 4um\nift_n_per_m: 0.0002\n", "outside 0.001…0.5 N/m"},
		{"voxel_size: 4um\nift_n_per_m: 1000\n", "outside 0.001…0.5 N/m"},
		{"voxel_size: 4\n", `voxel size "4" has no unit`},
		{"voxel_size: 4 inch\n", `voxel size "4 inch" has no unit`},
		{"voxel_size: 4m\n", "outside the plausible 0.05 µm … 1 mm"},
		{"voxel_size: 2mm\n", "outside the plausible 0.05 µm … 1 mm"},
		{"voxel_size: 20nm\n", "outside the plausible 0.05 µm … 1 mm"},
	}
	for _, c := range bad {
		_, err := Parse("c.yaml", []byte(c.yaml))
		if err == nil || !strings.Contains(err.Error(), c.want) || strings.Contains(err.Error(), "\n") {
			t.Errorf("%q: error %v, want one line containing %q", c.yaml, err, c.want)
		}
	}
	// Source: σ water–air 0.072 N/m at 25 °C, oil–brine 0.02–0.05,
	// CO2–brine 0.025–0.04 at reservoir conditions (handbook values, from
	// memory); voxel sizes of synchrotron and laboratory micro-CT.
	good := map[string]float64{"0.05um": 5e-8, "50nm": 5e-8, "2.5µm": 2.5e-6, "2.5μm": 2.5e-6, "4 um": 4e-6, "0.0000025m": 2.5e-6, "1mm": 1e-3}
	for s, want := range good {
		c, err := Parse("c.yaml", []byte("voxel_size: "+s+"\nift_n_per_m: 0.072\n"))
		if err != nil {
			t.Errorf("voxel_size %s: %v", s, err)
			continue
		}
		if got := c.VoxelSizeM(); math.Abs(got-want) > 1e-12*want {
			t.Errorf("voxel_size %s: %g m, want %g", s, got, want)
		}
	}
	for _, s := range []float64{0, 0.001, 0.025, 0.04, 0.072, 0.5} {
		if err := CheckIFT(s); err != nil {
			t.Errorf("σ %g N/m refused: %v", s, err)
		}
	}
}

// measure.contact_wall_gap reaches the contact-angle options, and a gap the
// fit cannot hold is refused when the config is read.
func TestContactWallGapKey(t *testing.T) {
	c, err := Parse("gap.yaml", []byte("measure:\n  contact_wall_gap: 3\n"))
	if err != nil {
		t.Fatal(err)
	}
	mo, err := c.MeasureOptions()
	if err != nil {
		t.Fatal(err)
	}
	if mo.Contact.WallGap != 3 {
		t.Errorf("contact_wall_gap 3 gave WallGap %g", mo.Contact.WallGap)
	}
	for _, bad := range []string{"-1", "6", "20"} {
		c, err := Parse("gap.yaml", []byte("measure:\n  contact_wall_gap: "+bad+"\n"))
		if err == nil {
			_, err = c.MeasureOptions()
		}
		if err == nil {
			t.Errorf("contact_wall_gap %s accepted (fit radius 12: the gap must stay below 6)", bad)
		}
	}
}

// TestRegisterConfig: register.* is read, checked and enters the parameter
// hash; all zero it is left out of the JSON, so the hashes of campaigns
// written before it existed stay the same; registration runs only in
// reference-scan mode.
func TestRegisterConfig(t *testing.T) {
	b, err := json.Marshal(Default())
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(string(b), "register") {
		t.Errorf("default config JSON holds a register key: %s", b)
	}
	c, err := Parse("c.yaml", []byte("segment: {reference: true}\nregister: {max_shift: 3, region: 64}\n"))
	if err != nil {
		t.Fatal(err)
	}
	if !c.Registers() || c.RegisterLimit() != 3 || c.Register.Region != 64 {
		t.Errorf("register %+v: registers %v, limit %g", c.Register, c.Registers(), c.RegisterLimit())
	}
	ref := Default()
	ref.Segment.Reference = true
	if !ref.Registers() || ref.RegisterLimit() != DefaultMaxShift || Default().Registers() {
		t.Error("registration must be on by default in reference-scan mode only, with the default limit")
	}
	h := ref.Hash()
	for name, change := range map[string]func(*Config){
		"off":       func(c *Config) { c.Register.Off = true },
		"max_shift": func(c *Config) { c.Register.MaxShift = 2 },
		"region":    func(c *Config) { c.Register.Region = 64 },
	} {
		c := ref
		change(&c)
		if c.Hash() == h {
			t.Errorf("register.%s does not change the parameter hash", name)
		}
	}
	off, err := Parse("c.yaml", []byte("segment: {reference: true}\nregister: {off: true}\n"))
	if err != nil || off.Registers() {
		t.Errorf("register.off: registers %v, %v", off.Registers(), err)
	}
	for _, bad := range []string{"register: {region: 8}\n", "register: {max_shift: -1}\n", "register: {of: true}\n"} {
		if _, err := Parse("c.yaml", []byte(bad)); err == nil || !strings.Contains(err.Error(), "c.yaml") || strings.Contains(err.Error(), "\n") {
			t.Errorf("%q: %v, want one line naming c.yaml", bad, err)
		}
	}
}

// TestSkipTopological: measure.skip_topological set through --set reaches
// the measurement options and changes the parameter hash; left false it is
// not written, so the hashes of existing campaigns stay what they were.
func TestSkipTopological(t *testing.T) {
	c := Default()
	h0 := c.Hash()
	b, err := json.Marshal(c)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(string(b), "skip_topological") {
		t.Errorf("skip_topological written when false: %s", b)
	}
	s, err := c.Set([]string{"measure.skip_topological=true"})
	if err != nil {
		t.Fatal(err)
	}
	o, err := s.MeasureOptions()
	if err != nil {
		t.Fatal(err)
	}
	if !o.SkipTopological || s.Hash() == h0 {
		t.Errorf("skip_topological=true: options %v, hash %s (default %s)", o.SkipTopological, s.Hash(), h0)
	}
}
