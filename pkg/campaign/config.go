// Package campaign holds the configuration of a campaign: everything that
// decides how a step's grey volume becomes numbers — voxel size, interfacial
// tension, segmentation, measurement options, tiling — with documented
// defaults, strict YAML/JSON loading (unknown keys are errors) and a
// parameter hash that covers every value that changes results.
package campaign

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"reflect"
	"strings"

	"gopkg.in/yaml.v3"

	"sluice/pkg/contact"
	"sluice/pkg/curvature"
	"sluice/pkg/events"
	"sluice/pkg/measure"
	"sluice/pkg/register"
	"sluice/pkg/riglog"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// Config is a campaign's configuration. Field comments give the defaults.
type Config struct {
	// VoxelSize is the voxel edge with unit (m, mm, um or µm, nm), e.g.
	// "2.5um", within 0.05 µm … 1 mm (ParseVoxelSize); empty means take it
	// from each input file's metadata. A campaign refuses a scan whose
	// voxel size is known from neither.
	VoxelSize string `json:"voxel_size,omitempty" yaml:"voxel_size,omitempty"`
	// IFT is the fluid–fluid interfacial tension σ in N/m (0 = unknown:
	// capillary pressure is left out), within MinIFT … MaxIFT (CheckIFT).
	// E.g. 0.07275 water–air at 20 °C (CRC Handbook); about 0.052
	// n-decane–water.
	IFT float64 `json:"ift_n_per_m" yaml:"ift_n_per_m"`
	// Tile is the tile core edge in voxels (default 128). It is also the
	// Zarr chunk edge. Results do not depend on it beyond rounding, so it is
	// not part of the parameter hash.
	Tile int `json:"tile" yaml:"tile"`
	// Segment configures grey → labels.
	Segment segment.Params `json:"segment" yaml:"segment"`
	// DetectSample finds the cylindrical sample from the image when
	// Segment.Sample is not given (default true); SampleMargin shrinks the
	// detected radius (voxels, default 2).
	DetectSample bool    `json:"detect_sample" yaml:"detect_sample"`
	SampleMargin float64 `json:"sample_margin" yaml:"sample_margin"`
	// Measure configures the measurements.
	Measure Measure `json:"measure" yaml:"measure"`
	// HDF5Dataset is the path of the scan's 3-D dataset in HDF5 inputs
	// (e.g. "/entry/data/data"); empty: the NeXus default/signal
	// attributes, else /exchange/data. --dataset overrides it. It says
	// where the voxels are, not how they are measured, so it is not part of
	// the parameter hash.
	HDF5Dataset string `json:"hdf5_dataset,omitempty" yaml:"hdf5_dataset,omitempty"`
	// Register configures the drift registration of each step to the
	// reference scan (docs/registration.md). It runs in reference-scan mode
	// (segment.reference: true) unless register.off is true, never
	// otherwise. Left out of the JSON when all zero, so the hashes of
	// campaigns written before it existed stay the same.
	Register Register `json:"register,omitzero" yaml:"register,omitempty"`
	// Events are the steady-state tolerances of the live view (defaults
	// K = 3 steps, |ΔS_w| ≤ 0.005, |ΔPc|/Pc ≤ 0.02). They do not change
	// measurements, so they are not part of the parameter hash.
	Events Events `json:"events" yaml:"events"`
	// RigLog maps the columns of the flow rig's CSV log (time, injected
	// volume or rate, pressures, temperature) with their units, and sets
	// the clock offset, the interpolation and what the derived quantities
	// need (viscosity, cross-section, pore volume); package riglog. It
	// changes series values (pore volumes injected, capillary number), so
	// it is part of the parameter hash; absent, the hash is that of a
	// campaign written before it existed.
	RigLog *riglog.Config `json:"rig_log,omitempty" yaml:"rig_log,omitempty"`
}

// Register configures drift registration (package register).
type Register struct {
	// Off turns registration off in reference-scan mode.
	Off bool `json:"off,omitempty" yaml:"off,omitempty"`
	// MaxShift is the largest shift (voxels, along any axis) taken as
	// ordinary drift (0 = DefaultMaxShift): a step whose shift exceeds it is
	// marked (registration_beyond) and raises a registration_shift event.
	// It is resampled by its shift all the same.
	MaxShift float64 `json:"max_shift,omitempty" yaml:"max_shift,omitempty"`
	// Region bounds the edge of the central box the shift is estimated on
	// (voxels, 0 = register.DefaultRegion, 128): along each axis the
	// largest power of two up to it and the scan's extent.
	Region int `json:"region,omitempty" yaml:"region,omitempty"`
}

