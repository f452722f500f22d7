package scan

import (
	"fmt"

	"sluice/pkg/measure"
	"sluice/pkg/phase"
	"sluice/pkg/register"
	"sluice/pkg/volume"
)

// Registered returns src put onto the reference grid by the shift s of a
// step whose scan covers whole (register.Resample): each box is resampled
// from the box of src it needs (register.SourceBox: the box moved by s and
// widened by the interpolation kernel's reach along a fractional axis). The result does not depend on
// how the scan is cut into boxes. A zero s returns src.
func Registered(src Source, whole volume.Box, s register.Shift) Source {
	if s.IsZero() {
		return src
	}
	return func(box volume.Box) (volume.Any, error) {
		g, err := src(register.SourceBox(whole, box, s))
		if err != nil {
			return nil, err
		}
		return register.Resample(g, whole, box, s)
	}
}

// RegisteredMask returns the solid mask source of a step registered by s:
// the reference mask with every voxel that the shifted scan did not see
// (register.Covered) set to phase.Outside, so it is not measured. A zero s
// returns solid.
func RegisteredMask(solid Source, whole volume.Box, s register.Shift) Source {
	if s.IsZero() || solid == nil {
		return solid
	}
	return func(box volume.Box) (volume.Any, error) {
		m, err := solid(box)
		if err != nil {
			return nil, err
		}
		l, ok := m.(*volume.Labels)
		if !ok {
			return nil, fmt.Errorf("scan: solid mask must be uint8 labels, not %s", m.DType())
		}
		l = l.Clone() // a memory source may hand out its own volume
		register.MarkUncovered(l, whole, s, phase.Outside)
		return l, nil
	}
}

// RegisterWhole returns a step held in memory put onto the reference grid
// by s, and the reference mask with the voxels the shifted scan did not see
// set to phase.Outside (nil stays nil): what Registered and RegisteredMask
// give tile by tile, at once.
func RegisterWhole(grey volume.Any, solid *volume.Labels, s register.Shift) (volume.Any, *volume.Labels, error) {
	if s.IsZero() {
		return grey, solid, nil
	}
	g, err := register.Resample(grey, grey.Bounds(), grey.Bounds(), s)
	if err != nil {
		return nil, nil, err
	}
	if solid != nil {
		solid = solid.Clone()
		register.MarkUncovered(solid, grey.Bounds(), s, phase.Outside)
	}
	return g, solid, nil
}

// SetRegistration copies a step's registration into its result: the
// estimated shift in voxels and metres (voxel edge vs), the peak and
// whether it is beyond the limit. Nothing when r is nil.
func SetRegistration(res *measure.Result, r *register.Result, vs float64) {
	if r == nil {
		return
	}
	p := func(v float64) *float64 { return &v }
	s := r.Shift
	res.RegistrationZ, res.RegistrationY, res.RegistrationX = p(s[0]), p(s[1]), p(s[2])
	if vs > 0 {
		res.RegistrationZM, res.RegistrationYM, res.RegistrationXM = p(s[0]*vs), p(s[1]*vs), p(s[2]*vs)
	}
	res.RegistrationPeak = p(r.Peak)
	b := r.Beyond
	res.RegistrationBeyond = &b
}
