package series

import (
	"bytes"
	"encoding/csv"
	"strconv"
)

type kind uint8

const (
	kindFloat kind = iota
	kindInt
	kindBool
	kindString
)

// Column is one scalar column of series.csv: its header (the JSON key of
// the measurement) and how to read it from a Row.
type Column struct {
	Key  string
	Unit string
	kind kind
	get  func(*Row) any
}

func (c Column) float(r *Row) *float64 {
	if c.kind != kindFloat {
		return nil
	}
	return c.get(r).(*float64)
}

func fcol(key, unit string, f func(*Row) *float64) Column {
	return Column{Key: key, Unit: unit, kind: kindFloat, get: func(r *Row) any { return f(r) }}
}

func icol(key, unit string, f func(*Row) *int64) Column {
	return Column{Key: key, Unit: unit, kind: kindInt, get: func(r *Row) any { return f(r) }}
}

// Columns is the fixed column order of series.csv after `step` and
// `time_s`. The order is part of the file format: new columns are only
// ever appended.
//
//	voxel_size_m, porosity, saturation_wetting, saturation_nonwetting,
//	area_wn_m2, area_ws_m2, area_ns_m2,
//	specific_area_wn_per_m, specific_area_ws_per_m, specific_area_ns_per_m,
//	curvature_wn_mean_per_m, curvature_wn_median_per_m, ift_n_per_m,
//	capillary_pressure_pa, capillary_pressure_median_pa,
//	contact_angle_mean_deg, contact_angle_median_deg, contact_angle_std_deg,
//	contact_angle_samples, euler_nonwetting, euler_wetting, euler_solid,
//	ganglia_count, ganglion_largest_fraction, nonwetting_percolates,
//	nonwetting_trapped_fraction, connectivity, flow_axis,
//	curvature_wn_mean_se_per_m, capillary_pressure_se_pa,
//	curvature_wn_connected_mean_per_m, curvature_wn_connected_mean_se_per_m,
//	capillary_pressure_connected_pa, capillary_pressure_connected_se_pa,
//	curvature_wn_trapped_mean_per_m, curvature_wn_trapped_mean_se_per_m,
//	capillary_pressure_trapped_pa, capillary_pressure_trapped_se_pa,
//	contact_angle_mean_se_deg, trapped_ganglia_count,
//	trapped_ganglia_pc_p10_pa, trapped_ganglia_pc_median_pa,
//	trapped_ganglia_pc_p90_pa,
//	grey_drift_nonwetting, grey_drift_wetting, grey_drift_solid (grey
//	units), grey_drift_nonwetting_fraction, grey_drift_wetting_fraction,
//	grey_drift_solid_fraction (of the smallest campaign contrast),
//	grey_drift_beyond, front_position_m, front_velocity_m_per_s,
//	pore_filling_drainage_count, pore_filling_imbibition_count,
//	pore_filling_drainage_volume_m3, pore_filling_imbibition_volume_m3,
//	pore_filling_drainage_rate_per_s, pore_filling_imbibition_rate_per_s,
//	contact_angle_thermodynamic_deg, contact_angle_thermodynamic_se_deg,
//	contact_angle_thermodynamic_cos,
//	tracking_one_to_one, tracking_splits, tracking_merges,
//	tracking_appeared, tracking_vanished, tracking_trapped_saturation,
//	tracking_trapped_moved_fraction, tracking_trapped_lifetime_mean_s,
//	mean_curvature_integral_wn_m, specific_mean_curvature_integral_wn_per_m2,
//	specific_euler_nonwetting_per_m3,
//	rig_injected_volume_m3, pore_volumes_injected, rig_rate_m3_per_s,
//	darcy_flux_m_per_s, capillary_number, rig_differential_pressure_pa,
//	rig_pore_pressure_pa, rig_confining_pressure_pa, rig_temperature_k,
//	rig_pore_volume_m3, rig_cross_section_m2 (the experiment log, pkg/riglog),
//	registration_z_voxels, registration_y_voxels, registration_x_voxels,
//	registration_z_m, registration_y_m, registration_x_m,
//	registration_peak, registration_beyond,
//	contact_angle_topological_deg, contact_angle_topological_cos,
//	contact_angle_topological_median_deg, contact_angle_topological_ganglia
//
// The four trapped_ganglia_* columns come from the result's trapped_ganglia_curvature object
// (series.json keeps the whole object); the six pore_filling_* columns from
// the pore_filling object (the events since the previous step, package
// filling); the eight tracking_* columns from the ganglion_tracking object
// (package tracking).
//
// Null values are empty cells; booleans are `true`/`false`.
var Columns = []Column{
	fcol("voxel_size_m", "m", func(r *Row) *float64 { return r.VoxelSize }),
	fcol("porosity", "1", func(r *Row) *float64 { return r.Porosity }),
	fcol("saturation_wetting", "1", func(r *Row) *float64 { return r.SatWetting }),
	fcol("saturation_nonwetting", "1", func(r *Row) *float64 { return r.SatNonwetting }),
	fcol("area_wn_m2", "m2", func(r *Row) *float64 { return r.AreaWN }),
	fcol("area_ws_m2", "m2", func(r *Row) *float64 { return r.AreaWS }),
	fcol("area_ns_m2", "m2", func(r *Row) *float64 { return r.AreaNS }),
	fcol("specific_area_wn_per_m", "1/m", func(r *Row) *float64 { return r.SpecificWN }),
	fcol("specific_area_ws_per_m", "1/m", func(r *Row) *float64 { return r.SpecificWS }),
	fcol("specific_area_ns_per_m", "1/m", func(r *Row) *float64 { return r.SpecificNS }),
	fcol("curvature_wn_mean_per_m", "1/m", func(r *Row) *float64 { return r.CurvMean }),
	fcol("curvature_wn_median_per_m", "1/m", func(r *Row) *float64 { return r.CurvMedian }),
	fcol("ift_n_per_m", "N/m", func(r *Row) *float64 { return r.IFT }),
	fcol("capillary_pressure_pa", "Pa", func(r *Row) *float64 { return r.Pc }),
	fcol("capillary_pressure_median_pa", "Pa", func(r *Row) *float64 { return r.PcMedian }),
	fcol("contact_angle_mean_deg", "deg", func(r *Row) *float64 { return r.AngleMean }),
	fcol("contact_angle_median_deg", "deg", func(r *Row) *float64 { return r.AngleMedian }),
	fcol("contact_angle_std_deg", "deg", func(r *Row) *float64 { return r.AngleStd }),
	icol("contact_angle_samples", "1", func(r *Row) *int64 { return r.AngleSamples }),
	icol("euler_nonwetting", "1", func(r *Row) *int64 { return r.EulerNonwetting }),
	icol("euler_wetting", "1", func(r *Row) *int64 { return r.EulerWetting }),
	icol("euler_solid", "1", func(r *Row) *int64 { return r.EulerSolid }),
	icol("ganglia_count", "1", func(r *Row) *int64 { return r.GangliaCount }),
	fcol("ganglion_largest_fraction", "1", func(r *Row) *float64 { return r.LargestFraction }),
	{Key: "nonwetting_percolates", Unit: "bool", kind: kindBool, get: func(r *Row) any { return r.Percolates }},
	fcol("nonwetting_trapped_fraction", "1", func(r *Row) *float64 { return r.TrappedFraction }),
	icol("connectivity", "1", func(r *Row) *int64 { return r.Connectivity }),
	{Key: "flow_axis", Unit: "", kind: kindString, get: func(r *Row) any { return r.FlowAxis }},
	fcol("curvature_wn_mean_se_per_m", "1/m", func(r *Row) *float64 { return r.CurvMeanSE }),
	fcol("capillary_pressure_se_pa", "Pa", func(r *Row) *float64 { return r.PcSE }),
	fcol("curvature_wn_connected_mean_per_m", "1/m", func(r *Row) *float64 { return r.CurvConnected }),
	fcol("curvature_wn_connected_mean_se_per_m", "1/m", func(r *Row) *float64 { return r.CurvConnectedSE }),
	fcol("capillary_pressure_connected_pa", "Pa", func(r *Row) *float64 { return r.PcConnected }),
	fcol("capillary_pressure_connected_se_pa", "Pa", func(r *Row) *float64 { return r.PcConnectedSE }),
	fcol("curvature_wn_trapped_mean_per_m", "1/m", func(r *Row) *float64 { return r.CurvTrapped }),
	fcol("curvature_wn_trapped_mean_se_per_m", "1/m", func(r *Row) *float64 { return r.CurvTrappedSE }),
	fcol("capillary_pressure_trapped_pa", "Pa", func(r *Row) *float64 { return r.PcTrapped }),
	fcol("capillary_pressure_trapped_se_pa", "Pa", func(r *Row) *float64 { return r.PcTrappedSE }),
	fcol("contact_angle_mean_se_deg", "deg", func(r *Row) *float64 { return r.AngleMeanSE }),
	icol("trapped_ganglia_count", "1", func(r *Row) *int64 { return r.Trapped().Count }),
	fcol("trapped_ganglia_pc_p10_pa", "Pa", func(r *Row) *float64 { return r.Trapped().PcP10 }),
	fcol("trapped_ganglia_pc_median_pa", "Pa", func(r *Row) *float64 { return r.Trapped().PcMedian }),
	fcol("trapped_ganglia_pc_p90_pa", "Pa", func(r *Row) *float64 { return r.Trapped().PcP90 }),
	fcol("grey_drift_nonwetting", "grey", func(r *Row) *float64 { return r.DriftN }),
	fcol("grey_drift_wetting", "grey", func(r *Row) *float64 { return r.DriftW }),
	fcol("grey_drift_solid", "grey", func(r *Row) *float64 { return r.DriftS }),
	fcol("grey_drift_nonwetting_fraction", "1", func(r *Row) *float64 { return r.DriftNFraction }),
	fcol("grey_drift_wetting_fraction", "1", func(r *Row) *float64 { return r.DriftWFraction }),
	fcol("grey_drift_solid_fraction", "1", func(r *Row) *float64 { return r.DriftSFraction }),
	{Key: "grey_drift_beyond", Unit: "bool", kind: kindBool, get: func(r *Row) any { return r.DriftBeyond }},
	fcol("front_position_m", "m", func(r *Row) *float64 { return r.FrontPosition }),
	fcol("front_velocity_m_per_s", "m/s", func(r *Row) *float64 { return r.FrontVelocity }),
	icol("pore_filling_drainage_count", "1", func(r *Row) *int64 { return r.fillingKind(true).Count }),
	icol("pore_filling_imbibition_count", "1", func(r *Row) *int64 { return r.fillingKind(false).Count }),
	fcol("pore_filling_drainage_volume_m3", "m3", func(r *Row) *float64 { return r.fillingKind(true).VolumeM3 }),
	fcol("pore_filling_imbibition_volume_m3", "m3", func(r *Row) *float64 { return r.fillingKind(false).VolumeM3 }),
	fcol("pore_filling_drainage_rate_per_s", "1/s", func(r *Row) *float64 { return r.fillingKind(true).RatePerS }),
	fcol("pore_filling_imbibition_rate_per_s", "1/s", func(r *Row) *float64 { return r.fillingKind(false).RatePerS }),
	fcol("contact_angle_thermodynamic_deg", "deg", func(r *Row) *float64 { return r.AngleThermo }),
	fcol("contact_angle_thermodynamic_se_deg", "deg", func(r *Row) *float64 { return r.AngleThermoSE }),
	fcol("contact_angle_thermodynamic_cos", "1", func(r *Row) *float64 { return r.AngleThermoCos }),
	icol("tracking_one_to_one", "1", func(r *Row) *int64 { return r.Tracking().OneToOne }),
	icol("tracking_splits", "1", func(r *Row) *int64 { return r.Tracking().Splits }),
	icol("tracking_merges", "1", func(r *Row) *int64 { return r.Tracking().Merges }),
	icol("tracking_appeared", "1", func(r *Row) *int64 { return r.Tracking().Appeared }),
	icol("tracking_vanished", "1", func(r *Row) *int64 { return r.Tracking().Vanished }),
	fcol("tracking_trapped_saturation", "1", func(r *Row) *float64 { return r.Tracking().TrappedSaturation }),
	fcol("tracking_trapped_moved_fraction", "1", func(r *Row) *float64 { return r.Tracking().TrappedMovedFraction }),
	fcol("tracking_trapped_lifetime_mean_s", "s", func(r *Row) *float64 { return r.Tracking().LifetimeMeanS }),
	fcol("mean_curvature_integral_wn_m", "m", func(r *Row) *float64 { return r.MeanCurvIntegralWN }),
	fcol("specific_mean_curvature_integral_wn_per_m2", "1/m2", func(r *Row) *float64 { return r.SpecificMeanCurvWN }),
	fcol("specific_euler_nonwetting_per_m3", "1/m3", func(r *Row) *float64 { return r.SpecificEulerNonwetting }),
	fcol("rig_injected_volume_m3", "m3", func(r *Row) *float64 { return r.RigVolume }),
	fcol("pore_volumes_injected", "1", func(r *Row) *float64 { return r.PoreVolumesInjected }),
	fcol("rig_rate_m3_per_s", "m3/s", func(r *Row) *float64 { return r.RigRate }),
	fcol("darcy_flux_m_per_s", "m/s", func(r *Row) *float64 { return r.DarcyFlux }),
	fcol("capillary_number", "1", func(r *Row) *float64 { return r.CapillaryNumber }),
	fcol("rig_differential_pressure_pa", "Pa", func(r *Row) *float64 { return r.RigDiffPressure }),
	fcol("rig_pore_pressure_pa", "Pa", func(r *Row) *float64 { return r.RigPorePressure }),
	fcol("rig_confining_pressure_pa", "Pa", func(r *Row) *float64 { return r.RigConfiningPressure }),
	fcol("rig_temperature_k", "K", func(r *Row) *float64 { return r.RigTemperature }),
	fcol("rig_pore_volume_m3", "m3", func(r *Row) *float64 { return r.RigPoreVolume }),
	fcol("rig_cross_section_m2", "m2", func(r *Row) *float64 { return r.RigArea }),
	fcol("registration_z_voxels", "voxel", func(r *Row) *float64 { return r.RegZ }),
	fcol("registration_y_voxels", "voxel", func(r *Row) *float64 { return r.RegY }),
	fcol("registration_x_voxels", "voxel", func(r *Row) *float64 { return r.RegX }),
	fcol("registration_z_m", "m", func(r *Row) *float64 { return r.RegZM }),
	fcol("registration_y_m", "m", func(r *Row) *float64 { return r.RegYM }),
	fcol("registration_x_m", "m", func(r *Row) *float64 { return r.RegXM }),
	fcol("registration_peak", "1", func(r *Row) *float64 { return r.RegPeak }),
	{Key: "registration_beyond", Unit: "bool", kind: kindBool, get: func(r *Row) any { return r.RegBeyond }},
	fcol("contact_angle_topological_deg", "deg", func(r *Row) *float64 { return r.AngleTopo }),
	fcol("contact_angle_topological_cos", "1", func(r *Row) *float64 { return r.AngleTopoCos }),
	fcol("contact_angle_topological_median_deg", "deg", func(r *Row) *float64 { return r.AngleTopoMedian }),
	icol("contact_angle_topological_ganglia", "1", func(r *Row) *int64 { return r.AngleTopoCount }),
}

