package web

import (
	"regexp"
	"strings"
	"testing"

	"sluice/pkg/plots"
)

// TestPageUnitsMatchFigures: the live page writes each axis unit as the
// report's figures do (pkg/plots), so the specific interfacial area reads
// "mm²/mm³ of bulk volume" in both places (issue 13: units written the same
// way on the page and in PNG/SVG; the area is per bulk volume), and no
// label of the page still says the bare "1/mm" it used for a_wn.
func TestPageUnitsMatchFigures(t *testing.T) {
	b, err := static.ReadFile("static/app.js")
	if err != nil {
		t.Fatal(err)
	}
	js := string(b)
	m := regexp.MustCompile(`(?m)^const U = \{(.*)\};$`).FindStringSubmatch(js)
	if m == nil {
		t.Fatal("app.js has no line `const U = { … };` with the axis units")
	}
	units := map[string]string{}
	for _, kv := range regexp.MustCompile(`(\w+): "([^"]*)"`).FindAllStringSubmatch(m[1], -1) {
		units[kv[1]] = kv[2]
	}
	for key, want := range map[string]string{"none": plots.UnitDimensionless, "pressure": plots.UnitPressure,
		"area": plots.UnitSpecificArea, "angleDensity": plots.UnitAngleDensity} {
		if units[key] != want {
			t.Errorf("page unit %s = %q, figures write %q", key, units[key], want)
		}
	}
	if !strings.Contains(js, "`a_wn (${U.area})`") {
		t.Error("the a_wn axes do not use the page's area unit")
	}
	if strings.Contains(js, "(1/mm)") {
		t.Error(`app.js still labels an axis "(1/mm)"`)
	}
	html, _ := static.ReadFile("static/index.html")
	if !strings.Contains(string(html), "Specific interfacial area per bulk volume") {
		t.Error("index.html: the a_wn figure does not say per bulk volume")
	}
}
