package equilibrium

import "testing"

// BenchmarkStep times one level-set step (advection, curvature, contact-
// angle extension) on a tube of radius 14 with a meniscus, and reports the
// band voxels updated per second.
func BenchmarkStep(b *testing.B) {
	c := coneTube{R0: 14, Alpha: 8, NZ: 42}
	sh := c.shape()
	pore := c.pore()
	s, err := New(pore, sh, Options{Theta: 45})
	if err != nil {
		b.Fatal(err)
	}
	s.SetNonwetting(slab(pore, sh, 10))
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		s.step(0.1)
		if (i+1)%reinitN == 0 {
			s.reinit()
		}
	}
	b.ReportMetric(float64(len(s.bandList))*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}