// Cell returns the CSV text of column c in row r ("" for null).
func (c Column) Cell(r *Row) string {
	switch v := c.get(r).(type) {
	case *float64:
		if v != nil {
			return strconv.FormatFloat(*v, 'g', -1, 64)
		}
	case *int64:
		if v != nil {
			return strconv.FormatInt(*v, 10)
		}
	case *bool:
		if v != nil {
			return strconv.FormatBool(*v)
		}
	case *string:
		if v != nil {
			return *v
		}
	}
	return ""
}

// Header returns the CSV header: step, time_s, then Columns.
func Header() []string {
	h := []string{"step", "time_s"}
	for _, c := range Columns {
		h = append(h, c.Key)
	}
	return h
}

// EncodeCSV writes rows as series.csv (RFC 4180, header line first).
func EncodeCSV(rows []Row) ([]byte, error) {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	if err := w.Write(Header()); err != nil {
		return nil, err
	}
	rec := make([]string, 0, 2+len(Columns))
	for i := range rows {
		r := &rows[i]
		if err := r.checkFinite(); err != nil {
			return nil, err
		}
		rec = append(rec[:0], r.Step, strconv.FormatFloat(r.Time, 'g', -1, 64))
		for _, c := range Columns {
			rec = append(rec, c.Cell(r))
		}
		if err := w.Write(rec); err != nil {
			return nil, err
		}
	}
	w.Flush()
	return buf.Bytes(), w.Error()
}