// DefaultMaxShift is the default register.max_shift in voxels: a sample
// that creeps by more than a few voxels between scans has moved, not
// drifted (common practice for a mounted core; not a published value).
const DefaultMaxShift = 5

// Registers reports whether steps are registered to the reference scan:
// reference-scan mode without register.off.
func (c Config) Registers() bool { return c.Segment.Reference && !c.Register.Off }

// RegisterLimit returns register.max_shift or its default.
func (c Config) RegisterLimit() float64 {
	if c.Register.MaxShift > 0 {
		return c.Register.MaxShift
	}
	return DefaultMaxShift
}

// Events tune the experiment-event detection (package events).
type Events struct {
	SteadySteps   int     `json:"steady_steps" yaml:"steady_steps"`
	MaxDeltaSw    float64 `json:"max_delta_sw" yaml:"max_delta_sw"`
	MaxRelDeltaPc float64 `json:"max_rel_delta_pc" yaml:"max_rel_delta_pc"`
}

// EventOptions returns the event-detection options.
func (c Config) EventOptions() events.Options {
	return events.Options{K: c.Events.SteadySteps, MaxDeltaSw: c.Events.MaxDeltaSw, MaxRelDeltaPc: c.Events.MaxRelDeltaPc}
}

// Measure holds the measurement options of a campaign.
type Measure struct {
	// Connectivity of nonwetting clusters and Euler characteristics: 26
	// (default) or 6.
	Connectivity int `json:"connectivity" yaml:"connectivity"`
	// FlowAxis is z (default), y or x: inlet at the low end.
	FlowAxis string `json:"flow_axis" yaml:"flow_axis"`
	// CurvatureSigma and CurvatureExclude: Gaussian σ of the level-set
	// curvature and the distance from the solid (voxels) within which
	// interface is ignored (0: none); defaults 1.5 and 3.
	CurvatureSigma   float64 `json:"curvature_sigma" yaml:"curvature_sigma"`
	CurvatureExclude float64 `json:"curvature_exclude" yaml:"curvature_exclude"`
	// ContactRadius, ContactSolidSigma and ContactMinFaces tune the
	// contact-angle fit; defaults 12, 2 and 12. ContactWallGap (voxels,
	// default 0 = off) leaves interface faces that near the solid out of
	// the fit (contact.Options.WallGap; 3 for scans segmented from grey).
	ContactRadius     float64 `json:"contact_radius" yaml:"contact_radius"`
	ContactSolidSigma float64 `json:"contact_solid_sigma" yaml:"contact_solid_sigma"`
	ContactMinFaces   int     `json:"contact_min_faces" yaml:"contact_min_faces"`
	ContactWallGap    float64 `json:"contact_wall_gap,omitempty" yaml:"contact_wall_gap,omitempty"`
	// FrontThreshold is the nonwetting saturation a bin of the saturation
	// profile must exceed to count as reached by the displacement front
	// (0 = default 0.05; pkg/measure profile.go). It changes front_position_m,
	// so it is part of the parameter hash (omitted when 0, so hashes of
	// campaigns written before it existed stay the same).
	FrontThreshold float64 `json:"front_threshold,omitempty" yaml:"front_threshold,omitempty"`
	// SkipCurvature and SkipContact turn the expensive measurements off.
	SkipCurvature bool `json:"skip_curvature" yaml:"skip_curvature"`
	SkipContact   bool `json:"skip_contact" yaml:"skip_contact"`
	// SkipTopological leaves the topological contact angle out (up to about
	// half of a tile whose ganglia lie away from the sample's edge; 11 % of
	// the 1000³ benchmark step): for a live run on a small node, with an
	// overnight reprocess that computes it. Omitted when false, so hashes of
	// campaigns written before it existed stay the same.
	SkipTopological bool `json:"skip_topological,omitempty" yaml:"skip_topological,omitempty"`
}

