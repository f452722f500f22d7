// Package riglog reads the experiment log a flow rig writes next to the
// scans — a CSV file with time, injected volume or pump rate, differential
// pressure, pore and confining pressure and temperature — and ties it to
// the steps of a campaign: the log is interpolated at each step's time and
// gives the pore volumes injected, the Darcy flux and the capillary number
// of the step, and the transducer pressure next to the capillary pressure
// measured on the images (the comparison of Armstrong, Porter &
// Wildenschild 2012, Adv. Water Resour. 46:55).
//
// # File
//
// The first line that is neither empty nor a comment (# …) is the header;
// every later non-empty, non-comment line is one record with as many
// fields as the header. The campaign configuration (Config) maps header
// names to quantities and declares the unit of each (Units); values are
// converted to SI on reading. A record that cannot be read right is
// refused with the file name and line number, in one line: a field that is
// not a number, a missing time, volume or rate, a wrong number of fields,
// a time that does not increase. An unknown unit or a mapped column that
// is not in the header refuses the file.
//
// # Clocks
//
// The log's times are on the rig's clock, the steps' times (time_s) on the
// scans' clock. Config.ClockOffsetS is added to every log time to put it
// on the scans' clock: t_scan = t_log + offset. Only elapsed times (a
// number with a unit) are read; a clock time such as 2026-12-05T10:00:00
// is refused as not a number.
//
// # Interpolation
//
// A quantity at a step's time t is interpolated between the records around
// t: linearly (Config.Interpolation "linear", the default) or as the value
// of the last record at or before t ("previous", a sample-and-hold of what
// the rig last wrote). A step outside the log's time span gets nothing
// (null): before the first record, or after the last one — the log may
// simply not have been written that far yet, and it is read again at the
// next step.
//
// # Derived quantities
//
//   - Injected volume V(t): the injected-volume column at t minus its
//     value at the first record; without that column, the rate column
//     integrated from the first record (trapezoid rule over the records).
//   - Flow rate q(t): the rate column at t; without it, the slope of the
//     injected volume over the record interval holding t (with
//     "previous", the interval ending at the last record at or before t;
//     at the first record, the first interval).
//   - Pore volumes injected PV(t) = V(t)/V_p. The pore volume V_p is
//     Config.PoreVolumeM3 when given; else the image porosity φ of the
//     campaign's first step times Config.SampleVolumeM3, or times the bulk
//     volume of the sample imaged in that step when no sample volume is
//     given.
//   - Darcy flux (superficial velocity) v = q/A, A the cross-section of
//     the sample normal to the flow: Config.AreaM2, or from the images the
//     bulk volume of the first step divided by the scan's length along the
//     flow axis.
//   - Capillary number Ca = μv/σ, μ the viscosity of the injected fluid
//     (Config.ViscosityPaS), σ the interfacial tension of the campaign
//     (ift_n_per_m). This is the usual definition with the Darcy flux
//     (common practice); some authors use the interstitial velocity v/φ,
//     which gives Ca/φ.
package riglog

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Quantities the log can hold, by their configuration key.
const (
	QTime        = "time"
	QVolume      = "injected_volume"
	QRate        = "rate"
	QDiffPress   = "differential_pressure"
	QPorePress   = "pore_pressure"
	QConfinPress = "confining_pressure"
	QTemperature = "temperature"
)

// Column maps one quantity to a header name of the CSV and declares its
// unit (Units).
type Column struct {
	Column string `json:"column" yaml:"column"`
	Unit   string `json:"unit" yaml:"unit"`
}

// Columns maps the quantities to the CSV. Time is required, and one of
// InjectedVolume and Rate; the others are optional.
type Columns struct {
	Time                 Column  `json:"time" yaml:"time"`
	InjectedVolume       *Column `json:"injected_volume,omitempty" yaml:"injected_volume,omitempty"`
	Rate                 *Column `json:"rate,omitempty" yaml:"rate,omitempty"`
	DifferentialPressure *Column `json:"differential_pressure,omitempty" yaml:"differential_pressure,omitempty"`
	PorePressure         *Column `json:"pore_pressure,omitempty" yaml:"pore_pressure,omitempty"`
	ConfiningPressure    *Column `json:"confining_pressure,omitempty" yaml:"confining_pressure,omitempty"`
	Temperature          *Column `json:"temperature,omitempty" yaml:"temperature,omitempty"`
}

// Interpolation methods.
const (
	Linear   = "linear"
	Previous = "previous"
)

