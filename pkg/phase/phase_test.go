package phase

import (
	"errors"
	"testing"
)

// Source: the observation, labels coded 1/2/3 read with the
// default codes 0/1/2: code 3 is no phase and must be named with its count.
func TestCheckUnknownCodes(t *testing.T) {
	pix := make([]uint8, 0, 60000)
	for i := 0; i < 41234; i++ {
		pix = append(pix, 3)
	}
	for i := 0; i < 10000; i++ {
		pix = append(pix, 1, 2, Outside)
	}
	pix = append(pix, 9, 9, 200)
	err := Default().Check(pix)
	var u *UnknownCodeError
	if !errors.As(err, &u) {
		t.Fatalf("Check = %v, want an *UnknownCodeError", err)
	}
	if u.Code != 3 || u.Count != 41234 || len(u.Others) != 2 {
		t.Errorf("got code %d × %d and others %v, want code 3 × 41234 and 2 others", u.Code, u.Count, u.Others)
	}
	want := "label code 3 (41 234 voxels) is none of solid 0, wetting 1, nonwetting 2, outside 255 (and 2 more codes that are none: 9, 200)"
	if u.Reason() != want {
		t.Errorf("reason\n %q\nwant\n %q", u.Reason(), want)
	}
	if err.Error() != "phase: "+want {
		t.Errorf("error %q", err)
	}
	// Every code known: no error; other codes make the same labels valid.
	if err := Default().Check([]uint8{0, 1, 2, Outside, 0}); err != nil {
		t.Errorf("known codes refused: %v", err)
	}
	if err := (Codes{Solid: 3, Wetting: 1, Nonwetting: 2}).Check([]uint8{3, 1, 2, Outside}); err != nil {
		t.Errorf("codes 3/1/2 refused: %v", err)
	}
	// One voxel of an unknown code is enough.
	if err := Default().Check([]uint8{0, 1, 2, 254}); err == nil {
		t.Errorf("code 254 accepted")
	}
}

func TestGroupThousands(t *testing.T) {
	for n, want := range map[int64]string{0: "0", 7: "7", 999: "999", 1000: "1 000", 41234: "41 234", 1234567: "1 234 567", 4000000000: "4 000 000 000"} {
		if got := groupThousands(n); got != want {
			t.Errorf("groupThousands(%d) = %q, want %q", n, got, want)
		}
	}
}
