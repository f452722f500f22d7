//go:build faultinject

package worker

import (
	"fmt"
	"os"

	"sluice/proto/sluicepb"
)

// FaultEnv names the tile whose worker process dies, as
// campaign/step/tile. Only binaries built with -tags faultinject read it;
// the fault tests use it to make a poison tile.
const FaultEnv = "SLUICE_FAULT_CRASH_TILE"

// fault ends the process, as a segmentation fault or an out-of-memory kill
// would, when t is the tile named by $SLUICE_FAULT_CRASH_TILE.
func fault(t *sluicepb.TileTask) {
	if v := os.Getenv(FaultEnv); v != "" && v == fmt.Sprintf("%s/%s/%d", t.Campaign, t.Step, t.Tile) {
		fmt.Fprintf(os.Stderr, "worker: fault injection: crashing on tile %s (delivery %d)\n", v, t.Attempt)
		os.Exit(86)
	}
}
