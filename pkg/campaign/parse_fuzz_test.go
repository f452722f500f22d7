package campaign

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// FuzzParse feeds arbitrary documents to the strict YAML config loader. It
// must never panic; every error is one line naming the file; every config
// it accepts validates, and its JSON form (what campaign.json stores) parses
// back to the same parameter hash and tile.
func FuzzParse(f *testing.F) {
	names, _ := filepath.Glob(filepath.Join("..", "..", "testdata", "bad", "config-*.yaml"))
	if len(names) == 0 {
		f.Fatal("no seeds in testdata/bad")
	}
	for _, n := range names {
		b, err := os.ReadFile(n)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	def, _ := json.Marshal(Default())
	f.Add(def)
	f.Add([]byte("tile: 64\nift_n_per_m: 0.052\nsegment:\n  threshold: fixed\n  fixed: [18000, 30000]\nmeasure:\n  flow_axis: x\n"))
	f.Add([]byte("voxel_size: 2.5um\ndetect_sample: false\n---\ntile: 0\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := Parse("c.yaml", data)
		if err != nil {
			if msg := err.Error(); strings.Contains(msg, "\n") || !strings.Contains(msg, "c.yaml") {
				t.Fatalf("error is not one line naming the file: %q", msg)
			}
			return
		}
		if err := c.Validate(); err != nil {
			t.Fatalf("accepted a config that does not validate: %v", err)
		}
		b, err := json.Marshal(c)
		if err != nil {
			t.Fatalf("accepted config does not marshal: %v", err)
		}
		d, err := Parse("saved.json", b)
		if err != nil {
			t.Fatalf("saved form does not parse back: %v\n%s", err, b)
		}
		if d.Hash() != c.Hash() || d.Tile != c.Tile {
			t.Fatalf("round trip changed the config: hash %s → %s, tile %d → %d", c.Hash(), d.Hash(), c.Tile, d.Tile)
		}
	})
}