// Config is the rig_log section of a campaign configuration.
type Config struct {
	Columns Columns `json:"columns" yaml:"columns"`
	// Delimiter is the field separator: "," (default), ";" or "tab".
	Delimiter string `json:"delimiter,omitempty" yaml:"delimiter,omitempty"`
	// ClockOffsetS is added to the log's times to put them on the scans'
	// clock (s).
	ClockOffsetS float64 `json:"clock_offset_s" yaml:"clock_offset_s"`
	// Interpolation is "linear" (default) or "previous".
	Interpolation string `json:"interpolation,omitempty" yaml:"interpolation,omitempty"`
	// ViscosityPaS is the dynamic viscosity of the injected fluid (Pa·s);
	// 0 leaves the capillary number out.
	ViscosityPaS float64 `json:"viscosity_pa_s,omitempty" yaml:"viscosity_pa_s,omitempty"`
	// AreaM2 is the cross-section of the sample normal to the flow (m²);
	// 0 takes it from the images.
	AreaM2 float64 `json:"area_m2,omitempty" yaml:"area_m2,omitempty"`
	// PoreVolumeM3 is the sample's pore volume (m³); 0 takes it from the
	// images (porosity × SampleVolumeM3, or × the imaged bulk volume).
	PoreVolumeM3 float64 `json:"pore_volume_m3,omitempty" yaml:"pore_volume_m3,omitempty"`
	// SampleVolumeM3 is the bulk volume of the whole sample (m³), used
	// with the image porosity when PoreVolumeM3 is not given.
	SampleVolumeM3 float64 `json:"sample_volume_m3,omitempty" yaml:"sample_volume_m3,omitempty"`
}

// Clone returns a deep copy of c (nil for nil): decoding into the copy,
// as campaign's --set does, leaves c as it was.
func (c *Config) Clone() *Config {
	if c == nil {
		return nil
	}
	d := *c
	for _, p := range []**Column{&d.Columns.InjectedVolume, &d.Columns.Rate, &d.Columns.DifferentialPressure,
		&d.Columns.PorePressure, &d.Columns.ConfiningPressure, &d.Columns.Temperature} {
		if *p != nil {
			v := **p
			*p = &v
		}
	}
	return &d
}

// mapped lists the quantities of c with their columns, time first.
func (c *Config) mapped() []struct {
	q   string
	col Column
} {
	out := []struct {
		q   string
		col Column
	}{{QTime, c.Columns.Time}}
	for _, m := range []struct {
		q   string
		col *Column
	}{{QVolume, c.Columns.InjectedVolume}, {QRate, c.Columns.Rate}, {QDiffPress, c.Columns.DifferentialPressure},
		{QPorePress, c.Columns.PorePressure}, {QConfinPress, c.Columns.ConfiningPressure}, {QTemperature, c.Columns.Temperature}} {
		if m.col != nil {
			out = append(out, struct {
				q   string
				col Column
			}{m.q, *m.col})
		}
	}
	return out
}

// Validate checks the configuration: columns named, every unit known for
// its quantity, numbers in range.
func (c *Config) Validate() error {
	if c.Columns.Time.Column == "" {
		return errors.New("rig_log.columns.time: no column named (the log needs a time column)")
	}
	if c.Columns.InjectedVolume == nil && c.Columns.Rate == nil {
		return errors.New("rig_log.columns: map injected_volume or rate (or both)")
	}
	seen := map[string]string{}
	for _, m := range c.mapped() {
		if strings.TrimSpace(m.col.Column) == "" {
			return fmt.Errorf("rig_log.columns.%s: no column named", m.q)
		}
		if _, err := convert(m.q, m.col.Unit); err != nil {
			return fmt.Errorf("rig_log.columns.%s: %w", m.q, err)
		}
		if o, ok := seen[m.col.Column]; ok {
			return fmt.Errorf("rig_log.columns.%s: column %q is mapped to %s too", m.q, m.col.Column, o)
		}
		seen[m.col.Column] = m.q
	}
	if _, err := c.delimiter(); err != nil {
		return err
	}
	switch c.Interpolation {
	case "", Linear, Previous:
	default:
		return fmt.Errorf("rig_log.interpolation %q (want linear or previous)", c.Interpolation)
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"clock_offset_s", c.ClockOffsetS}, {"viscosity_pa_s", c.ViscosityPaS}, {"area_m2", c.AreaM2},
		{"pore_volume_m3", c.PoreVolumeM3}, {"sample_volume_m3", c.SampleVolumeM3}} {
		if math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			return fmt.Errorf("rig_log.%s must be a finite number, not %g", f.name, f.v)
		}
		if f.name != "clock_offset_s" && f.v < 0 {
			return fmt.Errorf("rig_log.%s must be ≥ 0 (0: not given), not %g", f.name, f.v)
		}
	}
	// Water at 20 °C is 1.0e-3 Pa·s; a value above 10 Pa·s is a unit
	// typed wrong (mPa·s for Pa·s), not a fluid pumped through rock.
	if c.ViscosityPaS > 10 {
		return fmt.Errorf("rig_log.viscosity_pa_s %g Pa·s is not plausible; the unit is Pa·s (water at 20 °C: 0.001)", c.ViscosityPaS)
	}
	return nil
}

