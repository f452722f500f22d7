package plots

import (
	"testing"

	"sluice/pkg/events"
)

// TestEveryEventKindVisible: each event kind the detector reports has a
// marker line with a width (a kind without a style is drawn invisible).
func TestEveryEventKindVisible(t *testing.T) {
	for _, k := range events.Kinds {
		if s, ok := eventStyles[k]; !ok || !(s.Width > 0) {
			t.Errorf("event kind %s has no visible marker style (%+v)", k, s)
		}
	}
}
