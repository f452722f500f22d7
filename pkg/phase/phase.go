// Package phase names the three phases of a segmented pore-scale image and
// the label codes that stand for them.
//
// Conventions (science.md): solid, wetting (w, usually brine) and
// nonwetting (n, oil, gas or CO2). Codes default to 0, 1, 2. Voxels outside
// the sample (beyond the core's cylinder, in the cell wall or air) carry the
// code Outside; they are excluded from porosity and saturation and act as
// solid wall for interfaces, curvature and contact angles.
package phase

import "fmt"

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
// that are none of the codes are treated as solid too (unknown material).
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
