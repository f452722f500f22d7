package filter

import (
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"strings"
	"syscall"
	"testing"
	"time"

	"sluice/pkg/volume"
)

// TestGaussianVectorIdentical: the vector path (GOEXPERIMENT=simd, AVX2)
// and the scalar path of Gaussian give the same float32 bits, for radii
// 1…28 (every count of remaining lanes at the row ends, rows shorter than
// a vector), on boxes off the origin and cores touching the faces. Source:
// none outside the project — the two paths perform the same float64
// operations per voxel in the same order, so any difference is a defect.
// In a plain build both runs take the scalar path and the test checks only
// that; with the experiment on an AVX2 CPU it requires the vector path to
// be the active one. Spoiled once by dropping the last tap pair of the x
// pass's vector loop (every case failed) and once by moving the first
// output voxel of each row by one float32 ulp (529 of 19573 voxels of the
// σ 0.3 whole box differed). A fused multiply–add in the vector loop did
// not change a single output bit here: it moves the float64 sums by about
// an ulp, which the rounding to float32 hides (the same reason scipy's tap
// order agrees with ours), so the test pins output bits, not the float64
// operation sequence.
func TestGaussianVectorIdentical(t *testing.T) {
	if vectorBuilt && vectorCPU && !strings.HasPrefix(VectorPath(), "AVX") {
		t.Fatalf("built with the vector path on an AVX2 CPU, but the path in use is %q", VectorPath())
	}
	t.Logf("path in use: %s", VectorPath())
	defer UseVector(UseVector(true))
	rng := rand.New(rand.NewPCG(29, 7))
	in := volume.New[float32](volume.Box{Min: [3]int{-2, 3, 1}, Max: [3]int{21, 26, 38}}, 1e-6)
	for i := range in.Pix {
		switch rng.IntN(20) {
		case 0:
			in.Pix[i] = float32(rng.Float64() * 1e6)
		case 1:
			in.Pix[i] = float32(rng.Float64() * 1e-6)
		default:
			in.Pix[i] = rng.Float32()
		}
	}
	ib := in.Box
	cores := []volume.Box{
		ib,
		{Min: [3]int{3, 8, 4}, Max: [3]int{12, 21, 35}},
		{Min: ib.Min, Max: [3]int{5, 9, 4}},
		{Min: [3]int{9, 15, 30}, Max: ib.Max},
	}
	for _, c := range []struct{ sigma, truncate float64 }{{0.3, 4}, {0.5, 4}, {0.8, 4}, {1, 4}, {1.5, 3}, {1.5, 4}, {2, 3.5}, {2.2, 2.5}, {3, 4}, {4, 4}, {7, 4}} {
		for ci, core := range cores {
			UseVector(false)
			want, err := Gaussian(in, core, c.sigma, c.truncate)
			if err != nil {
				t.Fatal(err)
			}
			UseVector(true)
			// Both widths of the vector loops where the CPU has them.
			for _, wide := range []bool{false, true} {
				if wide && !has512 {
					continue
				}
				use512 = wide
				got, err := Gaussian(in, core, c.sigma, c.truncate)
				if err != nil {
					t.Fatal(err)
				}
				n := 0
				for i := range want.Pix {
					if math.Float32bits(got.Pix[i]) != math.Float32bits(want.Pix[i]) {
						n++
					}
				}
				if n > 0 {
					t.Errorf("σ %g truncate %g core %d %v, AVX-512 %v: %d of %d voxels differ between the vector and the scalar path", c.sigma, c.truncate, ci, core, wide, n, len(want.Pix))
				}
			}
			use512 = has512
		}
	}
}

// BenchmarkGaussianPaths times the scalar and the vector path of Gaussian
// alternately in every iteration (so both see the same load on a shared
// machine) on a 128³ core with its halo: σ 1 truncate 4 (radius 4, the
// grey filter) and σ 1.5 truncate 3 (radius 5, the curvature smoothing).
// It reports the median of each path in MVox/s and ns/voxel of wall time,
// ns/voxel of the thread's CPU time (which moves much less when other
// processes share the cores; a GC runs before each call so that none runs
// inside) and the ratio of each. Run with -cpu 1: Gaussian then runs on
// the calling goroutine, locked to its thread.
func BenchmarkGaussianPaths(b *testing.B) {
	defer UseVector(UseVector(true))
	for _, c := range []struct{ sigma, truncate float64 }{{1, 4}, {1.5, 3}} {
		r := GaussianRadius(c.sigma, c.truncate)
		const n = 128
		v := randomVolume(n+2*r, n+2*r, n+2*r, 5)
		core := volume.BoxOf(n, n, n).Translate([3]int{r, r, r})
		b.Run(fmt.Sprintf("sigma=%g/radius=%d", c.sigma, r), func(b *testing.B) {
			// Locked here: a sub-benchmark runs on a goroutine of its own.
			runtime.LockOSThread()
			defer runtime.UnlockOSThread()
			var wall, cpu [2][]float64 // [scalar, vector]
			for i := 0; i < b.N; i++ {
				for k, vec := range []bool{false, true} {
					UseVector(vec)
					runtime.GC()
					t0, c0 := time.Now(), cpuSeconds()
					if _, err := Gaussian(v, core, c.sigma, c.truncate); err != nil {
						b.Fatal(err)
					}
					wall[k] = append(wall[k], time.Since(t0).Seconds())
					cpu[k] = append(cpu[k], cpuSeconds()-c0)
				}
			}
			med := func(x []float64) float64 { slices.Sort(x); return x[len(x)/2] }
			ws, wv, cs, cv := med(wall[0]), med(wall[1]), med(cpu[0]), med(cpu[1])
			vox := float64(core.Voxels())
			b.ReportMetric(vox/ws/1e6, "MVox/s-scalar")
			b.ReportMetric(vox/wv/1e6, "MVox/s-vector")
			b.ReportMetric(ws/vox*1e9, "ns/vox-scalar")
			b.ReportMetric(wv/vox*1e9, "ns/vox-vector")
			b.ReportMetric(cs/vox*1e9, "cpu-ns/vox-scalar")
			b.ReportMetric(cv/vox*1e9, "cpu-ns/vox-vector")
			b.ReportMetric(ws/wv, "speedup")
			b.ReportMetric(cs/cv, "cpu-speedup")
		})
	}
}

