package riglog

import (
	"fmt"
	"sort"
	"strings"
)

// unitConv converts a value in a declared unit to SI: si = x·scale + shift.
type unitConv struct{ scale, shift float64 }

func (u unitConv) si(x float64) float64   { return x*u.scale + u.shift }
func (u unitConv) from(v float64) float64 { return (v - u.shift) / u.scale }

// Units lists the units each quantity may be declared in, with the factor
// to SI (and, for temperature, the offset). Spellings are case-sensitive
// where SI prefixes need it (mPa is not MPa).
//
// Sources: SI and its prefixes (BIPM, The International System of Units,
// 9th ed. 2019): 1 L = 1e-3 m³, 1 bar = 1e5 Pa (accepted non-SI unit),
// 0 °C = 273.15 K; 1 psi = 1 lbf/in² = 4.4482216152605 N / (0.0254 m)² =
// 6894.757293168361 Pa (international pound and inch, NIST SP 811 App. B);
// 1 atm = 101325 Pa (standard atmosphere, by definition).
var Units = map[string]map[string]unitConv{
	QTime: {
		"s": {1, 0}, "min": {60, 0}, "h": {3600, 0}, "ms": {1e-3, 0},
	},
	QVolume: {
		"m3": {1, 0}, "m³": {1, 0}, "l": {1e-3, 0}, "L": {1e-3, 0}, "ml": {1e-6, 0}, "mL": {1e-6, 0},
		"cm3": {1e-6, 0}, "cm³": {1e-6, 0}, "ul": {1e-9, 0}, "uL": {1e-9, 0}, "µl": {1e-9, 0}, "µL": {1e-9, 0},
		"mm3": {1e-9, 0}, "mm³": {1e-9, 0},
	},
	QRate:      rateUnits(),
	QDiffPress: pressureUnits(), QPorePress: pressureUnits(), QConfinPress: pressureUnits(),
	QTemperature: {
		"K": {1, 0}, "degC": {1, 273.15}, "°C": {1, 273.15}, "C": {1, 273.15},
	},
}

func pressureUnits() map[string]unitConv {
	return map[string]unitConv{
		"Pa": {1, 0}, "hPa": {100, 0}, "kPa": {1e3, 0}, "MPa": {1e6, 0},
		"mbar": {100, 0}, "bar": {1e5, 0}, "psi": {6894.757293168361, 0}, "atm": {101325, 0},
	}
}

// rateUnits are volumes per time: every volume unit over s, min or h.
func rateUnits() map[string]unitConv {
	out := map[string]unitConv{}
	for vu, v := range map[string]float64{"m3": 1, "m³": 1, "l": 1e-3, "L": 1e-3, "ml": 1e-6, "mL": 1e-6,
		"cm3": 1e-6, "cm³": 1e-6, "ul": 1e-9, "uL": 1e-9, "µl": 1e-9, "µL": 1e-9, "mm3": 1e-9, "mm³": 1e-9} {
		for tu, t := range map[string]float64{"s": 1, "min": 60, "h": 3600} {
			out[vu+"/"+tu] = unitConv{v / t, 0}
		}
	}
	return out
}

// convert returns the conversion of unit for quantity q, or an error
// naming the units it accepts.
func convert(q, unit string) (unitConv, error) {
	us, ok := Units[q]
	if !ok {
		return unitConv{}, fmt.Errorf("unknown quantity %q", q)
	}
	if unit == "" {
		return unitConv{}, fmt.Errorf("no unit declared (one of %s)", unitList(us))
	}
	u, ok := us[strings.TrimSpace(unit)]
	if !ok {
		return unitConv{}, fmt.Errorf("unknown unit %q for %s (one of %s)", unit, q, unitList(us))
	}
	return u, nil
}

func unitList(us map[string]unitConv) string {
	var names []string
	for k := range us {
		if !strings.ContainsAny(k, "³µ") { // the ASCII spellings suffice in a message
			names = append(names, k)
		}
	}
	sort.Strings(names)
	if len(names) > 12 {
		names = append(names[:12], "…")
	}
	return strings.Join(names, ", ")
}
