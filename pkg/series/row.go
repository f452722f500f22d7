// Package series keeps a campaign's time series: one row per step of a
// displacement experiment, holding the step name, its acquisition time and
// the scalar results of that step's measurement (the keys of
// `sluice measure --json`, see pkg/measure.Result).
//
// The series lives in two files next to each other (architecture.md,
// storage layout):
//
//	campaigns/<campaign>/series.json   JSON array of rows, every key, histograms included
//	campaigns/<campaign>/series.csv    the scalar columns of Columns, in that order
//
// Rows are upserted: a step seen again replaces its row, so reprocessing or a
// redelivered aggregation never adds a second row for one step. Rows are kept
// sorted by time, then by step name. Files are written through a Store whose
// Put must replace the whole object atomically (an S3 PUT does; Dir writes a
// temporary file and renames it), so a reader never sees half a series.
//
// The package decodes the measurement keys it knows into Row; keys it does
// not know (minkowski, clusters, later additions) are kept verbatim in
// Row.Extra and written back unchanged, so an upsert never loses data.
package series

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"sort"
)

// Row is one step of a campaign's series. Pointer fields are null in JSON
// when the quantity could not be computed (no interface, no σ, ...).
// Units are SI as in the measurement result.
type Row struct {
	Step string  `json:"step"`
	Time float64 `json:"time_s"`

	VoxelSize       *float64 `json:"voxel_size_m"`
	Porosity        *float64 `json:"porosity"`
	SatWetting      *float64 `json:"saturation_wetting"`
	SatNonwetting   *float64 `json:"saturation_nonwetting"`
	AreaWN          *float64 `json:"area_wn_m2"`
	AreaWS          *float64 `json:"area_ws_m2"`
	AreaNS          *float64 `json:"area_ns_m2"`
	SpecificWN      *float64 `json:"specific_area_wn_per_m"`
	SpecificWS      *float64 `json:"specific_area_ws_per_m"`
	SpecificNS      *float64 `json:"specific_area_ns_per_m"`
	CurvMean        *float64 `json:"curvature_wn_mean_per_m"`
	CurvMedian      *float64 `json:"curvature_wn_median_per_m"`
	IFT             *float64 `json:"ift_n_per_m"`
	Pc              *float64 `json:"capillary_pressure_pa"`
	PcMedian        *float64 `json:"capillary_pressure_median_pa"`
	AngleMean       *float64 `json:"contact_angle_mean_deg"`
	AngleMedian     *float64 `json:"contact_angle_median_deg"`
	AngleStd        *float64 `json:"contact_angle_std_deg"`
	AngleSamples    *int64   `json:"contact_angle_samples"`
	EulerNonwetting *int64   `json:"euler_nonwetting"`
	EulerWetting    *int64   `json:"euler_wetting"`
	EulerSolid      *int64   `json:"euler_solid"`
	GangliaCount    *int64   `json:"ganglia_count"`
	LargestFraction *float64 `json:"ganglion_largest_fraction"`
	Percolates      *bool    `json:"nonwetting_percolates"`
	TrappedFraction *float64 `json:"nonwetting_trapped_fraction"`
	Connectivity    *int64   `json:"connectivity"`
	FlowAxis        *string  `json:"flow_axis"`
	// Standard errors (package blockse) and the connected and trapped
	// interfaces apart (pkg/measure.Result).
	CurvMeanSE      *float64 `json:"curvature_wn_mean_se_per_m"`
	PcSE            *float64 `json:"capillary_pressure_se_pa"`
	CurvConnected   *float64 `json:"curvature_wn_connected_mean_per_m"`
	CurvConnectedSE *float64 `json:"curvature_wn_connected_mean_se_per_m"`
	PcConnected     *float64 `json:"capillary_pressure_connected_pa"`
	PcConnectedSE   *float64 `json:"capillary_pressure_connected_se_pa"`
	CurvTrapped     *float64 `json:"curvature_wn_trapped_mean_per_m"`
	CurvTrappedSE   *float64 `json:"curvature_wn_trapped_mean_se_per_m"`
	PcTrapped       *float64 `json:"capillary_pressure_trapped_pa"`
	PcTrappedSE     *float64 `json:"capillary_pressure_trapped_se_pa"`
	AngleMeanSE     *float64 `json:"contact_angle_mean_se_deg"`
	// Grey-level drift (threshold scope campaign; null otherwise).
	DriftN         *float64 `json:"grey_drift_nonwetting"`
	DriftW         *float64 `json:"grey_drift_wetting"`
	DriftS         *float64 `json:"grey_drift_solid"`
	DriftNFraction *float64 `json:"grey_drift_nonwetting_fraction"`
	DriftWFraction *float64 `json:"grey_drift_wetting_fraction"`
	DriftSFraction *float64 `json:"grey_drift_solid_fraction"`
	DriftBeyond    *bool    `json:"grey_drift_beyond"`
	// Drift registration to the reference scan (reference-scan mode;
	// null otherwise): shift in voxels and metres, peak, beyond the limit.
	RegZ      *float64 `json:"registration_z_voxels"`
	RegY      *float64 `json:"registration_y_voxels"`
	RegX      *float64 `json:"registration_x_voxels"`
	RegZM     *float64 `json:"registration_z_m"`
	RegYM     *float64 `json:"registration_y_m"`
	RegXM     *float64 `json:"registration_x_m"`
	RegPeak   *float64 `json:"registration_peak"`
	RegBeyond *bool    `json:"registration_beyond"`
	// FrontPosition is the displacement front's distance from the inlet
	// face (m, pkg/measure.Result); FrontVelocity its rate of change from
	// the previous row (m/s), derived by Sort (see FrontVelocities).
	FrontPosition *float64 `json:"front_position_m"`
	FrontVelocity *float64 `json:"front_velocity_m_per_s"`
	// AngleThermo is the thermodynamic contact angle through the wetting
	// phase from the change since the previous row (degrees), AngleThermoSE
	// its standard error from that of the connected Pc, AngleThermoCos its
	// cosine (kept when |cos| > 1 leaves no angle); derived by Sort (see
	// ThermodynamicAngles).
	AngleThermo    *float64 `json:"contact_angle_thermodynamic_deg"`
	AngleThermoSE  *float64 `json:"contact_angle_thermodynamic_se_deg"`
	AngleThermoCos *float64 `json:"contact_angle_thermodynamic_cos"`
	// Geometric state (pkg/measure geometric.go; McClure et al. 2018, Phys.
	// Rev. Fluids 3:084306): J_wn = ∫H dA over the w–n interface (m), its
	// density and χ_n's density per bulk volume.
	MeanCurvIntegralWN      *float64 `json:"mean_curvature_integral_wn_m"`
	SpecificMeanCurvWN      *float64 `json:"specific_mean_curvature_integral_wn_per_m2"`
	SpecificEulerNonwetting *float64 `json:"specific_euler_nonwetting_per_m3"`
	// Topological contact angle of the trapped ganglia through the wetting
	// phase (pkg/measure topoangle.go; Gauss–Bonnet, after Sun et al. 2020,
	// Geophys. Res. Lett. 47:e2019GL086151): from the summed turnings, its
	// cosine, the median of the ganglia's own angles and how many ganglia
	// gave one.
	AngleTopo       *float64 `json:"contact_angle_topological_deg"`
	AngleTopoCos    *float64 `json:"contact_angle_topological_cos"`
	AngleTopoMedian *float64 `json:"contact_angle_topological_median_deg"`
	AngleTopoCount  *int64   `json:"contact_angle_topological_ganglia"`
	// Experiment log at the step's time (pkg/riglog, which defines them):
	// injected volume since the log's first record (m³), pore volumes
	// injected, flow rate (m³/s), Darcy flux q/A (m/s), capillary number
	// μv/σ, the rig's differential, pore and confining pressure (Pa) and
	// temperature (K), and the pore volume (m³) and cross-section (m²)
	// used. Null without a rig log or outside its time span.
	RigVolume            *float64 `json:"rig_injected_volume_m3"`
	PoreVolumesInjected  *float64 `json:"pore_volumes_injected"`
	RigRate              *float64 `json:"rig_rate_m3_per_s"`
	DarcyFlux            *float64 `json:"darcy_flux_m_per_s"`
	CapillaryNumber      *float64 `json:"capillary_number"`
	RigDiffPressure      *float64 `json:"rig_differential_pressure_pa"`
	RigPorePressure      *float64 `json:"rig_pore_pressure_pa"`
	RigConfiningPressure *float64 `json:"rig_confining_pressure_pa"`
	RigTemperature       *float64 `json:"rig_temperature_k"`
	RigPoreVolume        *float64 `json:"rig_pore_volume_m3"`
	RigArea              *float64 `json:"rig_cross_section_m2"`
	// AngleHist counts contact-angle samples in 1° bins through the wetting
	// phase: AngleHist[i] holds angles in [i, i+1) degrees (180 bins). It
	// appears in series.json only, never in the CSV.
	AngleHist []int64 `json:"contact_angle_histogram"`

	// Extra holds the keys of the row this package does not decode, verbatim.
	Extra map[string]json.RawMessage `json:"-"`
}