// Default returns the documented defaults.
func Default() Config {
	return Config{
		Tile:         128,
		Segment:      segment.Defaults(),
		DetectSample: true,
		SampleMargin: 2,
		Events:       Events{SteadySteps: events.Defaults().K, MaxDeltaSw: events.Defaults().MaxDeltaSw, MaxRelDeltaPc: events.Defaults().MaxRelDeltaPc},
		Measure: Measure{
			Connectivity:      26,
			FlowAxis:          "z",
			CurvatureSigma:    curvature.DefaultSigma,
			CurvatureExclude:  curvature.DefaultExclude,
			ContactRadius:     contact.DefaultRadius,
			ContactSolidSigma: contact.DefaultSolidSigma,
			ContactMinFaces:   contact.DefaultMinFaces,
		},
	}
}

// Validate reports unusable values.
func (c Config) Validate() error {
	if c.VoxelSize != "" {
		if _, err := ParseVoxelSize(c.VoxelSize); err != nil {
			return fmt.Errorf("campaign: voxel_size: %w", err)
		}
	}
	if err := CheckIFT(c.IFT); err != nil {
		return fmt.Errorf("campaign: ift_n_per_m: %w", err)
	}
	if c.Tile < 16 || c.Tile > 1024 {
		return fmt.Errorf("campaign: tile %d out of range 16..1024", c.Tile)
	}
	if err := c.Segment.Validate(); err != nil {
		return fmt.Errorf("campaign: %w", err)
	}
	if c.SampleMargin < 0 {
		return fmt.Errorf("campaign: sample_margin %g must be >= 0", c.SampleMargin)
	}
	if r := c.Register; !(r.MaxShift >= 0 && r.MaxShift <= 1000) {
		return fmt.Errorf("campaign: register.max_shift %g out of range [0, 1000] voxels (0: the default %d)", r.MaxShift, DefaultMaxShift)
	}
	if r := c.Register.Region; r != 0 && (r < register.MinRegion || r > 1024) {
		return fmt.Errorf("campaign: register.region %d out of range %d..1024 voxels (0: the default %d)", r, register.MinRegion, register.DefaultRegion)
	}
	// The measurement packages read σ ≤ 0 as "use the default"; in a
	// config file it is a mistake, not a request for the default.
	m := c.Measure
	if !(m.CurvatureSigma > 0 && m.CurvatureSigma <= 20) {
		return fmt.Errorf("campaign: measure.curvature_sigma %g out of range (0, 20] voxels", m.CurvatureSigma)
	}
	if !(m.CurvatureExclude >= 0 && m.CurvatureExclude <= 1000) {
		return fmt.Errorf("campaign: measure.curvature_exclude %g out of range [0, 1000] voxels", m.CurvatureExclude)
	}
	if !(m.ContactRadius > 0 && m.ContactRadius <= 100) || !(m.ContactSolidSigma > 0 && m.ContactSolidSigma <= 20) {
		return fmt.Errorf("campaign: measure.contact_radius %g and contact_solid_sigma %g must be in (0, 100] and (0, 20] voxels", m.ContactRadius, m.ContactSolidSigma)
	}
	if math.IsNaN(c.IFT) || math.IsInf(c.IFT, 0) || math.IsNaN(c.SampleMargin) {
		return fmt.Errorf("campaign: ift_n_per_m %g and sample_margin %g must be finite", c.IFT, c.SampleMargin)
	}
	mo, err := c.MeasureOptions()
	if err != nil {
		return err
	}
	if c.RigLog != nil {
		if err := c.RigLog.Validate(); err != nil {
			return fmt.Errorf("campaign: %w", err)
		}
	}
	if err := c.EventOptions().Validate(); err != nil {
		return fmt.Errorf("campaign: events: %w", err)
	}
	halo := c.Segment.Halo() + mo.Halo()
	if halo >= c.Tile {
		return fmt.Errorf("campaign: halo of %d voxels is not smaller than the tile (%d); raise tile", halo, c.Tile)
	}
	return nil
}

// VoxelSizeM returns the configured voxel size in metres, or 0.
func (c Config) VoxelSizeM() float64 {
	v, err := ParseVoxelSize(c.VoxelSize)
	if c.VoxelSize == "" || err != nil {
		return 0
	}
	return v
}

