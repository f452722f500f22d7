// Package report writes a campaign's report: one self-contained HTML file
// (html/template; figures inline as SVG, styles inline, no scripts, no
// external resources) with the scenario and processing parameters, the
// series table, the figures of pkg/plots, the contact-angle and curvature
// distributions, the validation status, the detected events and the
// cautions users must read.
//
// Resolution travels with the numbers: the voxel size heads the table and
// every figure caption, and each step shows the mean radius of curvature
// of the w–n interface in voxels, R/h = 2/(κ·h). Rows where it is below
// ResolvedRadius voxels are flagged: published accuracy of image-derived
// average Pc is about 11 % only when radii exceed 10 voxels (Akai et al.
// 2019, Materials 12:2138).
package report

import (
	"bytes"
	"encoding/json"
	"fmt"
	"html/template"
	"io"
	"math"
	"regexp"
	"strconv"
	"time"

	"sluice/pkg/events"
	"sluice/pkg/plots"
	"sluice/pkg/series"
)

// ResolvedRadius is the radius of curvature, in voxels, below which a
// step's curvature and Pc are flagged (Akai et al. 2019: average Pc within
// 11 % for radii > 10 voxels).
const ResolvedRadius = 10

// Cautions are shown in every report (science.md, "Cautions to show
// users").
var Cautions = []string{
	"Flow experiments at a beamline involve pressurised cells, CO2 and ionising radiation: follow the facility's safety rules and local regulations.",
	"Image-derived capillary pressure and contact angles are estimates whose error grows when radii of curvature approach a few voxels.",
	"Report the resolution (voxel size) with every number, and do not use these values alone for engineering or safety decisions.",
}

// Params describe how the campaign was imaged and processed.
type Params struct {
	Campaign string
	// Scenario is a free description ("CO2 drainage of Bentheimer, 0.1 ml/min").
	Scenario string
	// VoxelSize is the voxel edge in metres.
	VoxelSize float64
	// IFT is the interfacial tension σ in N/m (nil: not set, no Pc).
	IFT *float64
	// SmoothingSigma is the Gaussian σ of the curvature level set, voxels.
	SmoothingSigma float64
	// Thresholds are the segmentation thresholds in grey values.
	Thresholds      []float64
	ParameterHash   string
	SoftwareVersion string
	FlowAxis        string
	Connectivity    int
	// Other holds further parameters, shown in order.
	Other []Param
}

// Param is one named parameter value, shown as given.
type Param struct{ Name, Value string }

// Rejected is a scan given up at ingest (truncated, wrong shape, no
// header …): it has no row, and the report says so with the reason.
type Rejected struct {
	Step, File, Reason string
	Attempts           int
	At                 string
}

// StepSettings are how one step was segmented, from its plan: the
// thresholds and sample cylinder pass 1 found for it. Phases detected,
// voxel size and whether it was assumed come from the step's row.
type StepSettings struct {
	Step string
	// Thresholds are the step's grey thresholds, ascending; Method "otsu"
	// or "fixed".
	Thresholds []float64
	Method     string
	// Fluids is "both", "wetting" or "nonwetting" (the phase decision).
	Fluids string
	// Filter is the denoising filter's method.
	Filter string
	// Sample is the sample cylinder (y, x, radius) in voxels; HasSample is
	// false when the step's plan does not say.
	Sample    [3]float64
	HasSample bool
}

// ThresholdDrift is the fraction of the grey-value scale beyond which a
// step's threshold is flagged as differing from the campaign's median of
// the same threshold. The scale is the median gap between the two
// thresholds of three-class steps (the grey width of the middle class);
// without such steps it is the median threshold's magnitude. Otsu
// thresholds move with the class proportions, so a drifting threshold
// flags a change in beam, detector or phase content worth a look, not
// necessarily an error (common practice).
const ThresholdDrift = 0.10

// ThresholdDriftMinSteps is the number of steps with the same number of
// thresholds and the same fluids needed before medians are compared.
const ThresholdDriftMinSteps = 3

// Input is everything a report shows. Rows need not be sorted.
type Input struct {
	Params
	Rows []series.Row
	// Steps holds each step's segmentation settings (any order; steps
	// without an entry show dashes).
	Steps []StepSettings
	// Rejected lists the scans given up, in step order.
	Rejected []Rejected
	// Events as found by events.Detect on Rows.
	Events []events.Event
	Checks []Check
	// FixedThresholds is the campaign's threshold record in threshold scope
	// "campaign" (nil: scope step, or not fixed yet).
	FixedThresholds *CampaignThresholds
	// RigLog is the campaign's rig log (nil: none).
	RigLog *RigLog
	// Accuracy is the stored accuracy estimate of `sluice accuracy` (nil:
	// none), shown next to the measured series.
	Accuracy *Accuracy
	// Cautions are shown after the ones every report carries (Cautions),
	// e.g. about a setting of this campaign.
	Cautions  []string
	Generated time.Time
}

type figure struct {
	ID, Title, Caption string
	SVG                template.HTML
}

type tableRow struct {
	Step, Time, Sw, Phi, Pc, KMean, KMedian, RVox, AWN     string
	AMean, AMedian, AStd, ASamples, Ganglia, Largest, Perc string
	// PcConnected, PcTrapped: the means over the connected and the
	// trapped ganglia's interfaces; Trapped: the median of the trapped
	// ganglia's own Pc and their count. Means carry "± SE" when known.
	PcConnected, PcTrapped, Trapped string
	Unresolved                      bool
}

// frontRow is one line of the front table.
type frontRow struct{ Step, Time, Position, Velocity string }

// fillingRow is one line of the pore-filling table.
type fillingRow struct {
	Step, Time, Previous, Interval                    string
	DCount, DVolume, DRate, IMCount, IMVolume, IMRate string
	Largest, Note                                     string
}

// RigLog describes the campaign's rig log for the report (package riglog);
// nil when the campaign has none.
type RigLog struct {
	// File is the log's file name as it was read; Records its records.
	File    string
	Records int
	// Interpolation ("linear" or "previous") and the clock offset (s)
	// added to the log's times.
	Interpolation string
	ClockOffsetS  float64
	// ViscosityPaS of the injected fluid (0: not given, no Ca).
	ViscosityPaS float64
	// PoreVolumeFrom and AreaFrom say where the pore volume and the
	// cross-section came from (riglog.Geometry).
	PoreVolumeFrom, AreaFrom string
	// Note, when set, says why the log could not be applied.
	Note string
}

// rigRow is one line of the experiment-log table.
type rigRow struct{ Step, Time, PV, Rate, Flux, Ca, DP, PcImage, PorePress, Confining, Temp string }

