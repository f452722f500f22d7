// Package phase names the three phases of a segmented pore-scale image and
// the label codes that stand for them.
//
// Conventions (science.md): solid, wetting (w, usually brine) and
// nonwetting (n, oil, gas or CO2). Codes default to 0, 1, 2. Voxels outside
// the sample (beyond the core's cylinder, in the cell wall or air) carry the
// code Outside; they are excluded from porosity and saturation and act as
// solid wall for interfaces, curvature and contact angles.
package phase

import (
	"fmt"
	"strconv"
	"strings"
)

// Outside marks voxels outside the sample.
const Outside uint8 = 255

// Codes maps the phases to label values.
type Codes struct {
	Solid      uint8 `json:"solid" yaml:"solid"`
	Wetting    uint8 `json:"wetting" yaml:"wetting"`
	Nonwetting uint8 `json:"nonwetting" yaml:"nonwetting"`
}

// Default returns the codes 0 = solid, 1 = wetting, 2 = nonwetting.
func Default() Codes { return Codes{Solid: 0, Wetting: 1, Nonwetting: 2} }

// Validate reports codes that collide with each other or with Outside.
func (c Codes) Validate() error {
	if c.Solid == c.Wetting || c.Solid == c.Nonwetting || c.Wetting == c.Nonwetting {
		return fmt.Errorf("phase: codes must differ (solid %d, wetting %d, nonwetting %d)", c.Solid, c.Wetting, c.Nonwetting)
	}
	if c.Solid == Outside || c.Wetting == Outside || c.Nonwetting == Outside {
		return fmt.Errorf("phase: code %d is reserved for voxels outside the sample", Outside)
	}
	return nil
}

// Set is a membership table over label values: s[v] is true when label v
// belongs to the set.
type Set [256]bool

// Of returns the set holding exactly the given labels.
func Of(labels ...uint8) *Set {
	var s Set
	for _, l := range labels {
		s[l] = true
	}
	return &s
}

// Sets returns the membership tables of the three phases. The solid set
// holds Outside as well, so the sample boundary behaves as a wall; labels
// that are none of the codes fall in it too, which is why labels from
// outside sluice are checked with Check first: an unknown code is more
// likely a different coding than unknown material.
func (c Codes) Sets() (solid, wetting, nonwetting *Set) {
	solid, wetting, nonwetting = new(Set), new(Set), new(Set)
	for v := 0; v < 256; v++ {
		switch uint8(v) {
		case c.Wetting:
			wetting[v] = true
		case c.Nonwetting:
			nonwetting[v] = true
		default:
			solid[v] = true
		}
	}
	return solid, wetting, nonwetting
}

// UnknownCodeError reports label values that are none of the phase codes
// and not Outside: Code is the lowest of them, Count its number of voxels,
// Others the further unknown values.
type UnknownCodeError struct {
	Code   uint8
	Count  int64
	Others []uint8
	Codes  Codes
}

// Reason says what is wrong without the package prefix, for messages that
// name the file first.
func (e *UnknownCodeError) Reason() string {
	s := fmt.Sprintf("label code %d (%s voxels) is none of solid %d, wetting %d, nonwetting %d, outside %d",
		e.Code, groupThousands(e.Count), e.Codes.Solid, e.Codes.Wetting, e.Codes.Nonwetting, Outside)
	if len(e.Others) > 0 {
		o := make([]string, len(e.Others))
		for i, v := range e.Others {
			o[i] = strconv.Itoa(int(v))
		}
		s += fmt.Sprintf(" (and %d more codes that are none: %s)", len(e.Others), strings.Join(o, ", "))
	}
	return s
}

func (e *UnknownCodeError) Error() string { return "phase: " + e.Reason() }

// Check refuses labels holding a value that is none of the three codes
// and not Outside, with an *UnknownCodeError. A label volume made with
// other codes would otherwise measure as if its unknown code were solid
// (Sets), a wrong porosity and saturation without a word.
func (c Codes) Check(labels []uint8) error {
	var n [256]int64
	for _, v := range labels {
		n[v]++
	}
	var e *UnknownCodeError
	for v := 0; v < 256; v++ {
		if n[v] == 0 {
			continue
		}
		switch uint8(v) {
		case c.Solid, c.Wetting, c.Nonwetting, Outside:
			continue
		}
		if e == nil {
			e = &UnknownCodeError{Code: uint8(v), Count: n[v], Codes: c}
		} else {
			e.Others = append(e.Others, uint8(v))
		}
	}
	if e == nil {
		return nil
	}
	return e
}

// groupThousands writes n with a space between groups of three digits
// (41 234), the SI way of making counts readable.
func groupThousands(n int64) string {
	s := strconv.FormatInt(n, 10)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	for i := len(s) - 3; i > 0; i -= 3 {
		s = s[:i] + " " + s[i:]
	}
	if neg {
		s = "-" + s
	}
	return s
}
