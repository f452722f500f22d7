package equilibrium_test

import (
	"testing"

	"sluice/pkg/equilibrium"
	"sluice/pkg/scenario"
)

// packSetup builds the demo's grain pack (pkg/scenario, edge n, grain
// radius gr, seed 1), its pore mask and the full-morphology state at r_c.
func packSetup(tb testing.TB, n int, gr, rc float64) (pore, fm []bool, shape [3]int) {
	tb.Helper()
	c := &scenario.Campaign{Shape: [3]int{n, n, n}, Steps: 8, Seed: 1}
	c.Rock.MeanRadius = gr
	if err := c.Prepare(); err != nil {
		tb.Fatal(err)
	}
	rock, _ := c.RockLabels()
	pore = make([]bool, len(rock.Pix))
	for i, v := range rock.Pix {
		pore[i] = v == c.Codes.Wetting
	}
	return pore, c.Drain().Invade(rc, nil), rock.Box.Size()
}

// BenchmarkRelaxPack times a whole relaxation of a 96³ grain-pack state
// (grains 40, θ 45°) from the full-morphology state at r_c 16 to
// equilibrium at Pc/σ = 2/r_c, as the demo would, and reports the steps.
func BenchmarkRelaxPack(b *testing.B) {
	pore, fm, sh := packSetup(b, 96, 40, 16)
	for i := 0; i < b.N; i++ {
		b.StopTimer()
		s, err := equilibrium.New(pore, sh, equilibrium.Options{Theta: 45})
		if err != nil {
			b.Fatal(err)
		}
		if err := s.SetNonwetting(fm); err != nil {
			b.Fatal(err)
		}
		b.StartTimer()
		st, err := s.Relax(2.0 / 16)
		if err != nil {
			b.Fatal(err)
		}
		b.ReportMetric(float64(st.Steps), "steps")
		b.ReportMetric(st.Time, "time")
		if st.Converged {
			b.ReportMetric(1, "converged")
		} else {
			b.ReportMetric(0, "converged")
		}
	}
}
