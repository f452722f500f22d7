package segment

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"runtime"
	"strings"
	"testing"

	"sluice/pkg/forward"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// refPython is the interpreter with Debian's scikit-image 0.19 (the
// python3 first on PATH lacks it).
const refPython = "/usr/bin/python3"

func needSkimage(t *testing.T) {
	t.Helper()
	if err := exec.Command(refPython, "-c", "import skimage.filters").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("reference scikit-image missing under CI: %v", err)
		}
		t.Skipf("scikit-image not importable through %s (%v); install python3-skimage", refPython, err)
	}
}

// mixture returns a histogram of n bins holding three Gaussian peaks with
// random positions, widths and weights, and empty bins at both ends.
func mixture(rng *rand.Rand, n int) []int64 {
	h := make([]int64, n)
	lo, hi := rng.IntN(n/8), n-rng.IntN(n/8)
	for k := 0; k < 3; k++ {
		mu := float64(lo) + (float64(k)+0.3+0.4*rng.Float64())*float64(hi-lo)/3
		sd := (0.02 + 0.05*rng.Float64()) * float64(n)
		w := 1e5 * (0.2 + rng.Float64())
		for i := lo; i < hi; i++ {
			d := (float64(i) - mu) / sd
			h[i] += int64(w * math.Exp(-d*d/2))
		}
	}
	return h
}

func TestOtsuMatchesSkimage(t *testing.T) {
	needSkimage(t)
	rng := rand.New(rand.NewPCG(3, 4))
	type caseIn struct {
		Counts  []int64   `json:"counts"`
		Centres []float64 `json:"centres"`
	}
	var cases []caseIn
	var want2, wantIso []float64
	var want3 [][2]float64
	for k := 0; k < 12; k++ {
		n := []int{256, 1024}[k%2]
		h := Hist{Lo: 0, Width: float64(65536 / n), Counts: mixture(rng, n)}
		if k%3 == 0 {
			h.Lo, h.Width = -1.5, 3.0/float64(n) // float32-like range
		}
		c := caseIn{Counts: h.Counts}
		for i := range h.Counts {
			c.Centres = append(c.Centres, h.Centre(i))
		}
		cases = append(cases, c)
		t2, err := Otsu(h.Counts)
		if err != nil {
			t.Fatal(err)
		}
		a, b, err := MultiOtsu3(h.Counts)
		if err != nil {
			t.Fatal(err)
		}
		want2 = append(want2, h.Centre(t2))
		ti, err := Isodata(h.Counts)
		if err != nil {
			t.Fatal(err)
		}
		wantIso = append(wantIso, h.Centre(ti))
		want3 = append(want3, [2]float64{h.Centre(a), h.Centre(b)})
	}
	in, _ := json.Marshal(cases)
	// Source: scikit-image 0.19 skimage.filters.threshold_otsu / threshold_multiotsu(classes=3) / threshold_isodata
	// with hist=(counts, bin_centres), run live.
	script := `import sys, json, numpy as np
from skimage.filters import threshold_otsu, threshold_multiotsu, threshold_isodata
out = []
for c in json.load(sys.stdin):
    h = (np.array(c["counts"], dtype=np.int64), np.array(c["centres"]))
    out.append([float(threshold_otsu(hist=h))] + [float(v) for v in threshold_multiotsu(hist=h, classes=3)] + [float(threshold_isodata(hist=h))])
json.dump(out, sys.stdout)`
	cmd := exec.Command(refPython, "-c", script)
	cmd.Stdin = strings.NewReader(string(in))
	b, err := cmd.Output()
	if err != nil {
		t.Fatalf("skimage: %v", err)
	}
	var got [][4]float64
	if err := json.Unmarshal(b, &got); err != nil {
		t.Fatal(err)
	}
	for k := range cases {
		// Thresholds are bin centres: equal means the same bin.
		if math.Abs(got[k][0]-want2[k]) > 1e-9*math.Max(1, math.Abs(want2[k])) {
			t.Errorf("case %d: Otsu %g, skimage %g", k, want2[k], got[k][0])
		}
		if math.Abs(got[k][1]-want3[k][0]) > 1e-9*math.Max(1, math.Abs(want3[k][0])) || math.Abs(got[k][2]-want3[k][1]) > 1e-9*math.Max(1, math.Abs(want3[k][1])) {
			t.Errorf("case %d: multi-Otsu %v, skimage %v", k, want3[k], got[k][1:3])
		}
		if math.Abs(got[k][3]-wantIso[k]) > 1e-9*math.Max(1, math.Abs(wantIso[k])) {
			t.Errorf("case %d: isodata %g, skimage %g", k, wantIso[k], got[k][3])
		}
	}
}