// The plausible range of a voxel edge: from nano-tomography (tens of nm)
// to a coarse laboratory scan of a whole core (≲ 1 mm). A value outside is
// a unit typed wrong, not a scan.
const (
	MinVoxelSize = 0.05e-6 // m
	MaxVoxelSize = 1e-3    // m
)

// ParseVoxelSize parses a voxel edge that must carry its unit (m, mm, um
// or µm, nm) and lie within MinVoxelSize … MaxVoxelSize. A bare number is
// refused: "4" could be µm, mm or a voxel count, and a guess would scale
// every area and curvature.
func ParseVoxelSize(s string) (float64, error) {
	t := strings.TrimSpace(s)
	if !strings.HasSuffix(t, "m") { // every accepted unit ends in m
		return 0, fmt.Errorf("voxel size %q has no unit; write it with m, mm, um (µm) or nm, e.g. 2.5um", s)
	}
	v, err := volume.ParseLength(t)
	if err != nil {
		return 0, fmt.Errorf("voxel size %q is not a positive length with m, mm, um (µm) or nm", s)
	}
	if err := CheckVoxelSize(v); err != nil {
		return 0, fmt.Errorf("voxel size %q: %w", s, err)
	}
	return v, nil
}

// CheckVoxelSize refuses a voxel edge (metres) outside the plausible range.
func CheckVoxelSize(m float64) error {
	if !(m >= MinVoxelSize*(1-1e-12) && m <= MaxVoxelSize*(1+1e-12)) {
		return fmt.Errorf("%s is outside the plausible 0.05 µm … 1 mm", volume.FormatLength(m))
	}
	return nil
}

// The plausible range of a fluid–fluid interfacial tension in N/m. Values
// recalled from memory (handbook and common practice, not looked up):
// water–air 0.072 N/m at 25 °C, oil–brine typically 0.02–0.05, CO2–brine
// 0.025–0.04 at reservoir conditions; surfactant systems go down to about
// 1e-3 (ultra-low tensions below that are outside what sluice's curvature
// method resolves anyway), and nothing but liquid metals exceeds 0.5.
const (
	MinIFT = 1e-3 // N/m
	MaxIFT = 0.5  // N/m
)

// CheckIFT refuses a σ (N/m) outside MinIFT … MaxIFT; 0 means unknown and
// passes. A value that reads as mN/m gets the conversion as a hint.
func CheckIFT(sigma float64) error {
	switch {
	case sigma == 0:
		return nil
	case math.IsNaN(sigma) || math.IsInf(sigma, 0):
		return fmt.Errorf("interfacial tension %g must be a finite number in N/m", sigma)
	case sigma < 0:
		return fmt.Errorf("interfacial tension must be > 0 N/m, not %g", sigma)
	case sigma > MaxIFT && sigma <= MaxIFT*1000:
		return fmt.Errorf("interfacial tension %g N/m is outside %g…%g N/m; the unit is N/m: %g looks like mN/m; did you mean %g?",
			sigma, MinIFT, MaxIFT, sigma, sigma/1000)
	case sigma < MinIFT || sigma > MaxIFT:
		return fmt.Errorf("interfacial tension %g N/m is outside %g…%g N/m; the unit is N/m (water–air 0.072)", sigma, MinIFT, MaxIFT)
	}
	return nil
}

// MeasureOptions returns the measurement options.
func (c Config) MeasureOptions() (measure.Options, error) {
	o := measure.Defaults()
	o.Codes = c.Segment.Codes
	o.IFT = c.IFT
	o.Connectivity = c.Measure.Connectivity
	switch c.Measure.FlowAxis {
	case "z", "":
		o.FlowAxis = 0
	case "y":
		o.FlowAxis = 1
	case "x":
		o.FlowAxis = 2
	default:
		return o, fmt.Errorf("campaign: flow_axis %q (want z, y or x)", c.Measure.FlowAxis)
	}
	// curvature_exclude 0 means what it says, no exclusion; curvature.Options
	// reads a zero Exclude as its default (3), and a negative one as none.
	ex := c.Measure.CurvatureExclude
	if ex == 0 {
		ex = -1
	}
	o.Curvature = curvature.Options{Sigma: c.Measure.CurvatureSigma, Exclude: ex}
	o.Contact = contact.Options{Radius: c.Measure.ContactRadius, SolidSigma: c.Measure.ContactSolidSigma, MinFaces: c.Measure.ContactMinFaces, WallGap: c.Measure.ContactWallGap}
	o.SkipCurvature, o.SkipContact = c.Measure.SkipCurvature, c.Measure.SkipContact
	o.SkipTopological = c.Measure.SkipTopological
	o.FrontThreshold = c.Measure.FrontThreshold
	if err := o.Validate(); err != nil {
		return o, fmt.Errorf("campaign: %w", err)
	}
	return o, nil
}

