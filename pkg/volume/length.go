package volume

import (
	"fmt"
	"strconv"
	"strings"
)

// ParseLength parses a length with a unit suffix ("2.5um", "800nm",
// "0.0025mm", "1e-6m"; "µm" is accepted for "um") and returns metres.
// A bare number is taken in micrometres, the unit voxel sizes are quoted in.
func ParseLength(s string) (float64, error) {
	t := strings.TrimSpace(s)
	t = strings.ReplaceAll(t, "µ", "u")
	t = strings.ReplaceAll(t, "μ", "u")
	// Divide by the unit's inverse: 2.5/1e6 is the double nearest to
	// 2.5e-6, 2.5*1e-6 is not always.
	per := 1e6
	for _, u := range []struct {
		suffix string
		per    float64
	}{{"nm", 1e9}, {"um", 1e6}, {"mm", 1e3}, {"m", 1}} {
		if strings.HasSuffix(t, u.suffix) {
			t = strings.TrimSpace(strings.TrimSuffix(t, u.suffix))
			per = u.per
			break
		}
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || v <= 0 || v != v || v > 1e300 {
		return 0, fmt.Errorf("volume: bad length %q (want a positive number with nm, um, mm or m)", s)
	}
	return v / per, nil
}

// FormatLength prints a length in metres with a convenient unit.
func FormatLength(m float64) string {
	switch {
	case m >= 1e-3:
		return strconv.FormatFloat(m*1e3, 'g', 6, 64) + "mm"
	case m >= 1e-6:
		return strconv.FormatFloat(m*1e6, 'g', 6, 64) + "um"
	default:
		return strconv.FormatFloat(m*1e9, 'g', 6, 64) + "nm"
	}
}