// tiled runs the worker flow over a tiling: per-tile histograms merged by
// Add, global thresholds, per-tile segmentation with halo, pasted together.
func tiled(t *testing.T, grey volume.Any, whole volume.Box, tile [3]int, p Params, solid *volume.Labels) (*volume.Labels, Hist, Thresholds) {
	t.Helper()
	g := grey.(*volume.Volume[uint16])
	tl := volume.Tiling{Whole: whole, Tile: tile}
	var h Hist
	for _, core := range tl.Cores() {
		in := g.Crop(core.Grow(p.Halo()).Intersect(whole), 0)
		var m *volume.Labels
		if solid != nil {
			m = solid.Crop(core.Grow(p.Halo()).Intersect(whole), 0)
		}
		th, err := Histogram(in, core, p, m)
		if err != nil {
			t.Fatal(err)
		}
		if err := h.Add(th); err != nil {
			t.Fatal(err)
		}
	}
	th, err := ComputeThresholds(h, p)
	if err != nil {
		t.Fatal(err)
	}
	out := volume.New[uint8](whole, g.VoxelSize)
	for _, core := range tl.Cores() {
		box := core.Grow(p.Halo()).Intersect(whole)
		var m *volume.Labels
		if solid != nil {
			m = solid.Crop(box, 0)
		}
		lab, err := Segment(g.Crop(box, 0), core, th, p, m)
		if err != nil {
			t.Fatal(err)
		}
		out.Paste(lab)
	}
	return out, h, th
}

// TestTileInvariance segments with 1, 8 and 27 tiles, with every stage on
// (NLM, partial-volume correction, watershed, hysteresis, island removal,
// sample mask), in 3-class and reference mode, and requires identical
// histograms, thresholds and labels. Each watershed cost runs once per
// mode, the second with the wall pass.
func TestTileInvariance(t *testing.T) {
	const n = 30
	grey, truth, fp := scene(n, 4, 7)
	for k := 0; k < 4; k++ {
		ref := k%2 == 1
		p := withFilter(fp, "nlm")
		p.Watershed = Watershed{Steps: 3, Cost: []string{CostSum, CostMax}[k/2], Wall: k/2 == 1}
		p.PartialVolume.Blur = 0.7
		p.Hysteresis = Hysteresis{Band: 600, Steps: 2}
		p.MinIsland = 4
		p.Sample = Sample{Y: 14.5, X: 15, Radius: 13}
		p.Reference = ref
		if !ref {
			p.PartialVolume.LocalFluid = 2
		}
		var mask *volume.Labels
		if ref {
			mask = idealMask(truth)
		}
		whole := grey.Box
		l1, h1, th1 := tiled(t, grey, whole, [3]int{n, n, n}, p, mask)
		for _, k := range []int{2, 3} {
			e := (n + k - 1) / k
			lk, hk, thk := tiled(t, grey, whole, [3]int{e, e, e}, p, mask)
			for i := range h1.Counts {
				if h1.Counts[i] != hk.Counts[i] {
					t.Fatalf("ref %v, %d³ tiles: histogram bin %d: %d vs %d", ref, k, i, hk.Counts[i], h1.Counts[i])
				}
			}
			for i := range th1.T {
				if th1.T[i] != thk.T[i] || th1.SolidGrey != thk.SolidGrey {
					t.Fatalf("ref %v, %d³ tiles: thresholds %v/%g vs %v/%g", ref, k, thk.T, thk.SolidGrey, th1.T, th1.SolidGrey)
				}
			}
			diff := 0
			for i := range l1.Pix {
				if l1.Pix[i] != lk.Pix[i] {
					diff++
				}
			}
			if diff != 0 {
				t.Errorf("ref %v, %d³ tiles: %d labels differ from the whole volume", ref, k, diff)
			}
		}
		// The stages must have acted, or the test proves nothing.
		var outside, nw int
		for _, v := range l1.Pix {
			if v == phase.Outside {
				outside++
			}
			if v == p.Codes.Nonwetting {
				nw++
			}
		}
		if outside == 0 || nw == 0 {
			t.Errorf("ref %v: no outside (%d) or nonwetting (%d) voxels", ref, outside, nw)
		}
		q := p
		q.Assign = AssignThreshold
		lt, _, _ := tiled(t, grey, whole, [3]int{n, n, n}, q, mask)
		moved := 0
		for i := range lt.Pix {
			if lt.Pix[i] != l1.Pix[i] {
				moved++
			}
		}
		if moved == 0 {
			t.Errorf("ref %v, watershed %+v: no label differs from the threshold assignment", ref, p.Watershed)
		}
		t.Logf("ref %v, watershed %+v: %d of %d labels differ from the threshold assignment", ref, p.Watershed, moved, len(lt.Pix))
	}
}

