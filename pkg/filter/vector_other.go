//go:build !(goexperiment.simd && amd64)

package filter

// Without GOEXPERIMENT=simd (or off amd64) only the scalar path exists.
const (
	vectorBuilt = false
	vectorCPU   = false
)

func symmetricRowVector[S, D real](dst []D, w []float64, base []S, at []int) bool { return false }