// Hash returns the parameter hash: the first 16 hex digits of the SHA-256
// of the canonical JSON of every result-changing value (all of Config but
// Tile, Events and HDF5Dataset). Two runs with equal hashes and software versions give the same
// series.
func (c Config) Hash() string {
	c.Tile = 0
	c.Events = Events{}
	c.HDF5Dataset = ""
	if c.Segment.ThresholdScope == segment.ScopeStep {
		c.Segment.ThresholdScope = "" // the default, spelt out
	}
	positiveZeros(reflect.ValueOf(&c).Elem())
	b, err := json.Marshal(c)
	if err != nil {
		panic(err) // plain data; cannot fail
	}
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:8])
}

// Parse reads a YAML (or JSON, a subset of YAML) configuration over the
// defaults; unknown keys are errors.
func Parse(name string, data []byte) (Config, error) {
	c := Default()
	if e := unknownKey(data, reflect.TypeOf(c)); e != nil {
		return c, fmt.Errorf("config: %s line %d: %w", name, e.Line, e)
	}
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(true)
	if err := dec.Decode(&c); err != nil && err.Error() != "EOF" {
		return c, fmt.Errorf("campaign: %s: %w", name, oneLine(err))
	}
	if err := c.Validate(); err != nil {
		return c, fmt.Errorf("%s: %w", name, err)
	}
	return c, nil
}

// positiveZeros turns every −0 float in v into +0, the same value: YAML
// reads "-0." as −0, JSON writes it "-0" and YAML reads that back as +0, so
// a hash of the raw bits would change on a config's way through
// campaign.json. Slices are shared with the caller's value; only −0
// elements change, to the equal +0.
func positiveZeros(v reflect.Value) {
	switch v.Kind() {
	case reflect.Float32, reflect.Float64:
		if v.CanSet() && v.Float() == 0 && math.Signbit(v.Float()) {
			v.SetFloat(0)
		}
	case reflect.Struct:
		for i := 0; i < v.NumField(); i++ {
			if v.Type().Field(i).IsExported() {
				positiveZeros(v.Field(i))
			}
		}
	case reflect.Slice, reflect.Array:
		for i := 0; i < v.Len(); i++ {
			positiveZeros(v.Index(i))
		}
	case reflect.Pointer:
		if !v.IsNil() {
			positiveZeros(v.Elem())
		}
	}
}

// Load reads a configuration file.
func Load(path string) (Config, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return Config{}, fmt.Errorf("campaign: %w", err)
	}
	return Parse(path, b)
}

// oneLine turns a (possibly multi-line) decoder error into one line; the
// list of a yaml.TypeError becomes "line 3: …; line 7: …". The result
// still unwraps to err.
func oneLine(err error) error {
	var te *yaml.TypeError
	if errors.As(err, &te) {
		parts := make([]string, len(te.Errors))
		for i, e := range te.Errors {
			parts[i] = flatLine(e)
		}
		return &lineError{strings.Join(parts, "; "), err}
	}
	return &lineError{flatLine(err.Error()), err}
}

// lineError is an error with its text put on one line; Unwrap returns
// the original.
type lineError struct {
	msg string
	err error
}

func (e *lineError) Error() string { return e.msg }
func (e *lineError) Unwrap() error { return e.err }

// flatLine writes line breaks inside s (from a quoted value, say) as "; "
// and collapses runs of white space.
func flatLine(s string) string {
	s = strings.NewReplacer("\r\n", "; ", "\n", "; ", "\r", "; ").Replace(s)
	return strings.Join(strings.Fields(s), " ")
}