// TestHysteresisAndIslands checks the two neighbourhood stages on a
// hand-made image against their definitions.
func TestHysteresisAndIslands(t *testing.T) {
	// Fluid-only image (reference mode, all pore): background wetting 100,
	// a nonwetting seed at 0 with a tail of band voxels at 45 along x, and
	// a lone band voxel far away.
	g := volume.NewShape[uint16](5, 5, 12, 1)
	for i := range g.Pix {
		g.Pix[i] = 100
	}
	g.Set(2, 2, 1, 0)
	for x := 2; x <= 6; x++ {
		g.Set(2, 2, x, 55) // band: 50 ± 10 → relaxed, not strict
	}
	g.Set(2, 2, 10, 55)
	mask := volume.NewShape[uint8](5, 5, 12, 1)
	for i := range mask.Pix {
		mask.Pix[i] = 1
	}
	p := Defaults()
	p.Filter.Method = "none"
	p.Reference = true
	p.Threshold = "fixed"
	p.Fixed = []float64{50}
	p.Hysteresis = Hysteresis{Band: 10, Steps: 3}
	// The stages are checked alone: the watershed would flood the
	// one-voxel seed (no voxel of its class among its neighbours).
	p.Assign = AssignThreshold
	th, _ := ComputeThresholds(Hist{}, p)
	lab, err := Segment(g, g.Box, th, p, mask)
	if err != nil {
		t.Fatal(err)
	}
	// Source: definition (package doc): band voxels within 3 face steps of a seed join.
	for x := 0; x < 12; x++ {
		want := p.Codes.Wetting
		if x >= 1 && x <= 4 {
			want = p.Codes.Nonwetting
		}
		if got := lab.At(2, 2, x); got != want {
			t.Errorf("hysteresis: x=%d label %d, want %d", x, got, want)
		}
	}
	// Islands: the 4-voxel nonwetting run survives min size 4, dies at 5.
	p.MinIsland = 5
	lab, _ = Segment(g, g.Box, th, p, mask)
	if lab.At(2, 2, 1) != p.Codes.Wetting {
		t.Error("island of 4 voxels not removed at min size 5")
	}
	p.MinIsland = 4
	lab, _ = Segment(g, g.Box, th, p, mask)
	if lab.At(2, 2, 1) != p.Codes.Nonwetting {
		t.Error("island of 4 voxels removed at min size 4")
	}
}

func TestDetectSample(t *testing.T) {
	n := 64
	lab := volume.NewShape[uint8](24, n, n, 1e-6)
	forward.Rock{GrainRadius: 4, Porosity: 0.4, BlobRadius: 4, BlobFrac: 0.4, Seed: 5}.Draw(lab, phase.Default())
	fp := forward.Default()
	fp.Sample = &forward.Cylinder{Y: 30.5, X: 33, Radius: 24, Wall: 4}
	img, err := forward.Render(lab, fp)
	if err != nil {
		t.Fatal(err)
	}
	grey := forward.Uint16(img)
	p := Defaults()
	p.SampleBlock = 4
	h, err := Histogram(grey, grey.Box, p, nil)
	if err != nil {
		t.Fatal(err)
	}
	s, err := DetectSample(h, p, 0)
	if err != nil {
		t.Fatal(err)
	}
	// Source: the rendered cylinder (forward model); tolerance half a block.
	if math.Hypot(s.Y-30.5, s.X-33) > 2 || math.Abs(s.Radius-24) > 2 {
		t.Errorf("detected %+v, want centre (30.5, 33) radius 24", s)
	}
	t.Logf("detected sample %+v (truth centre (30.5, 33), radius 24)", s)
}

