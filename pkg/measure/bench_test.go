package measure

import (
	"testing"

	"sluice/pkg/scenario"
)

// BenchmarkVolume256 measures the full measurement (counts, Minkowski
// functionals, interfacial areas, curvature, contact angles, ganglia) of a
// 256³ label volume of a drainage step, in 128³ tiles on all CPUs.
func BenchmarkVolume256(b *testing.B) {
	sc := &scenario.Campaign{Shape: [3]int{256, 256, 256}, Steps: 10, Seed: 1}
	if err := sc.Prepare(); err != nil {
		b.Fatal(err)
	}
	lab, _, _ := sc.Step(6)
	opt := Defaults()
	opt.IFT = sc.IFT
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Volume(lab, opt, 128, 0); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(lab.Box.Voxels())*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}
