package volio

import (
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"strings"
	"testing"

	"sluice/pkg/volume"
)

// refPython is the Debian interpreter that has numpy, zarr, numcodecs,
// tifffile, scikit-image and PIL; the python3 first on PATH lacks them.
const refPython = "/usr/bin/python3"

// runPython runs script with args under refPython after checking that the
// modules import. Missing modules fail the test under CI and skip it
// otherwise.
func runPython(t *testing.T, modules []string, script string, args ...string) string {
	t.Helper()
	check := exec.Command(refPython, "-c", "import "+strings.Join(modules, ", "))
	if out, err := check.CombinedOutput(); err != nil {
		msg := "reference Python modules " + strings.Join(modules, ", ") + " unavailable in " + refPython + ": " + lastLine(string(out))
		if os.Getenv("CI") != "" {
			t.Fatal(msg)
		}
		t.Skip(msg)
	}
	cmd := exec.Command(refPython, append([]string{"-c", script}, args...)...)
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("python failed: %v\n%s", err, out)
	}
	return strings.TrimSpace(string(out))
}

func lastLine(s string) string {
	s = strings.TrimSpace(s)
	if i := strings.LastIndexByte(s, '\n'); i >= 0 {
		return s[i+1:]
	}
	return s
}

// pattern returns a volume over box filled with reproducible values that
// exercise every byte of the voxel type (fixed seed).
func pattern(dt volume.DType, box volume.Box, seed uint64) volume.Any {
	rng := rand.New(rand.NewPCG(seed, 0x5eed))
	v := newVolume(dt, box, 2.5e-6)
	switch t := v.(type) {
	case *volume.Volume[uint8]:
		for i := range t.Pix {
			t.Pix[i] = uint8(rng.Uint32())
		}
	case *volume.Volume[uint16]:
		for i := range t.Pix {
			t.Pix[i] = uint16(rng.Uint32())
		}
	case *volume.Volume[float32]:
		for i := range t.Pix {
			// Signs, tiny and huge magnitudes, and exact integers.
			switch i % 4 {
			case 0:
				t.Pix[i] = float32(rng.NormFloat64())
			case 1:
				t.Pix[i] = float32(math.Ldexp(rng.Float64()-0.5, rng.IntN(200)-100))
			case 2:
				t.Pix[i] = float32(rng.IntN(70000))
			default:
				t.Pix[i] = -float32(rng.ExpFloat64() * 1e3)
			}
		}
	}
	return v
}

// leBytes returns the voxels of v as little-endian bytes in C order.
func leBytes(v volume.Any) []byte {
	b := make([]byte, v.Bounds().Voxels()*v.DType().Size())
	encodeAt(b, v, 0, binary.LittleEndian)
	return b
}

func sha(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

// sameVolume reports the number of voxels that differ (bitwise) between a
// and b and whether boxes and types agree.
func sameVolume(t *testing.T, what string, got, want volume.Any) {
	t.Helper()
	if got.DType() != want.DType() || got.Bounds() != want.Bounds() {
		t.Fatalf("%s: got %v %v, want %v %v", what, got.DType(), got.Bounds(), want.DType(), want.Bounds())
	}
	g, w := leBytes(got), leBytes(want)
	size := got.DType().Size()
	diff := 0
	for i := 0; i < len(g); i += size {
		if string(g[i:i+size]) != string(w[i:i+size]) {
			diff++
		}
	}
	if diff != 0 {
		t.Fatalf("%s: %d of %d voxels differ", what, diff, len(g)/size)
	}
}

var allDTypes = []volume.DType{volume.Uint8, volume.Uint16, volume.Float32}

// lengthTol is the relative tolerance for voxel sizes that went through
// text ("2.5um" → 2.5 × 1e-6 is not bitwise 2.5e-6).
const lengthTol = 1e-12

func sameLength(a, b float64) bool {
	return math.Abs(a-b) <= lengthTol*math.Max(math.Abs(a), math.Abs(b))
}

var leOrder = binary.LittleEndian