func TestValidateAndErrors(t *testing.T) {
	bad := []func(*Params){
		func(p *Params) { p.Order = "nnw" },
		func(p *Params) { p.Filter.Method = "wiener" },
		func(p *Params) { p.Filter.Method = "nlm" }, // no sigma
		func(p *Params) { p.Threshold = "fixed"; p.Fixed = []float64{3, 2} },
		func(p *Params) { p.Hysteresis.Band = 5; p.Order = "wns" },
		func(p *Params) { p.MinIsland = -1 },
		func(p *Params) { p.PartialVolume.Blur = 1; p.Order = "nsw" },
	}
	for i, f := range bad {
		p := Defaults()
		f(&p)
		if p.Validate() == nil {
			t.Errorf("bad params %d accepted", i)
		}
	}
	if err := Defaults().Validate(); err != nil {
		t.Fatal(err)
	}
	g := volume.NewShape[float32](4, 4, 4, 1)
	if _, err := Histogram(g, g.Box, Defaults(), nil); err == nil || !strings.HasPrefix(err.Error(), "segment: ") {
		t.Errorf("float32 without range: %v", err)
	}
	var a Hist
	_ = a.Add(Hist{DType: "uint8", Width: 1, Counts: make([]int64, 256)})
	if err := a.Add(Hist{DType: "uint16", Width: 64, Counts: make([]int64, 1024)}); err == nil {
		t.Error("merged histograms with different binning")
	}
}

// TestFloatExtent: float32 data take their range from a merged first pass.
func TestFloatExtent(t *testing.T) {
	grey, _, _ := scene(24, 10, 3)
	f := volume.Float(grey)
	p := Defaults()
	var e Extent
	for _, core := range (volume.Tiling{Whole: f.Box, Tile: [3]int{12, 12, 12}}).Cores() {
		te, err := MeasureExtent(f.Crop(core.Grow(1).Intersect(f.Box), 0), core, p, nil)
		if err != nil {
			t.Fatal(err)
		}
		e.Add(te)
	}
	whole, _ := MeasureExtent(f, f.Box, p, nil)
	if e != whole {
		t.Fatalf("merged extent %+v, whole %+v", e, whole)
	}
	p.Range = e.Range(p.Bins)
	h, err := Histogram(f, f.Box, p, nil)
	if err != nil {
		t.Fatal(err)
	}
	if h.Total() != int64(len(f.Pix)) || h.Counts[0] == 0 || h.Counts[len(h.Counts)-1] == 0 {
		t.Errorf("float histogram does not span its range: total %d, ends %d %d", h.Total(), h.Counts[0], h.Counts[len(h.Counts)-1])
	}
}

// BenchmarkSegment256 segments one 256³ uint16 tile (plus halo) with the
// median filter (default watershed assignment, threshold assignment, and
// doped brine, order nsw, with the solid-layer passes) and with NLM;
// throughput is reported per core.
func BenchmarkSegment256(b *testing.B) {
	for _, name := range []string{"median", "median-threshold", "nlm", "median-nsw"} {
		method, assign, _ := strings.Cut(name, "-")
		b.Run(name, func(b *testing.B) {
			const n = 256
			lab := volume.NewShape[uint8](n+8, n+8, n+8, 1e-6)
			forward.Rock{GrainRadius: 8, Porosity: 0.4, BlobRadius: 8, BlobFrac: 0.4, Seed: 1}.Draw(lab, phase.Default())
			fp := forward.Default()
			if assign == "nsw" {
				// Doped brine: the same adjacent contrasts and noise with
				// the brine brightest; the solid-layer passes run.
				fp.Solid, fp.Wetting, fp.CNR = 24000, 40000, 13
			}
			img, _ := forward.Render(lab, fp)
			grey := forward.Uint16(img)
			p := withFilter(fp, method)
			switch assign {
			case "nsw":
				p.Order = "nsw"
			case "":
			default:
				p.Assign = assign
			}
			p.MinIsland = 4
			p.Hysteresis = Hysteresis{Band: 500, Steps: 1}
			core := volume.BoxOf(n, n, n).Translate([3]int{4, 4, 4})
			th := Thresholds{T: []float64{19000, 32000}}
			b.ResetTimer()
			c0 := cpuTime()
			for i := 0; i < b.N; i++ {
				if _, err := Segment(grey, core, th, p, nil); err != nil {
					b.Fatal(err)
				}
			}
			cpu := cpuTime() - c0
			b.ReportMetric(float64(n*n*n)*float64(b.N)/b.Elapsed().Seconds()/1e6/float64(runtime.GOMAXPROCS(0)), "MVox/s/core")
			// CPU seconds do not grow when other processes share the cores.
			b.ReportMetric(float64(n*n*n)*float64(b.N)/cpu.Seconds()/1e6, "MVox/cpu-s")
		})
	}
}

