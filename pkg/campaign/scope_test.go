package campaign

import (
	"strings"
	"testing"
)

// TestThresholdScopeKey: segment.threshold_scope reads step or campaign,
// changes the parameter hash between them (unset and "step" are the same
// run), and anything else, or isodata in scope campaign, or user thresholds
// out of order, is refused in one line naming the file and the key.
func TestThresholdScopeKey(t *testing.T) {
	unset, err := Parse("a.yaml", []byte("segment:\n  threshold: otsu\n"))
	if err != nil {
		t.Fatal(err)
	}
	step, err := Parse("b.yaml", []byte("segment:\n  threshold_scope: step\n"))
	if err != nil {
		t.Fatal(err)
	}
	camp, err := Parse("c.yaml", []byte("segment:\n  threshold_scope: campaign\n"))
	if err != nil || camp.Segment.ThresholdScope != "campaign" {
		t.Fatalf("campaign scope: %v %q", err, camp.Segment.ThresholdScope)
	}
	if unset.Hash() != step.Hash() || camp.Hash() == step.Hash() || unset.Hash() != Default().Hash() {
		t.Errorf("hashes unset %s step %s campaign %s default %s", unset.Hash(), step.Hash(), camp.Hash(), Default().Hash())
	}
	if s, err := step.Set([]string{"segment.threshold_scope=campaign"}); err != nil || s.Hash() != camp.Hash() {
		t.Errorf("--set segment.threshold_scope=campaign: %v, hash %s want %s", err, s.Hash(), camp.Hash())
	}
	for _, bad := range []struct{ yaml, want string }{
		{"segment:\n  threshold_scope: session\n", "threshold_scope"},
		{"segment:\n  threshold_scope: campaign\n  threshold: isodata\n  reference: true\n", "threshold_scope"},
		{"segment:\n  threshold_scope: campaign\n  threshold: fixed\n  fixed: [30000, 20000]\n", "fixed"},
	} {
		_, err := Parse("bad.yaml", []byte(bad.yaml))
		if err == nil || !strings.Contains(err.Error(), "bad.yaml") || !strings.Contains(err.Error(), bad.want) || strings.Contains(err.Error(), "\n") {
			t.Errorf("%q: %v, want one line naming bad.yaml and %s", bad.yaml, err, bad.want)
		}
	}
}
