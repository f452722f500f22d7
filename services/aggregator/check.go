package aggregator

import (
	"fmt"
	"log/slog"

	"sluice/pkg/layout"
	"sluice/proto/sluicepb"
)

// MaxTiles bounds the tile count a message may announce: a 4·10⁹-voxel
// scan in tiles of the smallest edge (16) has about 10⁶ tiles.
const MaxTiles = 1 << 21

// CheckTileDone validates a decoded tile result before it is counted:
// valid names and hash, 1 ≤ tile_count ≤ MaxTiles and 0 ≤ tile <
// tile_count. A result with tile_count 0 would otherwise complete its step
// with no tiles at all.
func CheckTileDone(d *sluicepb.TileDone) error {
	if d == nil {
		return fmt.Errorf("aggregator: nil tile result")
	}
	if _, err := layout.NewStep(d.Campaign, d.Step); err != nil {
		return fmt.Errorf("aggregator: tile result: %w", err)
	}
	if !layout.ValidParamHash(d.ParamHash) {
		return fmt.Errorf("aggregator: tile result %s/%s: parameter hash %q is not [a-z0-9]{1,64}", d.Campaign, d.Step, d.ParamHash)
	}
	if d.TileCount < 1 || d.TileCount > MaxTiles || d.Tile < 0 || d.Tile >= d.TileCount {
		return fmt.Errorf("aggregator: tile result %s/%s: tile %d of %d out of range", d.Campaign, d.Step, d.Tile, d.TileCount)
	}
	return nil
}

// CheckStepReady validates a decoded step announcement.
func CheckStepReady(r *sluicepb.StepReady) error {
	if r == nil {
		return fmt.Errorf("aggregator: nil step announcement")
	}
	if _, err := layout.NewStep(r.Campaign, r.Step); err != nil {
		return fmt.Errorf("aggregator: step announcement: %w", err)
	}
	if !layout.ValidParamHash(r.ParamHash) {
		return fmt.Errorf("aggregator: step announcement %s/%s: parameter hash %q is not [a-z0-9]{1,64}", r.Campaign, r.Step, r.ParamHash)
	}
	if r.TileCount < 1 || r.TileCount > MaxTiles {
		return fmt.Errorf("aggregator: step announcement %s/%s: tile count %d out of range 1..%d", r.Campaign, r.Step, r.TileCount, MaxTiles)
	}
	return nil
}

// dropInvalid logs a message that can never be valid. It is acknowledged,
// not retried: the result consumers redeliver failed messages forever.
func (a *Aggregator) dropInvalid(err error) {
	log := a.Log
	if log == nil {
		log = slog.Default()
	}
	log.Warn("aggregator: dropping an invalid message", "err", err)
}
