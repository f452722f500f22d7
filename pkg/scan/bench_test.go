package scan

import (
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/scenario"
	"sluice/pkg/volume"
)

// BenchmarkTile measures pass 2 (segment + every measurement) of one 128³
// tile of a drainage step with its halo, as a worker runs it.
func BenchmarkTile(b *testing.B) {
	sc := &scenario.Campaign{Shape: [3]int{160, 160, 160}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	g, err := forward.Render(lab, forward.Default())
	if err != nil {
		b.Fatal(err)
	}
	grey := forward.Uint16(g)
	c := campaign.Default()
	c.Tile = 128
	prep, c, err := Prepare(MemorySource(grey), grey.Box, volume.Uint16, c, nil, 0)
	if err != nil {
		b.Fatal(err)
	}
	halo, _ := Halo(c)
	core := volume.Box{Min: [3]int{16, 16, 16}, Max: [3]int{144, 144, 144}}
	in := grey.Crop(core.Grow(halo).Intersect(grey.Box), 0)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, _, err := Tile(in, core, grey.Box, prep.Thresholds, c, nil); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(core.Voxels())*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}
