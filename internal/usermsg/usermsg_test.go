package usermsg

import (
	"os"
	"path/filepath"
	"slices"
	"testing"
)

func TestClean(t *testing.T) {
	for _, c := range []struct {
		msg, lead string
		keep      []string
		want      string
	}{
		// Observed messages of `sluice measure` (testdata/bad).
		{"volio: truncated.raw: truncated raw volume: got 2000 of 4096 bytes", "measure", []string{"truncated.raw"},
			"truncated.raw: truncated raw volume: got 2000 of 4096 bytes"},
		{"measure: config-thresholds-order.yaml: campaign: segment: fixed thresholds [30000 18000] must be finite and ascending", "measure", nil,
			"measure: config-thresholds-order.yaml: fixed thresholds [30000 18000] must be finite and ascending"},
		// The command's own name is kept, a package of that name after it is not.
		{"measure: measure: tile 3: no voxels", "measure", nil, "measure: tile 3: no voxels"},
		{"worker: queue: NATS connection closed for good: nats: Authorization Violation", "worker", nil,
			"worker: NATS connection closed for good: nats: Authorization Violation"},
		// A file the user named like a package stays.
		{"volio: store: truncated raw volume", "measure", []string{"store"}, "store: truncated raw volume"},
		{"ingest: volio: segment: truncated raw volume", "ingest", []string{"segment"}, "ingest: segment: truncated raw volume"},
		// Only whole words opening a part: a path ending in a package
		// name, a dotted config key and a word inside a sentence stay.
		{"reprocess: no store at data/store: use --data", "reprocess", nil, "reprocess: no store at data/store: use --data"},
		{"config: c.yaml line 2: unknown key segment.treshold", "measure", nil, "config: c.yaml line 2: unknown key segment.treshold"},
		{"the scan: store it", "", nil, "the scan: store it"},
		// A short argument does not protect a longer word containing it.
		{"store: s3 bucket b: access denied", "", []string{"o"}, "s3 bucket b: access denied"},
		// Line breaks are flattened.
		{"volio: a.tif:\n  bad", "", nil, "a.tif: bad"},
	} {
		if got := Clean(c.msg, c.lead, c.keep...); got != c.want {
			t.Errorf("Clean(%q, %q, %q)\n got %q\nwant %q", c.msg, c.lead, c.keep, got, c.want)
		}
	}
}

// TestPackagesComplete: every package directory of the module is in
// Packages, so that a new package's prefix is dropped too.
func TestPackagesComplete(t *testing.T) {
	for _, dir := range []string{"../../pkg", "../../services"} {
		ents, err := os.ReadDir(dir)
		if err != nil {
			t.Fatal(err)
		}
		for _, e := range ents {
			if !e.IsDir() || e.Name() == "sluice" {
				continue // sluice is the command; "sluice: " opens every line on purpose
			}
			if !slices.Contains(Packages, e.Name()) {
				t.Errorf("%s is not in Packages", filepath.Join(dir, e.Name()))
			}
		}
	}
}