// stateRow is one line of the geometric-state table.
type stateRow struct{ Step, Time, Sw, AWN, J, JV, Chi, ChiV string }

// settingsRow is one line of the per-step segmentation table.
type settingsRow struct {
	Step, Time, Voxel, Filter, Method, Thresholds, Phases, PhasesNote, SampleY, SampleX, SampleR string
	GreyDrift                                                                                    string
	VoxelAssumed, VoxelDiffers, Drift                                                            bool
	DriftNote                                                                                    string
}

type page struct {
	Input
	Settings      []settingsRow
	CampaignTh    *campaignView
	AreaUnit      string
	DriftRule     string
	DriftFlagged  int
	VoxelSize     string
	IFT           string
	Thresholds    string
	Table         []tableRow
	Figures       []figure
	Distributions []figure
	// Profile is the saturation-profile map; Fronts the front position
	// and velocity per step; FrontThreshold the threshold of the front.
	Profile []figure
	Fronts  []frontRow
	// Filling is the pore-filling events figure; FillingRows the events
	// per step.
	Filling     []figure
	FillingRows []fillingRow
	// Tracking is the ganglion-tracking figure; TrackingRows its table.
	Tracking       []figure
	TrackingRows   []trackingRow
	FrontThreshold string
	// Angles is the wettability table; Wettability its figure.
	Angles      []angleRow
	Wettability []figure
	// Geometric is the geometric-state trajectory; States its table.
	Geometric []figure
	States    []stateRow
	// Experiment is the rig-log figure, Rig its table, RigPoreVolume and
	// RigArea the values used (text).
	Experiment     []figure
	Rig            []rigRow
	RigPoreVolume  string
	RigArea        string
	RigInfo        *RigLog
	ChecksPassed   int
	ChecksFailed   int
	ChecksNotEval  int
	Cautions       []string
	AccuracyView   *accuracyView
	ResolvedRadius int
	Generated      string
	Breakthrough   string
	Steady         string
}

var (
	xmlProlog  = regexp.MustCompile(`^\s*<\?xml[^>]*\?>\s*`)
	xmlComment = regexp.MustCompile(`<!--.*?-->\s*`)
)

// Write renders the report to w.
func Write(w io.Writer, in Input) error {
	if in.Campaign != "" && !series.ValidName(in.Campaign) {
		return fmt.Errorf("report: invalid campaign name %q", in.Campaign)
	}
	rows := append([]series.Row(nil), in.Rows...)
	series.Sort(rows)
	in.Rows = rows
	pg := page{
		Input:          in,
		VoxelSize:      lengthText(in.VoxelSize),
		IFT:            "not set (capillary pressure not computed)",
		Thresholds:     "—",
		Cautions:       append(append([]string(nil), Cautions...), in.Cautions...),
		ResolvedRadius: ResolvedRadius,
		AreaUnit:       plots.UnitSpecificArea,
		Generated:      in.Generated.UTC().Format(time.RFC3339),
	}
	if in.IFT != nil {
		pg.IFT = fmt.Sprintf("%.4g mN/m", *in.IFT*1e3)
	}
	if len(in.Thresholds) > 0 {
		pg.Thresholds = ""
		for i, t := range in.Thresholds {
			if i > 0 {
				pg.Thresholds += ", "
			}
			pg.Thresholds += strconv.FormatFloat(t, 'g', 6, 64)
		}
	}
	for _, c := range in.Checks {
		switch c.Status {
		case Passed:
			pg.ChecksPassed++
		case NotEvaluated:
			pg.ChecksNotEval++
		default:
			pg.ChecksFailed++
		}
	}
	for _, e := range in.Events {
		switch e.Kind {
		case events.Breakthrough:
			pg.Breakthrough = fmt.Sprintf("step %s at t = %g s", e.Step, e.Time)
		case events.SteadyState:
			pg.Steady = fmt.Sprintf("step %s at t = %g s", e.Step, e.Time)
		}
	}
	for i := range rows {
		pg.Table = append(pg.Table, tabulate(&rows[i], in.VoxelSize))
	}
	pg.Fronts, pg.FrontThreshold = fronts(rows)
	pg.FillingRows = fillingTable(rows)
	pg.TrackingRows = trackingTable(rows)
	pg.Angles = angleTable(rows)
	pg.States = states(rows)
	pg.Rig, pg.RigPoreVolume, pg.RigArea = rigTable(rows)
	pg.RigInfo = in.RigLog
	pg.Settings, pg.DriftRule = settingsTable(rows, in.Steps, in.VoxelSize)
	pg.CampaignTh = viewCampaign(in.FixedThresholds)
	pg.AccuracyView = viewAccuracy(in.Accuracy, rows)
	for _, s := range pg.Settings {
		if s.Drift || s.VoxelDiffers {
			pg.DriftFlagged++
		}
	}
	for _, f := range plots.Build(rows, in.Events, plots.Run{Campaign: in.Campaign, Hash: in.ParameterHash}) {
		var buf bytes.Buffer
		if err := f.WriteSVG(&buf); err != nil {
			return fmt.Errorf("report: %w", err)
		}
		svg := xmlComment.ReplaceAll(xmlProlog.ReplaceAll(buf.Bytes(), nil), nil)
		fg := figure{ID: "fig-" + f.Name, Title: f.Title,
			Caption: fmt.Sprintf("%s. Voxel size %s.", f.Title, pg.VoxelSize),
			// Trusted: SVG drawn by gonum/plot from our own numbers and
			// labels; step names are restricted to [a-z0-9._-].
			SVG: template.HTML(svg)}
		if f.Name == "contact_angle" || f.Name == "curvature" {
			pg.Distributions = append(pg.Distributions, fg)
		} else if f.Name == "saturation_profile" {
			pg.Profile = append(pg.Profile, fg)
		} else if f.Name == "pore_filling" {
			pg.Filling = append(pg.Filling, fg)
		} else if f.Name == "ganglion_tracking" {
			pg.Tracking = append(pg.Tracking, fg)
		} else if f.Name == "contact_angles" {
			pg.Wettability = append(pg.Wettability, fg)
		} else if f.Name == "geometric_state" {
			pg.Geometric = append(pg.Geometric, fg)
		} else if f.Name == "experiment_log" {
			pg.Experiment = append(pg.Experiment, fg)
		} else {
			pg.Figures = append(pg.Figures, fg)
		}
	}
	if err := tmpl.Execute(w, pg); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	return nil
}

