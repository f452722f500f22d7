package main

import (
	"errors"
	"fmt"

	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Hints for a label volume whose codes are not the phases': measure takes
// them as flags, segment from the campaign config.
const (
	codesFlagsHint  = "set --solid/--wetting/--nonwetting"
	codesConfigHint = "set segment.codes {solid, wetting, nonwetting} in --config"
)

// checkLabelCodes refuses a label volume read from path (a user's, not one
// sluice has just made) that holds a code none of the phases nor outside:
// measured as it was, that code counted as solid. The error is one line:
// path, the code, its voxel count, the codes in force and hint.
func checkLabelCodes(path string, lab *volume.Labels, codes phase.Codes, hint string) error {
	err := codes.Check(lab.Pix)
	var u *phase.UnknownCodeError
	if errors.As(err, &u) {
		return fmt.Errorf("%s: %s; %s", path, u.Reason(), hint)
	}
	return err
}
