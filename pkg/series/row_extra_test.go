package series

import (
	"bytes"
	"encoding/json"
	"testing"
)

// TestRoundTripBytesStable: a row read back from series.json encodes to the
// same bytes as when it was first written (step and time_s once each).
func TestRoundTripBytesStable(t *testing.T) {
	s := 0.25
	r := Row{Step: "scan-0001", Time: 45, SatWetting: &s}
	first, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	var back Row
	if err := json.Unmarshal(first, &back); err != nil {
		t.Fatal(err)
	}
	again, _ := json.Marshal(back)
	if !bytes.Equal(first, again) {
		t.Fatalf("re-encoded row differs:\n%s\n%s", first, again)
	}
	if n := bytes.Count(again, []byte(`"step"`)); n != 1 {
		t.Errorf("step written %d times", n)
	}
}