// fronts tabulates the front position (mm) and velocity (µm/s) of every
// step, and returns the front threshold of the profiles ("0.05" when no
// row carries a profile).
func fronts(rows []series.Row) ([]frontRow, string) {
	f := func(p *float64, scale float64, prec int) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatFloat(*p*scale, 'f', prec, 64)
	}
	thr := "0.05"
	var out []frontRow
	for i := range rows {
		r := &rows[i]
		if p := r.Profile(); p != nil {
			thr = strconv.FormatFloat(p.FrontThreshold, 'g', -1, 64)
		}
		out = append(out, frontRow{Step: r.Step, Time: strconv.FormatFloat(r.Time, 'f', 1, 64),
			Position: f(r.FrontPosition, 1e3, 3), Velocity: f(r.FrontVelocity, 1e6, 3)})
	}
	return out, thr
}

// trackingRow is one line of the ganglion-tracking table.
type trackingRow struct {
	Step, Time, Previous, Links, Trapped, Moved, Lifetime, Oldest, Note string
}

// trackingTable tabulates the ganglion tracking of every step: the links
// (one-to-one / splits / merges / appeared / vanished), the trapped
// saturation, the fraction of trapped ganglia that moved, the mean lifetime
// and the longest-lived trapped ganglion.
func trackingTable(rows []series.Row) []trackingRow {
	var out []trackingRow
	for i := range rows {
		r := &rows[i]
		tr := trackingRow{Step: r.Step, Time: strconv.FormatFloat(r.Time, 'f', 1, 64), Previous: "—", Links: "—",
			Trapped: "—", Moved: "—", Lifetime: "—", Oldest: "—"}
		b, ok := r.Extra["ganglion_tracking"]
		var g struct {
			Previous *string  `json:"previous_step"`
			One      int      `json:"one_to_one"`
			Split    int      `json:"splits"`
			Merge    int      `json:"merges"`
			Appear   int      `json:"appeared"`
			Vanish   int      `json:"vanished"`
			Sat      *float64 `json:"trapped_saturation"`
			Moved    *float64 `json:"trapped_moved_fraction"`
			Life     *float64 `json:"trapped_lifetime_mean_s"`
			Trapped  []struct {
				Voxels    int64   `json:"voxels"`
				BornStep  string  `json:"born_step"`
				LifetimeS float64 `json:"lifetime_s"`
			} `json:"trapped"`
			Note string `json:"note"`
		}
		if !ok || json.Unmarshal(b, &g) != nil {
			out = append(out, tr)
			continue
		}
		if g.Previous != nil {
			tr.Previous = *g.Previous
		}
		tr.Note = g.Note
		if g.Note == "" {
			tr.Links = fmt.Sprintf("%d / %d / %d / %d / %d", g.One, g.Split, g.Merge, g.Appear, g.Vanish)
		}
		f := func(p *float64, prec int) string {
			if p == nil {
				return "—"
			}
			return strconv.FormatFloat(*p, 'f', prec, 64)
		}
		tr.Trapped, tr.Moved, tr.Lifetime = f(g.Sat, 4), f(g.Moved, 3), f(g.Life, 1)
		best := -1
		for k, t := range g.Trapped {
			if best < 0 || t.LifetimeS > g.Trapped[best].LifetimeS {
				best = k
			}
		}
		if best >= 0 {
			t := g.Trapped[best]
			tr.Oldest = fmt.Sprintf("%d voxels, since %s (%s s)", t.Voxels, t.BornStep, strconv.FormatFloat(t.LifetimeS, 'f', 1, 64))
		}
		out = append(out, tr)
	}
	return out
}

// fillingTable tabulates the pore-filling events of every step: counts,
// volumes (µm³, so that single-voxel events stay visible) and rates
// (1/s) of drainage and imbibition, and the largest event (volume and
// centroid in mm).
func fillingTable(rows []series.Row) []fillingRow {
	f := func(p *float64, scale float64, prec int) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatFloat(*p*scale, 'f', prec, 64)
	}
	c := func(p *int64) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatInt(*p, 10)
	}
	var out []fillingRow
	for i := range rows {
		r := &rows[i]
		p := r.Filling()
		fr := fillingRow{Step: r.Step, Time: strconv.FormatFloat(r.Time, 'f', 1, 64), Previous: "—", Interval: "—",
			DCount: "—", DVolume: "—", DRate: "—", IMCount: "—", IMVolume: "—", IMRate: "—", Largest: "—"}
		if p == nil {
			out = append(out, fr)
			continue
		}
		fr.Note = p.Note
		if p.PreviousStep != nil {
			fr.Previous = *p.PreviousStep
		}
		fr.Interval = f(p.IntervalS, 1, 1)
		var best *series.FillingListed
		kind := ""
		if d := p.Drainage; d != nil {
			fr.DCount, fr.DVolume, fr.DRate = c(d.Count), f(d.VolumeM3, 1e18, 0), f(d.RatePerS, 1, 4)
			if len(d.Largest) > 0 {
				best, kind = &d.Largest[0], "drainage"
			}
		}
		if m := p.Imbibition; m != nil {
			fr.IMCount, fr.IMVolume, fr.IMRate = c(m.Count), f(m.VolumeM3, 1e18, 0), f(m.RatePerS, 1, 4)
			if len(m.Largest) > 0 && (best == nil || m.Largest[0].Voxels > best.Voxels) {
				best, kind = &m.Largest[0], "imbibition"
			}
		}
		if best != nil {
			fr.Largest = fmt.Sprintf("%s, %s µm³ at (%.3f, %.3f, %.3f) mm", kind, strconv.FormatFloat(best.VolumeM3*1e18, 'f', 0, 64),
				best.CentroidM[0]*1e3, best.CentroidM[1]*1e3, best.CentroidM[2]*1e3)
		}
		out = append(out, fr)
	}
	return out
}

// rigTable tabulates the experiment log at every step: pore volumes
// injected, rate (ml/min), Darcy flux (µm/s), Ca, transducer Δp and image
// Pc of the connected ganglia (kPa), pore and confining pressure (MPa),
// temperature (°C); and the pore volume (mm³) and cross-section (mm²) used
// ("—" when no step has them).
func rigTable(rows []series.Row) ([]rigRow, string, string) {
	f := func(p *float64, scale, shift float64, format byte, prec int) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatFloat(*p*scale+shift, format, prec, 64)
	}
	var out []rigRow
	pv, area := "—", "—"
	for i := range rows {
		r := &rows[i]
		if pv == "—" && r.RigPoreVolume != nil {
			pv = f(r.RigPoreVolume, 1e9, 0, 'g', 4)
		}
		if area == "—" && r.RigArea != nil {
			area = f(r.RigArea, 1e6, 0, 'g', 4)
		}
		out = append(out, rigRow{Step: r.Step, Time: strconv.FormatFloat(r.Time, 'f', 1, 64),
			PV: f(r.PoreVolumesInjected, 1, 0, 'f', 3), Rate: f(r.RigRate, 6e7, 0, 'g', 4), Flux: f(r.DarcyFlux, 1e6, 0, 'g', 4),
			Ca: f(r.CapillaryNumber, 1, 0, 'e', 2), DP: f(r.RigDiffPressure, 1e-3, 0, 'f', 3), PcImage: f(r.PcConnected, 1e-3, 0, 'f', 3),
			PorePress: f(r.RigPorePressure, 1e-6, 0, 'g', 4), Confining: f(r.RigConfiningPressure, 1e-6, 0, 'g', 4),
			Temp: f(r.RigTemperature, 1, -273.15, 'f', 2)})
	}
	return out, pv, area
}

