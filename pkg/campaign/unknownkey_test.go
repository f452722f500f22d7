package campaign

import (
	"strings"
	"testing"

	"gopkg.in/yaml.v3"
)

// TestUnknownKeyInUsersWords: a misspelt key is named by its dotted path
// in the file, with its line and the key meant, not by a Go type.
func TestUnknownKeyInUsersWords(t *testing.T) {
	for _, c := range []struct{ doc, want string }{
		{"segment:\n  treshold: otsu\n", "config: camp.yaml line 2: unknown key segment.treshold (did you mean segment.threshold?)"},
		{"tile: 64\nmeasure:\n  conectivity: 6\n", "config: camp.yaml line 3: unknown key measure.conectivity (did you mean measure.connectivity?)"},
		{"voxelsize: 4um\n", "config: camp.yaml line 1: unknown key voxelsize (did you mean voxel_size?)"},
		{"segment:\n  bogus_thing: 1\n", "config: camp.yaml line 2: unknown key segment.bogus_thing"},
	} {
		_, err := Parse("camp.yaml", []byte(c.doc))
		if err == nil || err.Error() != c.want {
			t.Errorf("%q:\n got %v\nwant %s", c.doc, err, c.want)
		}
	}
	_, err := Default().Set([]string{"segment.treshold=fixed"})
	if want := "config: --set: unknown key segment.treshold (did you mean segment.threshold?)"; err == nil || err.Error() != want {
		t.Errorf("--set segment.treshold: got %v, want %s", err, want)
	}
	// Every key of the defaults, written out, is known: the walk names
	// keys the way the decoder does.
	if _, err := Parse("defaults", []byte(mustYAML(t, Default()))); err != nil {
		t.Errorf("the defaults written as YAML are refused: %v", err)
	}
}

func mustYAML(t *testing.T, c Config) string {
	t.Helper()
	var b strings.Builder
	enc := yaml.NewEncoder(&b)
	if err := enc.Encode(c); err != nil {
		t.Fatal(err)
	}
	return b.String()
}
