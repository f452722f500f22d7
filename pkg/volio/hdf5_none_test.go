//go:build !hdf5 || !cgo

package volio

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// A build without HDF5 support recognises an HDF5 file by its signature
// (also after a 512-byte user block) and says in one line how to get a
// build that reads it, instead of reading it as raw voxels.
func TestHDF5NotBuiltIn(t *testing.T) {
	dir := t.TempDir()
	for _, off := range []int{0, 512} {
		name := filepath.Join(dir, "scan.h5")
		b := make([]byte, 4096)
		copy(b[off:], hdf5Signature)
		if err := os.WriteFile(name, b, 0o644); err != nil {
			t.Fatal(err)
		}
		// Shape and dtype would make it a valid raw file of 4096 bytes.
		_, err := Open(name, Options{Shape: [3]int{1, 64, 64}, DType: 1})
		if err == nil || !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "scan.h5: HDF5 file, but this sluice was built without HDF5 support") ||
			!strings.Contains(err.Error(), "make build") || strings.Contains(err.Error(), "\n") {
			t.Errorf("signature at %d: got %v", off, err)
		}
	}
}