// states tabulates the geometric state of every step: S_w, a_wn
// (mm²/mm³), J_wn (mm) and per bulk volume (mm/mm³), χ_n and per bulk
// volume (1/mm³).
func states(rows []series.Row) []stateRow {
	f := func(p *float64, scale float64, format byte, prec int) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatFloat(*p*scale, format, prec, 64)
	}
	var out []stateRow
	for i := range rows {
		r := &rows[i]
		chi := "—"
		if r.EulerNonwetting != nil {
			chi = strconv.FormatInt(*r.EulerNonwetting, 10)
		}
		out = append(out, stateRow{Step: r.Step, Time: strconv.FormatFloat(r.Time, 'f', 1, 64),
			Sw: f(r.SatWetting, 1, 'f', 4), AWN: f(r.SpecificWN, 1e-3, 'f', 3),
			J: f(r.MeanCurvIntegralWN, 1e3, 'g', 4), JV: f(r.SpecificMeanCurvWN, 1e-6, 'g', 4),
			Chi: chi, ChiV: f(r.SpecificEulerNonwetting, 1e-9, 'g', 4)})
	}
	return out
}

func tabulate(r *series.Row, h float64) tableRow {
	f := func(p *float64, scale float64, prec int) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatFloat(*p*scale, 'f', prec, 64)
	}
	// pm writes a mean with its standard error, "v ± se" (the SE left
	// out when unknown).
	pm := func(p, se *float64, scale float64, prec int) string {
		if p == nil || se == nil {
			return f(p, scale, prec)
		}
		return f(p, scale, prec) + " ± " + f(se, scale, prec)
	}
	t := tableRow{
		Step: r.Step, Time: strconv.FormatFloat(r.Time, 'f', 1, 64),
		Sw: f(r.SatWetting, 1, 4), Phi: f(r.Porosity, 1, 4),
		Pc: pm(r.Pc, r.PcSE, 1e-3, 3), KMean: pm(r.CurvMean, r.CurvMeanSE, 1e-3, 2), KMedian: f(r.CurvMedian, 1e-3, 2),
		PcConnected: pm(r.PcConnected, r.PcConnectedSE, 1e-3, 3), PcTrapped: pm(r.PcTrapped, r.PcTrappedSE, 1e-3, 3),
		Trapped: "—",
		AWN:     f(r.SpecificWN, 1e-3, 3), AMean: pm(r.AngleMean, r.AngleMeanSE, 1, 1), AMedian: f(r.AngleMedian, 1, 1),
		AStd: f(r.AngleStd, 1, 1), Largest: f(r.LargestFraction, 1, 3),
		RVox: "—", ASamples: "—", Ganglia: "—", Perc: "—",
	}
	if r.CurvMean != nil && *r.CurvMean != 0 && h > 0 {
		rv := math.Abs(2 / (*r.CurvMean * h))
		t.RVox = strconv.FormatFloat(rv, 'f', 1, 64)
		t.Unresolved = rv < ResolvedRadius
	}
	if r.AngleSamples != nil {
		t.ASamples = strconv.FormatInt(*r.AngleSamples, 10)
	}
	if g := r.Trapped(); g.Count != nil && *g.Count > 0 && g.PcMedian != nil {
		t.Trapped = f(g.PcMedian, 1e-3, 3) + " (" + strconv.FormatInt(*g.Count, 10) + ")"
	}
	if r.GangliaCount != nil {
		t.Ganglia = strconv.FormatInt(*r.GangliaCount, 10)
	}
	if r.Percolates != nil {
		t.Perc = map[bool]string{true: "yes", false: "no"}[*r.Percolates]
	}
	return t
}

// lengthText prints a voxel size in µm with the metre value.
func lengthText(m float64) string {
	if !(m > 0) {
		return "unknown"
	}
	return fmt.Sprintf("%.4g µm (%.4g m)", m*1e6, m)
}

