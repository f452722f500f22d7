package main

import (
	"errors"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestBinaryErrorsSpeakPlainly runs the built `sluice` program (not the
// command function) on real bad inputs: a truncated raw file, a TIFF with
// an unsupported compression, a Zarr array with a broken .zarray, a
// config with a misspelt key. Each gives exit 2 and one line on stderr
// naming the file, with no Go package prefix ("volio:", "campaign:" …).
func TestBinaryErrorsSpeakPlainly(t *testing.T) {
	bin := filepath.Join(t.TempDir(), "sluice")
	if out, err := exec.Command("go", "build", "-o", bin, "sluice/services/sluice").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}
	for _, c := range []struct {
		args []string
		file string
	}{
		{[]string{"measure", "--no-sample", bad("truncated.raw")}, bad("truncated.raw")},
		{[]string{"measure", "--no-sample", bad("tiff-jpeg.tif")}, bad("tiff-jpeg.tif")},
		{[]string{"measure", "--no-sample", bad("zarr-bad-json")}, filepath.Join(bad("zarr-bad-json"), ".zarray")},
		{[]string{"measure", "--labels", bad("zarr-missing-chunk")}, bad("zarr-missing-chunk")},
		{[]string{"measure", "--config", bad("config-unknown-key.yaml"), bad("duplicate-step.raw")}, bad("config-unknown-key.yaml")},
		{[]string{"measure", "--config", bad("config-thresholds-order.yaml"), bad("duplicate-step.raw")}, bad("config-thresholds-order.yaml")},
		{[]string{"segment", "--no-sample", bad("truncated.raw"), filepath.Join(t.TempDir(), "out.raw")}, bad("truncated.raw")},
	} {
		cmd := exec.Command(bin, c.args...)
		var stderr strings.Builder
		cmd.Stderr = &stderr
		err := cmd.Run()
		var ee *exec.ExitError
		if !errors.As(err, &ee) || ee.ExitCode() != exitBadInput {
			t.Errorf("%v: %v, want exit status 2", c.args, err)
		}
		oneLineError(t, strings.Join(c.args, " "), ee.ExitCode(), stderr.String(), c.file)
	}
}
