package layout

import (
	"errors"
	"path"
	"regexp"
	"strings"
	"testing"
)

// nameRE is the name rule of architecture.md, written as the regular
// expression it states; ValidName must agree with it on every input.
var nameRE = regexp.MustCompile(`^[a-z0-9][a-z0-9._-]{0,63}$`)

func TestValidNameAgainstRegexp(t *testing.T) {
	cases := []string{"", "a", "0", "c1", "run-2024.05_a", ".", "..", ".a", "-a", "_a", "A", "aB", "a/b",
		"a b", "a..b", "a.", strings.Repeat("a", 64), strings.Repeat("a", 65), "ä", "a\x00"}
	for _, s := range cases {
		if got, want := ValidName(s), nameRE.MatchString(s); got != want {
			t.Errorf("ValidName(%q) = %v, regexp says %v", s, got, want)
		}
	}
	if err := CheckName("campaign", "../x"); !errors.Is(err, ErrName) || !strings.Contains(err.Error(), "campaign") {
		t.Errorf("CheckName error = %v", err)
	}
}

func FuzzValidName(f *testing.F) {
	for _, s := range []string{"a", "..", "a/b", "0001", "x.y-z_w"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		if ValidName(s) != nameRE.MatchString(s) {
			t.Fatalf("ValidName(%q) = %v disagrees with the regexp", s, ValidName(s))
		}
		if ValidName(s) {
			// A valid name is one clean path segment.
			if path.Clean(s) != s || strings.Contains(s, "/") || s == "." || s == ".." {
				t.Fatalf("valid name %q is not a single clean path segment", s)
			}
		}
	})
}

func TestKeys(t *testing.T) {
	st, err := NewStep("co2-brine.7", "0042")
	if err != nil {
		t.Fatal(err)
	}
	c := st.Campaign()
	tile, err := st.TileResult(17, "9f3a")
	if err != nil {
		t.Fatal(err)
	}
	// Source: storage layout in architecture.md (contract).
	for got, want := range map[string]string{
		c.Config():            "campaigns/co2-brine.7/campaign.json",
		c.Reference():         "campaigns/co2-brine.7/reference/",
		c.SeriesCSV():         "campaigns/co2-brine.7/series.csv",
		c.SeriesJSON():        "campaigns/co2-brine.7/series.json",
		st.Volume():           "campaigns/co2-brine.7/steps/0042/volume.zarr/",
		st.Labels():           "campaigns/co2-brine.7/steps/0042/labels.zarr/",
		st.Manifest():         "campaigns/co2-brine.7/steps/0042/manifest.json",
		st.Result():           "campaigns/co2-brine.7/steps/0042/result.json",
		tile:                  "campaigns/co2-brine.7/steps/0042/tiles/9f3a/17.json",
		st.TileID(17, "9f3a"): "co2-brine.7/0042/17/9f3a",
	} {
		if got != want {
			t.Errorf("got %s, want %s", got, want)
		}
	}
	for _, key := range []string{c.Config(), st.Manifest(), tile, st.Volume() + "0/0/0"} {
		cn, sn, ok := ParseKey(key)
		wantStep := "0042"
		if key == c.Config() {
			wantStep = ""
		}
		if !ok || cn != "co2-brine.7" || sn != wantStep {
			t.Errorf("ParseKey(%s) = %q, %q, %v", key, cn, sn, ok)
		}
	}
	for _, key := range []string{"other/x", "campaigns/../x", "campaigns/c/steps/../x", "campaigns/C/x"} {
		if _, _, ok := ParseKey(key); ok {
			t.Errorf("ParseKey(%s) accepted", key)
		}
	}
	for _, bad := range [][2]string{{"", "1"}, {"c", ""}, {"c", ".."}, {"../c", "1"}, {"c", "a/b"}, {"C", "1"}} {
		if _, err := NewStep(bad[0], bad[1]); !errors.Is(err, ErrName) {
			t.Errorf("NewStep(%q, %q): err = %v", bad[0], bad[1], err)
		}
	}
	if _, err := st.TileResult(-1, "ab"); err == nil {
		t.Error("negative tile accepted")
	}
	for _, h := range []string{"", "AB", "a/b", strings.Repeat("a", 65)} {
		if _, err := st.TileResult(0, h); err == nil {
			t.Errorf("parameter hash %q accepted", h)
		}
	}
	if _, err := (Campaign{}).Step("1"); err == nil {
		t.Error("step of a zero campaign accepted")
	}
}