// TestWatershedTiling segments with 1, 8 and 27 tiles with the watershed as
// the last stage (no hysteresis, no island removal, whose margins would
// hide an error of its own halo), each cost, with and without the wall
// pass, in 3-class and reference mode, and requires identical labels.
func TestWatershedTiling(t *testing.T) {
	const n = 30
	grey, truth, fp := scene(n, 4, 9)
	// The doped-brine order (solid between the fluids) adds the
	// solid-layer passes around the flood: the same scene's grey with the
	// brine made brightest (levels n 14000, s 24000, w 40000).
	var doped *volume.Volume[uint16]
	{
		dp := fp
		dp.Wetting, dp.Solid = 40000, 24000
		dp.CNR = (dp.Wetting - dp.Nonwetting) / fp.NoiseSigma()
		img, err := forward.Render(truth, dp)
		if err != nil {
			t.Fatal(err)
		}
		doped = forward.Uint16(img)
	}
	for _, ws := range []Watershed{{Steps: 4, Cost: CostSum}, {Steps: 5, Cost: CostMax}, {Steps: 3, Cost: CostSum, Wall: true}} {
		for _, mode := range []string{"3-class", "reference", "nsw"} {
			ref := mode == "reference"
			grey := grey
			p := withFilter(fp, "median")
			if mode == "nsw" {
				grey, p.Order = doped, "nsw"
			}
			p.MinIsland = 0
			p.Watershed = ws
			p.Reference = ref
			p.Fluids = FluidsBoth
			var mask *volume.Labels
			if ref {
				mask = idealMask(truth)
			}
			l1, _, _ := tiled(t, grey, grey.Box, [3]int{n, n, n}, p, mask)
			for _, k := range []int{2, 3} {
				e := (n + k - 1) / k
				lk, _, _ := tiled(t, grey, grey.Box, [3]int{e, e, e}, p, mask)
				diff := 0
				for i := range l1.Pix {
					if l1.Pix[i] != lk.Pix[i] {
						diff++
					}
				}
				if diff != 0 {
					t.Errorf("%+v, %s, %d³ tiles: %d labels differ from the whole volume", ws, mode, k, diff)
				}
			}
		}
	}
}

// TestNonFiniteRefused: a NaN or ±Inf grey value reaching the histogram
// (or the float32 extent) is refused in one line naming its voxel, not
// binned into an end bin.
func TestNonFiniteRefused(t *testing.T) {
	grey, _, _ := scene(24, 10, 3)
	for _, bad := range []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1))} {
		f := volume.Float(grey)
		f.Set(5, 6, 7, bad)
		p := Defaults()
		p.Filter.Method = "none"
		if _, err := MeasureExtent(f, f.Box, p, nil); err == nil || !strings.Contains(err.Error(), "z=5 y=6 x=7") || strings.Contains(err.Error(), "\n") {
			t.Errorf("extent with %v: %v, want a one-line refusal naming z=5 y=6 x=7", bad, err)
		}
		p.Range = [2]float64{0, 65536}
		if _, err := Histogram(f, f.Box, p, nil); err == nil || !strings.Contains(err.Error(), "z=5 y=6 x=7") {
			t.Errorf("histogram with %v: %v, want a refusal naming z=5 y=6 x=7", bad, err)
		}
	}
}