// InterpolationOrDefault returns the interpolation method, "linear" when
// not set.
func (c *Config) InterpolationOrDefault() string {
	if c.Interpolation == "" {
		return Linear
	}
	return c.Interpolation
}

func (c *Config) delimiter() (byte, error) {
	switch c.Delimiter {
	case "", ",":
		return ',', nil
	case ";":
		return ';', nil
	case "tab", "\t":
		return '\t', nil
	}
	return 0, fmt.Errorf("rig_log.delimiter %q (want \",\", \";\" or tab)", c.Delimiter)
}

// Log is a rig log in SI units on the scans' clock. Series of quantities
// the configuration does not map are nil; a value the record left blank
// is NaN.
type Log struct {
	// Source is the file name the log was read from.
	Source string
	// Time (s, scans' clock, increasing).
	Time []float64
	// Volume is the injected volume since the first record (m³); Rate the
	// flow rate (m³/s) as logged (nil without a rate column).
	Volume, Rate []float64
	// Pressures (Pa) and temperature (K).
	DiffPress, PorePress, ConfinPress, Temperature []float64
	// Lines is the line number of each record in the file.
	Lines []int
}

// Len returns the number of records.
func (l *Log) Len() int { return len(l.Time) }

// Parse reads a rig log. name is the file name errors carry. An empty
// log (header only) is valid. A last line without its line end is read
// like the others (see ParseComplete for a file still being written).
func Parse(name string, data []byte, cfg Config) (*Log, error) {
	return parse(name, data, cfg)
}

// ParseComplete reads the complete lines of a log that may still be being
// written: a last line without its line end is left out, as the rig may
// be in the middle of writing it.
func ParseComplete(name string, data []byte, cfg Config) (*Log, error) {
	if i := bytes.LastIndexByte(data, '\n'); i < len(data)-1 {
		data = data[:i+1]
	}
	return parse(name, data, cfg)
}

// Error is a refusal of a log, with the file and line.
type Error struct {
	File string
	Line int // 0: the whole file
	Msg  string
}

func (e *Error) Error() string {
	if e.Line > 0 {
		return fmt.Sprintf("%s line %d: %s", e.File, e.Line, e.Msg)
	}
	return e.File + ": " + e.Msg
}

