package riglog

import (
	"encoding/json"
	"math"

	"sluice/pkg/series"
)

// Geometry is what the derived quantities need from the images or the
// configuration: the pore volume (m³) and the cross-section normal to the
// flow (m²), with where each came from. A zero value is unknown.
type Geometry struct {
	PoreVolume, Area             float64
	PoreVolumeFrom, AreaFrom     string
	FirstStep                    string
	Porosity, BulkVolume, Length float64
}

// GeometryOf returns the pore volume and cross-section of the campaign
// (package doc, "Derived quantities"): from cfg where given, else from
// the first row (rows sorted by time) that has a porosity, a bulk volume
// and the scan's shape.
func GeometryOf(rows []series.Row, cfg Config) Geometry {
	g := Geometry{PoreVolume: cfg.PoreVolumeM3, Area: cfg.AreaM2}
	if g.PoreVolume > 0 {
		g.PoreVolumeFrom = "configuration (rig_log.pore_volume_m3)"
	}
	if g.Area > 0 {
		g.AreaFrom = "configuration (rig_log.area_m2)"
	}
	for i := range rows {
		r := &rows[i]
		bulk, length, ok := imaged(r)
		if !ok || r.Porosity == nil {
			continue
		}
		g.FirstStep, g.Porosity, g.BulkVolume, g.Length = r.Step, *r.Porosity, bulk, length
		if g.PoreVolume == 0 {
			if cfg.SampleVolumeM3 > 0 {
				g.PoreVolume = *r.Porosity * cfg.SampleVolumeM3
				g.PoreVolumeFrom = "porosity of step " + r.Step + " × rig_log.sample_volume_m3"
			} else {
				g.PoreVolume = *r.Porosity * bulk
				g.PoreVolumeFrom = "porosity × imaged bulk volume of step " + r.Step
			}
		}
		if g.Area == 0 && length > 0 {
			g.Area = bulk / length
			g.AreaFrom = "imaged bulk volume / scan length along the flow axis, step " + r.Step
		}
		break
	}
	return g
}

// imaged returns the bulk volume of the sample in a row's step (m³) and
// the scan's length along the flow axis (m), from the keys bulk_volume_m3,
// shape_zyx, voxel_size_m and flow_axis.
func imaged(r *series.Row) (bulk, length float64, ok bool) {
	b, okb := r.Extra["bulk_volume_m3"]
	s, oks := r.Extra["shape_zyx"]
	if !okb || !oks || r.VoxelSize == nil {
		return 0, 0, false
	}
	var shape [3]int
	if json.Unmarshal(b, &bulk) != nil || json.Unmarshal(s, &shape) != nil || !(bulk > 0) {
		return 0, 0, false
	}
	axis := 0
	if r.FlowAxis != nil {
		axis = map[string]int{"z": 0, "y": 1, "x": 2}[*r.FlowAxis]
	}
	return bulk, float64(shape[axis]) * *r.VoxelSize, true
}

// Apply sets the experiment-log columns of every row (rows sorted by
// time) from the log at the row's time: injected volume, pore volumes
// injected, rate, Darcy flux, capillary number, pressures and temperature,
// and the pore volume and cross-section used. Values stored before are
// replaced, so a log that grew since gives every row its current value;
// a nil log clears them. It returns the geometry used.
func Apply(rows []series.Row, l *Log, cfg Config) Geometry {
	g := GeometryOf(rows, cfg)
	method := cfg.InterpolationOrDefault()
	for i := range rows {
		r := &rows[i]
		r.RigVolume, r.PoreVolumesInjected, r.RigRate, r.DarcyFlux, r.CapillaryNumber = nil, nil, nil, nil, nil
		r.RigDiffPressure, r.RigPorePressure, r.RigConfiningPressure, r.RigTemperature = nil, nil, nil, nil
		r.RigPoreVolume, r.RigArea = nil, nil
		if l == nil {
			continue
		}
		s := l.At(r.Time, method)
		r.RigVolume = num(s.Volume)
		r.RigRate = num(s.Rate)
		r.RigDiffPressure, r.RigPorePressure = num(s.DiffPress), num(s.PorePress)
		r.RigConfiningPressure, r.RigTemperature = num(s.ConfinPress), num(s.Temperature)
		if g.PoreVolume > 0 {
			r.RigPoreVolume = num(g.PoreVolume)
			r.PoreVolumesInjected = num(s.Volume / g.PoreVolume)
		}
		if g.Area > 0 {
			r.RigArea = num(g.Area)
			v := s.Rate / g.Area
			r.DarcyFlux = num(v)
			if cfg.ViscosityPaS > 0 && r.IFT != nil && *r.IFT > 0 {
				r.CapillaryNumber = num(cfg.ViscosityPaS * v / *r.IFT)
			}
		}
	}
	return g
}

func num(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}