var tmpl = template.Must(template.New("report").Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8"/>
<title>sluice report{{with .Campaign}} — {{.}}{{end}}</title>
<style>
body { font-family: sans-serif; margin: 2em auto; max-width: 70em; color: #1a1a1a; }
table { border-collapse: collapse; font-size: 0.85em; }
th, td { border: 1px solid #bbb; padding: 0.2em 0.5em; text-align: right; }
th { background: #eee; }
td.step { text-align: left; }
tr.unresolved td.rvox, tr.drift td.thr, td.differs { background: #f5d9a3; font-weight: bold; }
figure { display: inline-block; margin: 0.5em; }
figure svg { max-width: 100%; height: auto; }
.pass { color: #1c4a8c; } .fail { color: #6a3d0c; font-weight: bold; } .noteval { color: #555; font-style: italic; }
.cautions { border: 2px solid #6a3d0c; padding: 0.5em 1em; background: #fff6e6; }
dl { display: grid; grid-template-columns: max-content auto; gap: 0.2em 1em; }
dt { font-weight: bold; }
</style>
</head>
<body>
<h1>sluice report{{with .Campaign}}: {{.}}{{end}}</h1>
<section class="cautions" id="cautions">
<h2>Cautions</h2>
<ul>{{range .Cautions}}
<li>{{.}}</li>{{end}}
</ul>
</section>

<section id="scenario">
<h2>Scenario and parameters</h2>
<dl>
<dt>Scenario</dt><dd>{{if .Scenario}}{{.Scenario}}{{else}}—{{end}}</dd>
<dt>Voxel size</dt><dd>{{.VoxelSize}}</dd>
<dt>Interfacial tension σ</dt><dd>{{.IFT}}</dd>
<dt>Curvature smoothing σ</dt><dd>{{if .SmoothingSigma}}{{.SmoothingSigma}} voxels{{else}}—{{end}}</dd>
<dt>Segmentation thresholds</dt><dd>{{with .CampaignTh}}campaign thresholds {{.Values}} ({{.Source}}), see <a href="#campaign-thresholds">Campaign thresholds</a>{{else}}{{if .Steps}}per step, see <a href="#segmentation">Segmentation per step</a>{{else}}{{.Thresholds}}{{end}}{{end}}</dd>
<dt>Flow axis</dt><dd>{{if .FlowAxis}}{{.FlowAxis}}{{else}}—{{end}}</dd>
<dt>Connectivity</dt><dd>{{if .Connectivity}}{{.Connectivity}}{{else}}—{{end}}</dd>
<dt>Parameter hash</dt><dd><code>{{if .ParameterHash}}{{.ParameterHash}}{{else}}—{{end}}</code></dd>
<dt>Software version</dt><dd>{{if .SoftwareVersion}}{{.SoftwareVersion}}{{else}}—{{end}}</dd>{{range .Other}}
<dt>{{.Name}}</dt><dd>{{.Value}}</dd>{{end}}
<dt>Generated</dt><dd>{{.Generated}}</dd>
</dl>
</section>

<section id="rejected">
<h2>Rejected scans</h2>
{{if .Rejected}}<p class="fail">{{len .Rejected}} scans were given up at ingest and are not in the series.</p>
<table>
<tr><th>step</th><th>file</th><th>attempts</th><th>given up at</th><th>reason</th></tr>{{range .Rejected}}
<tr data-rejected="{{.Step}}"><td class="step">{{.Step}}</td><td class="step">{{.File}}</td><td>{{.Attempts}}</td><td class="step">{{.At}}</td><td class="step">{{.Reason}}</td></tr>{{end}}
</table>{{else}}<p>None: every scan that arrived was ingested.</p>{{end}}
</section>

<section id="events">
<h2>Events</h2>
<p>Breakthrough: {{if .Breakthrough}}{{.Breakthrough}}{{else}}not detected{{end}}.
Latest steady-state onset: {{if .Steady}}{{.Steady}}{{else}}not detected{{end}}.</p>
{{if .Events}}<table>
<tr><th>event</th><th>step</th><th>t (s)</th><th>detail</th></tr>{{range .Events}}
<tr data-event="{{.ID}}"><td class="step">{{.Kind}}</td><td class="step">{{.Step}}</td><td>{{.Time}}</td><td class="step">{{.Detail}}</td></tr>{{end}}
</table>{{end}}
</section>

<section id="validation">
<h2>Validation status</h2>
<p>{{len .Checks}} checks: {{.ChecksPassed}} passed, {{.ChecksFailed}} failed, {{.ChecksNotEval}} not evaluated.
A check is not evaluated when the series holds nothing it applies to; the reason is given.</p>
{{if .Checks}}<ul>{{range .Checks}}
<li class="{{if eq .Status "passed"}}pass{{else if eq .Status "not evaluated"}}noteval{{else}}fail{{end}}" data-check="{{.Name}}" data-status="{{.Status}}">{{if eq .Status "passed"}}passed{{else if eq .Status "not evaluated"}}not evaluated{{else}}FAILED{{end}}: {{.Name}}{{with .Detail}} — {{.}}{{end}}</li>{{end}}
</ul>{{end}}
</section>

<section id="campaign-thresholds">
<h2>Campaign thresholds</h2>
{{with .CampaignTh}}<p data-campaign-thresholds="{{.Values}}">Thresholds fixed for the campaign: <strong>{{.Values}}</strong> (grey values), source
<strong>{{.Source}}</strong>{{if .Step}}, phase levels from the histogram of step {{.Step}}: {{.Levels}}{{end}}. Every step uses them,
shifted by the measured drift of the phase grey levels (the mean drift of the two phases of a threshold; not applied below
2 % of their contrast, capped at 25 % — a step beyond is flagged and raises a grey_drift event).</p>
<figure id="fig-campaign-histogram">
{{.SVG}}
<figcaption>Merged histogram the campaign levels came from (log counts); solid lines: thresholds, dashed: phase levels.</figcaption>
</figure>{{else}}<p>Thresholds per step: each step's come from its own histogram (segment.threshold_scope step){{if $.Steps}}, see <a href="#segmentation">Segmentation per step</a>{{end}}.</p>{{end}}
</section>

<section id="segmentation">
<h2>Segmentation per step</h2>
{{if .Settings}}<p>Thresholds (grey values), phases found and the sample cylinder (centre y, x and radius, voxels) of each
step, as pass 1 found them. {{.DriftRule}}{{if .DriftFlagged}} <span class="fail">{{.DriftFlagged}} steps flagged.</span>{{else}} No step flagged.{{end}} A voxel size other than the campaign's is flagged too: lengths, areas
and curvatures of such a step are not comparable with the others.</p>
<table id="settings-table">
<tr><th>step</th><th>t (s)</th><th>voxel (µm)</th><th>filter</th><th>method</th><th>thresholds</th><th>phases</th>
<th>sample y</th><th>sample x</th><th>sample r</th><th>grey drift (of contrast)</th><th>flag</th></tr>{{range .Settings}}
<tr data-settings="{{.Step}}"{{if .Drift}} class="drift"{{end}}><td class="step">{{.Step}}</td><td>{{.Time}}</td><td{{if .VoxelDiffers}} class="differs"{{end}}>{{.Voxel}}{{if .VoxelAssumed}} (assumed: the scan gave none){{end}}</td><td class="step">{{.Filter}}</td><td class="step">{{.Method}}</td><td class="thr">{{.Thresholds}}</td><td class="step"{{with .PhasesNote}} title="{{.}}"{{end}}>{{.Phases}}</td><td>{{.SampleY}}</td><td>{{.SampleX}}</td><td>{{.SampleR}}</td><td class="step">{{.GreyDrift}}</td><td class="step">{{if .VoxelDiffers}}voxel size differs from the campaign's {{$.VoxelSize}}{{if .Drift}}; {{end}}{{end}}{{if .Drift}}threshold drift: {{.DriftNote}}{{end}}</td></tr>{{end}}
</table>{{else}}<p>No steps.</p>{{end}}
</section>

<section id="series">
<h2>Series</h2>
<p>{{len .Table}} steps. All values measured at voxel size {{.VoxelSize}}. R/h is the mean radius of
curvature of the w–n interface in voxels, 2/(κ·h); highlighted where below {{.ResolvedRadius}} voxels, where
image-derived curvature and Pc lose accuracy. "± x" is one standard error of the mean from the spread between
blocks of 32 voxels (spatial batch means); it does not include systematic errors. Pc connected and Pc trapped
are taken over the interfaces of the nonwetting ganglia that touch the inlet or outlet face and of the other
(trapped) ones; the trapped-ganglia column gives the median of their own Pc over ganglia with at least 250 voxel²
of interface, and their count.</p>
<table id="series-table">
<tr><th>step</th><th>t (s)</th><th>S_w</th><th>φ</th><th>Pc (kPa)</th><th>Pc connected (kPa)</th><th>Pc trapped (kPa)</th>
<th>trapped ganglia: median Pc (kPa) (count)</th><th>κ mean (1/mm)</th><th>κ median (1/mm)</th>
<th>R/h (vox)</th><th>a_wn ({{.AreaUnit}})</th><th>θ mean (°)</th><th>θ median (°)</th><th>θ std (°)</th><th>θ samples</th>
<th>ganglia</th><th>largest fraction</th><th>percolates</th></tr>{{range .Table}}
<tr data-step="{{.Step}}"{{if .Unresolved}} class="unresolved"{{end}}><td class="step">{{.Step}}</td><td>{{.Time}}</td><td>{{.Sw}}</td><td>{{.Phi}}</td><td>{{.Pc}}</td><td>{{.PcConnected}}</td><td>{{.PcTrapped}}</td><td>{{.Trapped}}</td><td>{{.KMean}}</td><td>{{.KMedian}}</td><td class="rvox">{{.RVox}}</td><td>{{.AWN}}</td><td>{{.AMean}}</td><td>{{.AMedian}}</td><td>{{.AStd}}</td><td>{{.ASamples}}</td><td>{{.Ganglia}}</td><td>{{.Largest}}</td><td>{{.Perc}}</td></tr>{{end}}
</table>
</section>

<section id="profile">
<h2>Saturation profile and displacement front</h2>
<p>The profile is the nonwetting saturation S_n = n/(n + w) of each slice normal to the flow axis, over the pore
voxels inside the sample, against the distance from the inlet face (the low end of the flow axis); slices are
grouped into at most 256 bins of whole slices. The front position is the far edge of the farthest bin from the
inlet whose S_n exceeds {{.FrontThreshold}} (campaign setting measure.front_threshold), blank when no bin does; its
velocity is the change of the front position between consecutive steps divided by the change of their times,
blank for the first step and next to a step without a front. The front resolves one bin: a finger or a few
ganglia beyond the bulk of the displacement move it as much as a sharp front does.</p>
<table id="front-table">
<tr><th>step</th><th>t (s)</th><th>front (mm)</th><th>front velocity (µm/s)</th></tr>{{range .Fronts}}
<tr data-step="{{.Step}}"><td>{{.Step}}</td><td>{{.Time}}</td><td>{{.Position}}</td><td>{{.Velocity}}</td></tr>{{end}}
</table>
{{range .Profile}}<figure id="{{.ID}}">
{{.SVG}}
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</section>

<section id="pore-filling">
<h2>Pore-filling events</h2>
<p>A pore-filling event is a connected region of pore voxels whose fluid changed between the previous step of the
run and this one (26-connectivity, whole volume: regions are joined across tiles): drainage where wetting became
nonwetting (w→n), imbibition where nonwetting became wetting (n→w). Voxels that are solid or outside the sample in
either step are never events, so a change of the segmented solid is not counted. The previous step is the step
measured under the same parameters that comes last before this one in time; the first step has none. Volumes are
voxel counts times the voxel volume; the rate is the number of events over the time between the two steps; the
largest event's centroid is the mean position of its voxels' centres. Events faster than the time between
scans merge: one region may be several pore fillings, and a pore that filled and emptied again in between is
not seen. Segmentation noise at the fluid–fluid interface flips single voxels and small clusters between steps
even at rest: they are counted, and fill the smallest bins of the volume distribution (compare steady steps).</p>
<table id="filling-table">
<tr><th>step</th><th>t (s)</th><th>previous</th><th>Δt (s)</th><th>drainage events</th><th>drainage volume (µm³)</th><th>drainage rate (1/s)</th><th>imbibition events</th><th>imbibition volume (µm³)</th><th>imbibition rate (1/s)</th><th>largest event</th></tr>{{range .FillingRows}}
<tr data-step="{{.Step}}"><td>{{.Step}}</td><td>{{.Time}}</td><td>{{.Previous}}</td><td>{{.Interval}}</td><td>{{.DCount}}</td><td>{{.DVolume}}</td><td>{{.DRate}}</td><td>{{.IMCount}}</td><td>{{.IMVolume}}</td><td>{{.IMRate}}</td><td>{{.Largest}}{{if .Note}} ({{.Note}}){{end}}</td></tr>{{end}}
</table>
{{range .Filling}}<figure id="{{.ID}}">
{{.SVG}}
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</section>

<section id="ganglion-tracking">
<h2>Ganglion tracking</h2>
<p>The nonwetting ganglia (connected clusters, the measurement's connectivity, whole volume) of the previous step
and of this one are linked where they share voxels: one-to-one (one earlier ganglion, one later ganglion, no
other link of either), split (an earlier ganglion linked to several later ones), merge (a later ganglion linked to
several earlier ones), appeared (a later ganglion without earlier one), vanished (an earlier ganglion without later
one). A ganglion is trapped when it touches neither the inlet nor the outlet face. A trapped ganglion keeps the
birth of a trapped predecessor it is linked to one-to-one and is born anew after a split, a merge or on appearing;
ganglia present when tracking starts count as born then, so lifetimes are lower bounds. The trapped saturation is
the trapped nonwetting volume over the pore volume; a trapped ganglion moved when its one-to-one trapped
predecessor had other voxels (segmentation noise at its surface counts as a move).</p>
<table id="tracking-table">
<tr><th>step</th><th>t (s)</th><th>previous</th><th>one-to-one / splits / merges / appeared / vanished</th><th>trapped saturation</th><th>trapped ganglia moved (fraction)</th><th>mean lifetime (s)</th><th>longest-lived trapped ganglion</th></tr>{{range .TrackingRows}}
<tr data-step="{{.Step}}"><td>{{.Step}}</td><td>{{.Time}}</td><td>{{.Previous}}</td><td>{{.Links}}</td><td>{{.Trapped}}</td><td>{{.Moved}}</td><td>{{.Lifetime}}</td><td>{{.Oldest}}{{if .Note}} ({{.Note}}){{end}}</td></tr>{{end}}
</table>
{{range .Tracking}}<figure id="{{.ID}}">
{{.SVG}}
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</section>

<section id="experiment-log">
<h2>Experiment log</h2>
{{with .RigInfo}}<p data-rig-log="{{.File}}">Rig log <strong>{{.File}}</strong> ({{.Records}} records), read with the column mapping and units of the
campaign configuration (rig_log) and converted to SI. Its times plus {{.ClockOffsetS}} s give the scans' clock; the log is
interpolated at each step's time {{if eq .Interpolation "previous"}}as the value of the last record at or before it{{else}}linearly
between the records around it{{end}}, and a step outside the log's time span gets no value.{{with .Note}} <span class="fail">{{.}}</span>{{end}}</p>{{else}}<p>No rig log:
the campaign's configuration has no rig_log section or no log was stored (<code>sluice run --rig-log FILE</code> while watching,
<code>sluice rig-log CAMPAIGN FILE</code> afterwards).</p>{{end}}
<p>Pore volumes injected = V/V_p, V the volume injected since the log's first record (the injected-volume column, or the pump rate
integrated by the trapezoid rule), V_p the pore volume ({{.RigPoreVolume}} mm³{{with .RigInfo}}{{with .PoreVolumeFrom}}: {{.}}{{end}}{{end}}).
Darcy flux v = q/A, q the flow rate, A the cross-section of the sample normal to the flow ({{.RigArea}} mm²{{with .RigInfo}}{{with .AreaFrom}}: {{.}}{{end}}{{end}}).
Capillary number Ca = μv/σ, μ the viscosity of the injected fluid{{with .RigInfo}}{{if .ViscosityPaS}} ({{.ViscosityPaS}} Pa·s){{end}}{{end}} and σ the
interfacial tension: the usual definition with the Darcy flux (common practice; some authors use the interstitial velocity
v/φ, which gives Ca/φ). The image Pc is σκ over the interfaces of the nonwetting ganglia connected to the inlet or outlet face, set next to
the rig's differential-pressure transducer as Armstrong, Porter &amp; Wildenschild 2012 (Adv. Water Resour. 46:55) compare them:
the transducer adds the viscous pressure drop and sees the phases' pressures at the end faces, so the two agree only near
capillary equilibrium.</p>
<table id="rig-table">
<tr><th>step</th><th>t (s)</th><th>PV injected</th><th>q (ml/min)</th><th>v (µm/s)</th><th>Ca</th><th>Δp transducer (kPa)</th>
<th>image Pc connected (kPa)</th><th>pore p (MPa)</th><th>confining p (MPa)</th><th>T (°C)</th></tr>{{range .Rig}}
<tr data-step="{{.Step}}"><td class="step">{{.Step}}</td><td>{{.Time}}</td><td>{{.PV}}</td><td>{{.Rate}}</td><td>{{.Flux}}</td><td>{{.Ca}}</td><td>{{.DP}}</td><td>{{.PcImage}}</td><td>{{.PorePress}}</td><td>{{.Confining}}</td><td>{{.Temp}}</td></tr>{{end}}
</table>
{{range .Experiment}}<figure id="{{.ID}}">
{{.SVG}}
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</section>

<section id="wettability">
<h2>Wettability: geometric, thermodynamic and topological contact angles</h2>
<p>All angles are measured through the wetting phase. The <b>geometric</b> angle is measured at every sample
point of the three-phase contact line, between the w–n interface and the solid surface in the plane normal to
the line (sluice's own method, science.md §4; published automated methods: AlRatrout et al. 2017, <i>Adv. Water
Resour.</i> 109:158; Scanziani et al. 2017, <i>J. Colloid Interface Sci.</i> 496:51); the table gives its mean
± standard error over spatial blocks and the median with the 25–75 % range of the step's distribution. The
<b>thermodynamic</b> angle is the angle that makes the energy balance of the change since the previous step
hold (Blunt, Lin, Akai &amp; Bijeljic 2019, <i>J. Colloid Interface Sci.</i> 552:59):
cos θ<sub>t</sub> = (P<sub>c</sub>·ΔV<sub>n</sub>/σ − ΔA<sub>wn</sub>) / ΔA<sub>ns</sub>, the work done in
displacing wetting by nonwetting fluid going into the w–n interface and, by Young's equation, into the
replacement of wetting by nonwetting fluid on the solid. ΔV<sub>n</sub>, ΔA<sub>wn</sub> and ΔA<sub>ns</sub> are
the changes of the nonwetting volume and the interfacial areas between the two steps, P<sub>c</sub> the mean of
the two steps' capillary pressure of the connected nonwetting phase (the phase at the pressure the pumps impose;
trapped ganglia keep the curvature they had when cut off), σ the interfacial tension. It assumes both steps are
at equilibrium; its standard error carries that of P<sub>c</sub> only. It is blank for the first step, without a
connected P<sub>c</sub> or σ, when A<sub>ns</sub> changed by less than 1 % (segmentation noise between steps at
rest reaches 0.4 %), and when |cos θ<sub>t</sub>| &gt; 1 (the cosine is still shown): no angle balances
the energy, because the steps were not at equilibrium or the change of A<sub>ns</sub> is small against the errors
of the areas. Large steps bias it: the mean of two P<sub>c</sub> stands for ∫P<sub>c</sub> dV.</p>
<p>The <b>topological</b> angle comes from the Gauss–Bonnet theorem applied to the surfaces of the trapped
nonwetting ganglia, after the idea of Sun, McClure, Mostaghimi, Herring, Berg &amp; Armstrong 2020
(<i>Geophys. Res. Lett.</i> 47:e2019GL086151); the relation and its discretisation are sluice's own derivation
(package measure, topoangle.go). A ganglion's surface consists of its interface with the wetting phase (wn) and
its footprint on the solid (ns), joined along the contact line. Gauss–Bonnet for each, ∫K dA + ∮κ<sub>g</sub> ds
= 2πχ, gives the turning of the contact line within each patch from its Euler characteristic χ and integrated
Gaussian curvature K; on a solid that is flat across the line κ<sub>g,wn</sub> = κ<sub>g,ns</sub> cos φ (φ the
angle inside the nonwetting phase), so cos θ = −(2πχ<sub>wn</sub> − ∫K<sub>wn</sub> dA) / (2πχ<sub>ns</sub> −
∫K<sub>ns</sub> dA), θ = 180° − φ through the wetting phase (a spherical cap on a plane gives it exactly). The
integrals are taken on marching-cubes meshes of a smoothed fluid field and of surfaces parallel to the solid at
4–6 voxels from it (where segmentation does not bias the interface), and cos θ is extrapolated linearly to the
wall; digitised caps of radius 16–24 voxels at 30–120° read within 4°. Only trapped
ganglia away from the image border that rise at least 6 voxels above the solid with a footprint give an angle; in a straight throat the
contact line is a geodesic of the wall (∮κ<sub>g,ns</sub> = 0) and the relation gives none. The table gives the
angle of the summed turnings (with the median of the ganglia's own angles) and how many ganglia contributed.</p>
<table id="angle-table">
<tr><th>step</th><th>t (s)</th><th>geometric mean (°)</th><th>geometric median (25–75 %) (°)</th><th>thermodynamic (°)</th><th>cos θ<sub>t</sub></th><th>topological (°)</th><th>ganglia</th></tr>{{range .Angles}}
<tr data-step="{{.Step}}"><td>{{.Step}}</td><td>{{.Time}}</td><td>{{.GeoMean}}</td><td>{{.GeoMedian}}</td><td>{{.Thermo}}</td><td>{{.ThermoCos}}</td><td>{{.Topo}}</td><td>{{.TopoN}}</td></tr>{{end}}
</table>
{{range .Wettability}}<figure id="{{.ID}}">
{{.SVG}}
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</section>

<section id="accuracy">
<h2>Accuracy for this rock and resolution</h2>
{{with .AccuracyView}}<p>Estimated by <code>sluice accuracy</code>: capillary-equilibrium states (interfaces of one prescribed
curvature κ = P<sub>c</sub>/σ meeting the solid at a prescribed contact angle; level-set quasi-static displacement after
Prodanović &amp; Bryant 2006, <i>J. Colloid Interface Sci.</i> 304:442) were built in a region of this campaign's solid
mask, rendered as scans with the grey levels, noise and blur estimated from step {{.Step}}'s own scan, and segmented and
measured with run {{.Hash}}'s parameters by the code the workers run. <b>Measurement alone</b> measures the states' true
labels; <b>segmentation + measurement</b> measures the rendered scans. S<sub>w</sub> and a<sub>wn</sub> are compared with
the true labels measured by the same code, P<sub>c</sub> and θ with the prescribed values. Bias is the mean error over
the states, spread its standard deviation; a<sub>wn</sub> and P<sub>c</sub> errors are relative.
Region {{.Region}}; grey levels {{.Levels}}; noise {{.Noise}} (1.4826 × MAD inside the solid); blur {{.Blur}}
(edge-spread fit at the solid surface); θ {{.Theta}}; radii of curvature ≥ {{.MinRadius}}; made {{.Created}}.</p>
{{if .Stale}}<p class="fail">This estimate was made under parameter hash {{.Hash}}, not the campaign's current run: rerun
<code>sluice accuracy</code>.</p>{{end}}
<table id="accuracy-table">
<tr><th>quantity</th><th>measured, latest step</th><th>measured, range over steps</th><th>error: measurement alone (bias ± spread)</th><th>error: segmentation + measurement (bias ± spread)</th></tr>{{range .Rows}}
<tr><td>{{.Quantity}}</td><td>{{.Latest}}</td><td>{{.Range}}</td><td>{{.Labels}}</td><td>{{.Grey}}</td></tr>{{end}}
</table>
<table id="accuracy-states">
<tr><th>κ set (1/mm)</th><th>P<sub>c</sub> set (kPa)</th><th>σ/P<sub>c</sub> (voxels)</th><th>S<sub>n</sub> true</th><th>S<sub>w</sub> true</th><th>S<sub>w</sub> scan</th><th>a<sub>wn</sub> true (1/mm)</th><th>a<sub>wn</sub> scan</th><th>κ labels (1/mm)</th><th>κ scan</th><th>θ labels (°)</th><th>θ scan</th><th>note</th></tr>{{range .States}}
<tr><td>{{.Kappa}}</td><td>{{.PcSet}}</td><td>{{.Radius}}</td><td>{{.Sn}}</td><td>{{.Sw}}</td><td>{{.SwGrey}}</td><td>{{.Awn}}</td><td>{{.AwnGrey}}</td><td>{{.KLabels}}</td><td>{{.KGrey}}</td><td>{{.ThLabels}}</td><td>{{.ThGrey}}</td><td>{{.Note}}</td></tr>{{end}}
</table>
<ul>{{range .Notes}}<li>{{.}}</li>{{end}}</ul>
{{else}}<p>No accuracy estimate for this run: <code>sluice accuracy CAMPAIGN</code> makes one (minutes on two cores for
a 96³ region) and stores it with the run. Image-derived capillary pressure and contact angles are estimates; the
estimate says how far off they may be for this rock at this resolution.</p>{{end}}
</section>

<section id="geometric-state">
<h2>Geometric state</h2>
<p>The state of the fluids as four measures of the nonwetting phase and the w–n interface (McClure, Armstrong,
Berrill, Schlüter, Berg, Gray &amp; Miller 2018, Phys. Rev. Fluids 3:084306): the wetting saturation S_w; the
specific interfacial area a_wn = A_wn/V (V the bulk volume of the sample); the integral of the mean curvature
H = (k1 + k2)/2 over the w–n interface, J_wn = ∫H dA, normal out of the nonwetting phase (a nonwetting ball of
radius r has J = 4πr: the convention of the Minkowski functional M = ∫H dS); and the Euler characteristic χ_n of the
nonwetting phase ({{if .Connectivity}}{{.Connectivity}}{{else}}26{{end}}-connected: components − tunnels + cavities).
J_wn is estimated as A_wn·κ̄/2, κ̄ the area-weighted mean total curvature of the interface away from the solid, so
it takes the interface next to the solid to have the mean curvature of the rest. The paper finds these four measures
related by one state function where Pc(S_w) alone is hysteretic; the figure follows each step's state in time.</p>
<table id="state-table">
<tr><th>step</th><th>t (s)</th><th>S_w</th><th>a_wn ({{.AreaUnit}})</th><th>J_wn (mm)</th><th>J_wn/V (mm/mm³)</th><th>χ_n</th><th>χ_n/V (1/mm³)</th></tr>{{range .States}}
<tr data-step="{{.Step}}"><td class="step">{{.Step}}</td><td>{{.Time}}</td><td>{{.Sw}}</td><td>{{.AWN}}</td><td>{{.J}}</td><td>{{.JV}}</td><td>{{.Chi}}</td><td>{{.ChiV}}</td></tr>{{end}}
</table>
{{range .Geometric}}<figure id="{{.ID}}">
{{.SVG}}
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</section>

<section id="plots">
<h2>Figures</h2>
{{range .Figures}}<figure id="{{.ID}}">
{{.SVG}}
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</section>

<section id="distributions">
<h2>Contact-angle and curvature distributions</h2>
<p>Contact angles are measured through the wetting phase; the bars are the latest step with samples, the line
all steps together. Curvature is the area-weighted mean and the median of the total curvature κ = k1 + k2
over the w–n interface away from the solid, per step.</p>
{{range .Distributions}}<figure id="{{.ID}}">
{{.SVG}}
<figcaption>{{.Caption}}</figcaption>
</figure>
{{end}}</section>
</body>
</html>
`))