// cpuSeconds is the CPU time (user + system) of the calling thread (Linux
// RUSAGE_THREAD = 1, which package syscall does not name). Their sum is
// the thread's exact run time; the kernel splits it between user and
// system by sampled ticks, so either alone is unreliable for short runs.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(1, &ru); err != nil {
		return math.NaN()
	}
	return float64(ru.Utime.Nano()+ru.Stime.Nano()) / 1e9
}

// TestMedianVectorIdentical: the vector path of the uint16 median (sorting
// and selection networks on 16 lanes) gives exactly the scalar path's
// values, on random grey of full range and of four levels (many ties), on
// boxes off the origin with cores touching the faces, rows of 1…40
// voxels (shorter than, equal to and not a multiple of a vector) and a
// single-voxel box. Source: none outside the project (the medians of
// integers are exact on both paths; TestMedianIntegerMatchesScipy checks
// against scipy 1.10). With the experiment on an AVX2 CPU it requires the
// vector path to be in use. Spoiled (the clamped columns past the row's
// end taken from its first voxel), 18 of the 38 cases differed. (Selecting
// the 13th instead of the 14th smallest is caught before, by the 0–1 check
// of TestMedianNetworks.)
func TestMedianVectorIdentical(t *testing.T) {
	defer UseVector(UseVector(true))
	if vectorBuilt && vectorCPU && !useVector {
		t.Fatal("vector path not in use on an AVX2 build")
	}
	rng := rand.New(rand.NewPCG(41, 2))
	for _, levels := range []int{65536, 4} {
		for _, sz := range [][3]int{{1, 1, 1}, {3, 4, 1}, {5, 6, 2}, {7, 5, 15}, {6, 7, 16}, {5, 5, 17}, {9, 8, 40}} {
			in := volume.New[uint16](volume.Box{Min: [3]int{-1, 2, 3}, Max: [3]int{-1 + sz[0], 2 + sz[1], 3 + sz[2]}}, 1e-6)
			for i := range in.Pix {
				in.Pix[i] = uint16(rng.IntN(levels))
			}
			ib := in.Box
			cores := []volume.Box{ib}
			if sz[2] > 2 {
				cores = append(cores,
					volume.Box{Min: ib.Min, Max: [3]int{ib.Max[0], ib.Max[1], ib.Max[2] - 1}},
					volume.Box{Min: [3]int{ib.Min[0], ib.Min[1], ib.Min[2] + 1}, Max: ib.Max},
					volume.Box{Min: [3]int{ib.Min[0], ib.Min[1], ib.Min[2] + 1}, Max: [3]int{ib.Max[0], ib.Max[1], ib.Max[2] - 1}})
			}
			for _, core := range cores {
				UseVector(false)
				want, err := Median3Integer(in, core)
				if err != nil {
					t.Fatal(err)
				}
				UseVector(true)
				got, err := Median3Integer(in, core)
				if err != nil {
					t.Fatal(err)
				}
				n := 0
				for i := range want.Pix {
					if got.Pix[i] != want.Pix[i] {
						n++
					}
				}
				if n > 0 {
					t.Errorf("%d levels, box %v, core %v: %d of %d medians differ between the vector and the scalar path", levels, ib, core, n, len(want.Pix))
				}
			}
		}
	}
}

// BenchmarkMedianPaths times the scalar and the vector path of the exact
// uint16 median alternately in every iteration on one 128³ worker tile
// core (130³ input), reporting medians as BenchmarkGaussianPaths does (run
// it with -cpu 1 too).
func BenchmarkMedianPaths(b *testing.B) {
	defer UseVector(UseVector(true))
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	const n = 128
	rng := rand.New(rand.NewPCG(5, 9))
	in := volume.New[uint16](volume.BoxOf(n+2, n+2, n+2), 1e-6)
	for i := range in.Pix {
		in.Pix[i] = uint16(20000 + rng.IntN(20000))
	}
	core := volume.BoxOf(n, n, n).Translate([3]int{1, 1, 1})
	var wall, cpu [2][]float64
	for i := 0; i < b.N; i++ {
		for k, vec := range []bool{false, true} {
			UseVector(vec)
			runtime.GC()
			t0, c0 := time.Now(), cpuSeconds()
			if _, err := Median3Integer(in, core); err != nil {
				b.Fatal(err)
			}
			wall[k] = append(wall[k], time.Since(t0).Seconds())
			cpu[k] = append(cpu[k], cpuSeconds()-c0)
		}
	}
	med := func(x []float64) float64 { slices.Sort(x); return x[len(x)/2] }
	ws, wv, cs, cv := med(wall[0]), med(wall[1]), med(cpu[0]), med(cpu[1])
	vox := float64(core.Voxels())
	b.ReportMetric(vox/ws/1e6, "MVox/s-scalar")
	b.ReportMetric(vox/wv/1e6, "MVox/s-vector")
	b.ReportMetric(cs/vox*1e9, "cpu-ns/vox-scalar")
	b.ReportMetric(cv/vox*1e9, "cpu-ns/vox-vector")
	b.ReportMetric(ws/wv, "speedup")
	b.ReportMetric(cs/cv, "cpu-speedup")
}
