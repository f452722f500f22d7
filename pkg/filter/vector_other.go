//go:build !(goexperiment.simd && amd64)

package filter

import "sluice/pkg/volume"

// Without GOEXPERIMENT=simd (or off amd64) only the scalar path exists.
const (
	vectorBuilt = false
	vectorCPU   = false
	has512      = false
)

var use512 = false

func symmetricRowVector[S, D real](dst []D, w []float64, base []S, at []int) bool { return false }

func median3RowsVector[T Integer](in *volume.Volume[T], core volume.Box, emit func(z, y int, row []T)) bool {
	return false
}