func parse(name string, data []byte, cfg Config) (*Log, error) {
	if err := cfg.Validate(); err != nil {
		return nil, &Error{File: name, Msg: err.Error()}
	}
	delim, _ := cfg.delimiter()
	maps := cfg.mapped()
	conv := make([]unitConv, len(maps))
	for i, m := range maps {
		conv[i], _ = convert(m.q, m.col.Unit)
	}
	l := &Log{Source: name}
	idx := make([]int, len(maps)) // field index of each mapped column
	vals := make([][]float64, len(maps))
	nfields := -1
	lines := strings.Split(string(data), "\n")
	prevT := math.Inf(-1)
	for ln, raw := range lines {
		line := strings.TrimRight(raw, "\r")
		if ln == 0 {
			line = strings.TrimPrefix(line, "\ufeff") // a byte-order mark
		}
		if strings.TrimSpace(line) == "" || strings.HasPrefix(strings.TrimSpace(line), "#") {
			continue
		}
		fields := strings.Split(line, string(delim))
		for i := range fields {
			fields[i] = strings.TrimSpace(fields[i])
		}
		if nfields < 0 { // the header
			nfields = len(fields)
			for i, m := range maps {
				idx[i] = -1
				for j, f := range fields {
					if f == m.col.Column {
						if idx[i] >= 0 {
							return nil, &Error{File: name, Line: ln + 1, Msg: fmt.Sprintf("column %q appears twice in the header", f)}
						}
						idx[i] = j
					}
				}
				if idx[i] < 0 {
					return nil, &Error{File: name, Line: ln + 1, Msg: fmt.Sprintf("column %q (%s) is not in the header %q", m.col.Column, m.q, line)}
				}
			}
			continue
		}
		if len(fields) != nfields {
			return nil, &Error{File: name, Line: ln + 1, Msg: fmt.Sprintf("%d fields, the header has %d", len(fields), nfields)}
		}
		for i, m := range maps {
			f := fields[idx[i]]
			v := math.NaN()
			if f != "" {
				x, err := strconv.ParseFloat(f, 64)
				if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
					return nil, &Error{File: name, Line: ln + 1, Msg: fmt.Sprintf("column %q (%s): %q is not a number", m.col.Column, m.q, f)}
				}
				v = conv[i].si(x)
			} else if m.q == QTime || m.q == QVolume || m.q == QRate {
				return nil, &Error{File: name, Line: ln + 1, Msg: fmt.Sprintf("column %q (%s) is empty", m.col.Column, m.q)}
			}
			if m.q == QTime {
				v += cfg.ClockOffsetS
				if !(v > prevT) {
					return nil, &Error{File: name, Line: ln + 1, Msg: fmt.Sprintf("time %s is not after the previous record's (%s): time must increase",
						f, strconv.FormatFloat(conv[i].from(prevT-cfg.ClockOffsetS), 'g', -1, 64))}
				}
				prevT = v
			}
			if m.q == QTemperature && v < 0 {
				return nil, &Error{File: name, Line: ln + 1, Msg: fmt.Sprintf("column %q (%s): %s %s is below absolute zero", m.col.Column, m.q, f, m.col.Unit)}
			}
			vals[i] = append(vals[i], v)
		}
		l.Lines = append(l.Lines, ln+1)
	}
	if nfields < 0 {
		return nil, &Error{File: name, Msg: "no header line"}
	}
	for i, m := range maps {
		v := vals[i]
		if v == nil {
			v = []float64{}
		}
		switch m.q {
		case QTime:
			l.Time = v
		case QVolume:
			l.Volume = v
		case QRate:
			l.Rate = v
		case QDiffPress:
			l.DiffPress = v
		case QPorePress:
			l.PorePress = v
		case QConfinPress:
			l.ConfinPress = v
		case QTemperature:
			l.Temperature = v
		}
	}
	if l.Volume != nil {
		if len(l.Volume) > 0 {
			v0 := l.Volume[0]
			for i := range l.Volume {
				l.Volume[i] -= v0
			}
		}
	} else {
		// The rate integrated by the trapezoid rule from the first record.
		l.Volume = make([]float64, len(l.Time))
		for i := 1; i < len(l.Time); i++ {
			l.Volume[i] = l.Volume[i-1] + 0.5*(l.Rate[i-1]+l.Rate[i])*(l.Time[i]-l.Time[i-1])
		}
	}
	return l, nil
}

// Sample is the log at one time: NaN where it holds nothing there.
type Sample struct {
	Volume, Rate, DiffPress, PorePress, ConfinPress, Temperature float64
}

// At returns the log interpolated at time t (scans' clock) by method
// (Linear or Previous); every value is NaN when t lies outside the log's
// time span or the log is empty.
func (l *Log) At(t float64, method string) Sample {
	nan := math.NaN()
	s := Sample{nan, nan, nan, nan, nan, nan}
	n := l.Len()
	if n == 0 || math.IsNaN(t) || t < l.Time[0] || t > l.Time[n-1] {
		return s
	}
	// i: the last record at or before t; j = i+1 the next (or i at the end).
	i := 0
	for lo, hi := 0, n-1; lo <= hi; {
		m := (lo + hi) / 2
		if l.Time[m] <= t {
			i, lo = m, m+1
		} else {
			hi = m - 1
		}
	}
	j := min(i+1, n-1)
	w := 0.0
	if j > i && method != Previous {
		w = (t - l.Time[i]) / (l.Time[j] - l.Time[i])
	}
	at := func(v []float64) float64 {
		if v == nil {
			return nan
		}
		if w == 0 {
			return v[i]
		}
		return v[i] + w*(v[j]-v[i]) // NaN when either end is blank
	}
	s.Volume = at(l.Volume)
	s.DiffPress, s.PorePress, s.ConfinPress, s.Temperature = at(l.DiffPress), at(l.PorePress), at(l.ConfinPress), at(l.Temperature)
	if l.Rate != nil {
		s.Rate = at(l.Rate)
	} else if n > 1 {
		// The slope of the volume over the interval holding t: the one
		// ending at t when t is a record's time (but the first), and with
		// Previous the one ending at the last record at or before t, so
		// no later record is used.
		a, b := i, j
		switch {
		case (method == Previous || t == l.Time[i]) && i > 0:
			a, b = i-1, i
		case b == a || method == Previous:
			a, b = 0, 1
		}
		s.Rate = (l.Volume[b] - l.Volume[a]) / (l.Time[b] - l.Time[a])
	}
	return s
}