// rowFields is Row without its methods, so encoding/json can do the work.
type rowFields Row

// known is the set of JSON keys decoded into Row's fields.
var known = func() map[string]bool {
	m := map[string]bool{}
	for _, c := range Columns {
		m[c.Key] = true
	}
	m["contact_angle_histogram"] = true
	// step and time_s are fields too; were they missing here, a row read
	// back from series.json would carry them twice (field and Extra).
	m["step"], m["time_s"] = true, true
	return m
}()

// UnmarshalJSON decodes the known keys into fields and keeps the rest in
// Extra.
func (r *Row) UnmarshalJSON(b []byte) error {
	var f rowFields
	if err := json.Unmarshal(b, &f); err != nil {
		return err
	}
	var all map[string]json.RawMessage
	if err := json.Unmarshal(b, &all); err != nil {
		return err
	}
	for k := range all {
		if known[k] {
			delete(all, k)
		}
	}
	if len(all) == 0 {
		all = nil
	}
	f.Extra = all
	*r = Row(f)
	return nil
}

// MarshalJSON writes the known keys in field order, then the Extra keys in
// sorted order, so equal rows always give equal bytes.
func (r Row) MarshalJSON() ([]byte, error) {
	if err := r.checkFinite(); err != nil {
		return nil, err
	}
	b, err := json.Marshal(rowFields(r))
	if err != nil {
		return nil, err
	}
	if len(r.Extra) == 0 {
		return b, nil
	}
	keys := make([]string, 0, len(r.Extra))
	for k := range r.Extra {
		if !known[k] {
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	var buf bytes.Buffer
	buf.Write(b[:len(b)-1]) // drop the closing brace
	for _, k := range keys {
		kb, _ := json.Marshal(k)
		var v bytes.Buffer
		if err := json.Compact(&v, r.Extra[k]); err != nil {
			return nil, fmt.Errorf("series: step %q: key %q holds invalid JSON: %w", r.Step, k, err)
		}
		buf.WriteByte(',')
		buf.Write(kb)
		buf.WriteByte(':')
		buf.Write(v.Bytes())
	}
	buf.WriteByte('}')
	return buf.Bytes(), nil
}

func (r *Row) checkFinite() error {
	if math.IsNaN(r.Time) || math.IsInf(r.Time, 0) {
		return fmt.Errorf("series: step %q: time_s is not finite", r.Step)
	}
	for _, c := range Columns {
		if c.kind != kindFloat {
			continue
		}
		if p := c.float(r); p != nil && (math.IsNaN(*p) || math.IsInf(*p, 0)) {
			return fmt.Errorf("series: step %q: %s is not finite (use null)", r.Step, c.Key)
		}
	}
	return nil
}

// FromResult builds the row of one step from the bytes of its result.json
// (the output of `sluice measure --json`).
func FromResult(step string, timeS float64, result []byte) (Row, error) {
	var r Row
	if err := json.Unmarshal(result, &r); err != nil {
		return Row{}, fmt.Errorf("series: step %q: result is not a JSON object: %w", step, err)
	}
	r.Step, r.Time = step, timeS
	if err := r.Validate(); err != nil {
		return Row{}, err
	}
	return r, nil
}

// Validate checks the step name and that every number is finite.
func (r *Row) Validate() error {
	if !ValidName(r.Step) {
		return fmt.Errorf("series: invalid step name %q (want [a-z0-9][a-z0-9._-]{0,63})", r.Step)
	}
	return r.checkFinite()
}

// ValidName reports whether s is a valid campaign or step name:
// [a-z0-9][a-z0-9._-]{0,63} (architecture.md).
func ValidName(s string) bool {
	if len(s) == 0 || len(s) > 64 {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case c >= 'a' && c <= 'z', c >= '0' && c <= '9':
		case i > 0 && (c == '.' || c == '_' || c == '-'):
		default:
			return false
		}
	}
	return true
}

// TrappedGanglia is the part of a result's trapped_ganglia_curvature
// object (pkg/measure.GangliaCurvature) the CSV shows.
type TrappedGanglia struct {
	Count    *int64   `json:"count"`
	PcP10    *float64 `json:"pc_p10_pa"`
	PcMedian *float64 `json:"pc_median_pa"`
	PcP90    *float64 `json:"pc_p90_pa"`
}

// Trapped decodes the row's trapped_ganglia_curvature object, kept
// verbatim in Extra; the zero value when absent or unreadable.
func (r *Row) Trapped() TrappedGanglia {
	var g TrappedGanglia
	if b, ok := r.Extra["trapped_ganglia_curvature"]; ok {
		_ = json.Unmarshal(b, &g)
	}
	return g
}

// F returns *p, or NaN when p is nil: handy for arithmetic on nullable
// values.
func F(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// Profile is the part of a result's saturation_profile object
// (pkg/measure.Profile) the figures and the report use: bin centres from
// the inlet face (m), the bin width (m) and S_n per bin (null where the
// bin holds no pore space).
type Profile struct {
	Axis           string     `json:"axis"`
	BinWidth       float64    `json:"bin_width_m"`
	Position       []float64  `json:"position_m"`
	SatNonwetting  []*float64 `json:"saturation_nonwetting"`
	FrontThreshold float64    `json:"front_threshold"`
}

// Profile decodes the row's saturation_profile object, kept verbatim in
// Extra; nil when absent, unreadable or inconsistent (bins and positions
// of different lengths, a non-positive bin width).
func (r *Row) Profile() *Profile {
	b, ok := r.Extra["saturation_profile"]
	if !ok {
		return nil
	}
	var p Profile
	if json.Unmarshal(b, &p) != nil || len(p.Position) == 0 || len(p.Position) != len(p.SatNonwetting) || !(p.BinWidth > 0) {
		return nil
	}
	return &p
}

// FillingKind is one kind of pore-filling event of a result's pore_filling
// object (pkg/filling.Kind).
type FillingKind struct {
	Count     *int64          `json:"count"`
	VolumeM3  *float64        `json:"volume_m3"`
	RatePerS  *float64        `json:"rate_per_s"`
	Histogram []int64         `json:"volume_histogram"`
	BinLowM3  []float64       `json:"volume_bin_low_m3"`
	Largest   []FillingListed `json:"largest"`
}

// FillingListed is one of the largest events of a kind.
type FillingListed struct {
	Voxels    int64      `json:"voxels"`
	VolumeM3  float64    `json:"volume_m3"`
	CentroidM [3]float64 `json:"centroid_zyx_m"`
}

// PoreFilling is the part of a result's pore_filling object
// (pkg/filling.Result) the CSV, the figures and the report use: the events
// between the previous step and this one.
type PoreFilling struct {
	PreviousStep *string      `json:"previous_step"`
	IntervalS    *float64     `json:"interval_s"`
	Drainage     *FillingKind `json:"drainage"`
	Imbibition   *FillingKind `json:"imbibition"`
	Note         string       `json:"note"`
}

// Filling decodes the row's pore_filling object, kept verbatim in Extra;
// nil when absent or unreadable.
func (r *Row) Filling() *PoreFilling {
	b, ok := r.Extra["pore_filling"]
	if !ok {
		return nil
	}
	var p PoreFilling
	if json.Unmarshal(b, &p) != nil {
		return nil
	}
	return &p
}

// fillingKind returns one kind of the row's events; never nil.
func (r *Row) fillingKind(drainage bool) *FillingKind {
	if p := r.Filling(); p != nil {
		if drainage && p.Drainage != nil {
			return p.Drainage
		}
		if !drainage && p.Imbibition != nil {
			return p.Imbibition
		}
	}
	return &FillingKind{}
}

// Tracking is the part of a result's ganglion_tracking object
// (pkg/tracking.Result) the CSV shows; null fields when absent.
type Tracking struct {
	OneToOne             *int64   `json:"one_to_one"`
	Splits               *int64   `json:"splits"`
	Merges               *int64   `json:"merges"`
	Appeared             *int64   `json:"appeared"`
	Vanished             *int64   `json:"vanished"`
	TrappedSaturation    *float64 `json:"trapped_saturation"`
	TrappedMovedFraction *float64 `json:"trapped_moved_fraction"`
	LifetimeMeanS        *float64 `json:"trapped_lifetime_mean_s"`
}

// Tracking decodes the row's ganglion_tracking object, kept verbatim in
// Extra; the zero value when absent or unreadable. Counts are null when the
// object says why tracking was not possible (a note).
func (r *Row) Tracking() Tracking {
	var g Tracking
	b, ok := r.Extra["ganglion_tracking"]
	if !ok {
		return g
	}
	var note struct {
		Note string `json:"note"`
	}
	if json.Unmarshal(b, &note) != nil || note.Note != "" || json.Unmarshal(b, &g) != nil {
		return Tracking{}
	}
	return g
}
