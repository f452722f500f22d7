package cluster

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"testing"

	"sluice/pkg/phase"
	"sluice/pkg/synth"
	"sluice/pkg/volume"
)

// referencePython is the Debian interpreter that carries scipy; the python3
// first on PATH does not.
const referencePython = "/usr/bin/python3"

const nw uint8 = 2 // nonwetting code in the test volumes

func needScipy(t testing.TB) {
	t.Helper()
	out, err := exec.Command(referencePython, "-c", "import scipy.ndimage, numpy").CombinedOutput()
	if err == nil {
		return
	}
	s := strings.TrimSpace(string(out))
	if i := strings.LastIndexByte(s, '\n'); i >= 0 {
		s = s[i+1:]
	}
	msg := "scipy is not importable by " + referencePython + " (apt-get install python3-scipy): " + s
	if os.Getenv("CI") != "" {
		t.Fatal(msg)
	}
	t.Skip(msg)
}

// scipyLabel runs scipy.ndimage.label LIVE on (lab == nw) and returns the
// number of components and their sizes sorted in decreasing order.
func scipyLabel(t *testing.T, lab *volume.Labels, conn int) (int, []int64) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "labels.raw")
	if err := os.WriteFile(path, lab.Pix, 0o644); err != nil {
		t.Fatal(err)
	}
	n := lab.Box.Size()
	rank := map[int]string{6: "1", 26: "3"}[conn]
	script := `
import sys, numpy as np
from scipy import ndimage
nz, ny, nx, code, rank = map(int, sys.argv[2:7])
a = np.fromfile(sys.argv[1], dtype=np.uint8).reshape(nz, ny, nx) == code
lab, count = ndimage.label(a, structure=ndimage.generate_binary_structure(3, rank))
sizes = np.sort(np.bincount(lab.ravel())[1:])[::-1]
print(count)
print(" ".join(str(s) for s in sizes))
`
	out, err := exec.Command(referencePython, "-c", script, path,
		strconv.Itoa(n[0]), strconv.Itoa(n[1]), strconv.Itoa(n[2]), strconv.Itoa(int(nw)), rank).CombinedOutput()
	if err != nil {
		t.Fatalf("scipy reference failed: %v\n%s", err, out)
	}
	lines := strings.Split(strings.TrimRight(string(out), "\n"), "\n")
	if len(lines) < 1 {
		t.Fatalf("scipy printed %q", out)
	}
	count, err := strconv.Atoi(lines[0])
	if err != nil {
		t.Fatalf("scipy count %q: %v", lines[0], err)
	}
	var sizes []int64
	if len(lines) > 1 {
		for _, f := range strings.Fields(lines[1]) {
			v, err := strconv.ParseInt(f, 10, 64)
			if err != nil {
				t.Fatal(err)
			}
			sizes = append(sizes, v)
		}
	}
	return count, sizes
}

// randomVolume sets each voxel to nw with probability p, else to wetting
// (1) or solid (0).
func randomVolume(shape [3]int, p float64, seed uint64) *volume.Labels {
	lab := volume.NewShape[uint8](shape[0], shape[1], shape[2], 1)
	rng := rand.New(rand.NewPCG(seed, 99))
	for i := range lab.Pix {
		switch r := rng.Float64(); {
		case r < p:
			lab.Pix[i] = nw
		case r < (1+p)/2:
			lab.Pix[i] = 1
		}
	}
	return lab
}

// labelTiles labels every core of lab. When crop is set, each tile sees
// only its core (no halo), as a worker that was handed the bare chunk.
func labelTiles(lab *volume.Labels, cores []volume.Box, opt Options, crop bool) []*Tile {
	set := phase.Of(nw)
	tiles := make([]*Tile, len(cores))
	for i, c := range cores {
		src := lab
		if crop {
			src = lab.Crop(c, 0)
		}
		tiles[i] = Label(src, set, c, lab.Box, opt)
	}
	return tiles
}

func join(t *testing.T, lab *volume.Labels, cores []volume.Box, opt Options) (*Merged, Summary) {
	t.Helper()
	tiles := labelTiles(lab, cores, opt, false)
	m, err := Join(tiles, lab.Box, opt)
	if err != nil {
		t.Fatal(err)
	}
	s, err := Merge(tiles, lab.Box, opt)
	if err != nil {
		t.Fatal(err)
	}
	return m, s
}

func sizesOf(g []Ganglion) []int64 {
	out := make([]int64, len(g))
	for i, x := range g {
		out[i] = x.Voxels
	}
	return out
}

// Source: scipy 1.10 ndimage.label with generate_binary_structure(3, 1) for
// 6-connectivity and (3, 3) for 26, run live; site-percolation thresholds
// p_c ≈ 0.3116 (simple cubic, 6-neighbour; Lorenz & Ziff 1998, Phys. Rev. E
// 57:230) and ≈ 0.0976 (26-neighbour; Kurzawski & Malarz 2012, Rep. Math.
// Phys. 70:163) pick the densities.
func TestLabelMatchesScipy(t *testing.T) {
	needScipy(t)
	shape := [3]int{31, 38, 45}
	cases := []struct {
		conn int
		p    float64
	}{
		{6, 0.25}, {6, 0.31}, {6, 0.40},
		{26, 0.08}, {26, 0.10}, {26, 0.14},
	}
	for k, c := range cases {
		t.Run(strconv.Itoa(c.conn)+"/"+strconv.FormatFloat(c.p, 'f', 2, 64), func(t *testing.T) {
			lab := randomVolume(shape, c.p, uint64(100+k))
			wantCount, wantSizes := scipyLabel(t, lab, c.conn)
			opt := Options{Connectivity: c.conn}
			whole := []volume.Box{lab.Box}
			m, s := join(t, lab, whole, opt)
			if s.Count != wantCount {
				t.Fatalf("single tile: %d clusters, scipy %d", s.Count, wantCount)
			}
			if got := sizesOf(m.Ganglia); !slices.Equal(got, wantSizes) {
				t.Fatalf("single tile: sorted sizes differ from scipy\n got %v\nwant %v", head(got), head(wantSizes))
			}
			// And through a tiling with uneven edge tiles.
			tiling := volume.Tiling{Whole: lab.Box, Tile: [3]int{8, 13, 10}}
			m2, s2 := join(t, lab, tiling.Cores(), opt)
			if s2.Count != wantCount || !slices.Equal(sizesOf(m2.Ganglia), wantSizes) {
				t.Fatalf("tiled %v: %d clusters, scipy %d; sizes equal %v", tiling.Tile, s2.Count, wantCount, slices.Equal(sizesOf(m2.Ganglia), wantSizes))
			}
			t.Logf("%d clusters, largest %d voxels, equal to scipy single-tile and tiled", wantCount, s.Largest)
		})
	}
}

func head(s []int64) []int64 {
	if len(s) > 12 {
		return s[:12]
	}
	return s
}

// guillotine cuts box into random sub-boxes by recursive axis-aligned cuts
// (not a grid: T-junctions occur), including 1-voxel-thick slabs.
func guillotine(rng *rand.Rand, b volume.Box, depth int, out []volume.Box) []volume.Box {
	n := b.Size()
	if depth == 0 || b.Voxels() <= 1 || rng.IntN(7) == 0 {
		return append(out, b)
	}
	a := rng.IntN(3)
	for tries := 0; n[a] < 2 && tries < 3; tries++ {
		a = (a + 1) % 3
	}
	if n[a] < 2 {
		return append(out, b)
	}
	cut := b.Min[a] + 1 + rng.IntN(n[a]-1)
	if rng.IntN(4) == 0 { // favour 1-voxel slabs at either end
		if rng.IntN(2) == 0 {
			cut = b.Min[a] + 1
		} else {
			cut = b.Max[a] - 1
		}
	}
	lo, hi := b, b
	lo.Max[a], hi.Min[a] = cut, cut
	out = guillotine(rng, lo, depth-1, out)
	return guillotine(rng, hi, depth-1, out)
}

// tilings returns a set of partitions of whole: grid tilings with uneven
// edge tiles and 1-voxel-thick tiles, and random guillotine partitions.
func tilings(whole volume.Box, seed uint64) map[string][]volume.Box {
	out := map[string][]volume.Box{}
	for _, e := range [][3]int{{7, 9, 11}, {1, 16, 16}, {16, 1, 5}, {5, 6, 1}, {3, 3, 3}} {
		out["grid "+strconv.Itoa(e[0])+"x"+strconv.Itoa(e[1])+"x"+strconv.Itoa(e[2])] = volume.Tiling{Whole: whole, Tile: e}.Cores()
	}
	rng := rand.New(rand.NewPCG(seed, 5))
	for i := 0; i < 4; i++ {
		out["guillotine "+strconv.Itoa(i)] = guillotine(rng, whole, 9, nil)
	}
	return out
}

// checkInvariant asserts that every tiling gives the single-tile Summary and
// cluster list.
func checkInvariant(t *testing.T, lab *volume.Labels, opt Options, seed uint64) Summary {
	t.Helper()
	ref, refSum := join(t, lab, []volume.Box{lab.Box}, opt)
	for name, cores := range tilings(lab.Box, seed) {
		m, s := join(t, lab, cores, opt)
		if !reflect.DeepEqual(s, refSum) {
			t.Fatalf("%s (%d tiles): summary\n%+v\nwant single-tile\n%+v", name, len(cores), s, refSum)
		}
		if !reflect.DeepEqual(m.Ganglia, ref.Ganglia) {
			t.Fatalf("%s (%d tiles): cluster list differs from single tile", name, len(cores))
		}
	}
	return refSum
}

// helix draws a tube of radius r around a helix of radius R winding along
// z with the given pitch, as a chain of balls a fifth of a voxel apart.
func helix(lab *volume.Labels, R, r, pitch float64) {
	n := lab.Box.Size()
	cy, cx := float64(n[1]-1)/2, float64(n[2]-1)/2
	step := 0.2 / math.Hypot(R, pitch/(2*math.Pi)) // angle per 0.2 voxel of arc
	for th := -1.0; th*pitch/(2*math.Pi) <= float64(n[0])+1; th += step {
		c := [3]float64{th * pitch / (2 * math.Pi), cy + R*math.Sin(th), cx + R*math.Cos(th)}
		synth.Ball(lab, c, r, nw)
	}
}

// walk draws random walks of single voxels with steps in {−1,0,1}³, so
// consecutive voxels often touch only along an edge or a corner.
func walk(lab *volume.Labels, steps, walks int, seed uint64) {
	rng := rand.New(rand.NewPCG(seed, 3))
	n := lab.Box.Size()
	for w := 0; w < walks; w++ {
		p := [3]int{rng.IntN(n[0]), rng.IntN(n[1]), rng.IntN(n[2])}
		for s := 0; s < steps; s++ {
			lab.Set(p[0], p[1], p[2], nw)
			for a := 0; a < 3; a++ {
				p[a] = min(max(p[a]+rng.IntN(3)-1, 0), n[a]-1)
			}
		}
	}
}

// Source: definition of the whole-volume result (architecture: "whatever
// the tiling, the step result equals the whole-volume result", exactly for
// cluster numbers); property test with fixed seeds.
func TestTileInvariance(t *testing.T) {
	for _, conn := range []int{26, 6} {
		opt := Options{Connectivity: conn}
		t.Run("helix/"+strconv.Itoa(conn), func(t *testing.T) {
			lab := volume.NewShape[uint8](40, 27, 29, 1)
			helix(lab, 9, 1.6, 13)
			s := checkInvariant(t, lab, opt, 1)
			if s.Count != 1 || !s.Percolates {
				t.Fatalf("helix: %d clusters, percolates %v; want 1 spanning tube", s.Count, s.Percolates)
			}
		})
		t.Run("walks/"+strconv.Itoa(conn), func(t *testing.T) {
			lab := volume.NewShape[uint8](23, 26, 28, 1)
			walk(lab, 400, 6, 2)
			s := checkInvariant(t, lab, opt, 2)
			t.Logf("%d clusters, largest %d", s.Count, s.Largest)
		})
		t.Run("random/"+strconv.Itoa(conn), func(t *testing.T) {
			p := map[int]float64{6: 0.31, 26: 0.1}[conn]
			lab := randomVolume([3]int{24, 21, 26}, p, 3)
			s := checkInvariant(t, lab, opt, 3)
			t.Logf("%d clusters, largest fraction %.3f, percolates %v", s.Count, s.LargestFraction, s.Percolates)
		})
	}
}

// Source: analytic — voxels that share only an edge or a corner are one
// cluster under 26-connectivity and separate under 6, also when the contact
// crosses a tile edge or corner where three or more tiles meet.
func TestDiagonalContactsAcrossTileCorners(t *testing.T) {
	lab := volume.NewShape[uint8](16, 16, 16, 1)
	// Chain of corner contacts through the point where 8 tiles of 8³ meet,
	// then edge contacts across the y–x tile edge at z = 3.
	for _, p := range [][3]int{{5, 5, 5}, {6, 6, 6}, {7, 7, 7}, {8, 8, 8}, {9, 9, 9}, {3, 7, 7}, {3, 8, 8}, {2, 7, 9}, {1, 8, 8}} {
		lab.Set(p[0], p[1], p[2], nw)
	}
	cores := volume.Tiling{Whole: lab.Box, Tile: [3]int{8, 8, 8}}.Cores()
	for _, c := range []struct {
		conn, want int
	}{{26, 2}, {6, 9}} {
		opt := Options{Connectivity: c.conn}
		_, single := join(t, lab, []volume.Box{lab.Box}, opt)
		_, tiled := join(t, lab, cores, opt)
		if single.Count != c.want || tiled.Count != c.want {
			t.Fatalf("connectivity %d: single %d, tiled %d clusters; want %d", c.conn, single.Count, tiled.Count, c.want)
		}
	}
}

// Source: analytic — a tube from the inlet face to the outlet face
// percolates; one stopping a voxel short does not, and its volume is trapped.
func TestPercolationTube(t *testing.T) {
	for _, axis := range []int{0, 1, 2} {
		for _, short := range []bool{false, true} {
			n := [3]int{30, 22, 26}
			lab := volume.NewShape[uint8](n[0], n[1], n[2], 1)
			end := n[axis]
			if short {
				end--
			}
			var c [3]float64
			for a := range c {
				c[a] = float64(n[a]) / 2
			}
			want := int64(0)
			for z := 0; z < n[0]; z++ {
				for y := 0; y < n[1]; y++ {
					for x := 0; x < n[2]; x++ {
						p := [3]int{z, y, x}
						if p[axis] >= end {
							continue
						}
						d2 := 0.0
						for a := 0; a < 3; a++ {
							if a != axis {
								d2 += (float64(p[a]) - c[a]) * (float64(p[a]) - c[a])
							}
						}
						if d2 <= 9 {
							lab.Set(z, y, x, nw)
							want++
						}
					}
				}
			}
			opt := Options{FlowAxis: axis}
			for _, cores := range [][]volume.Box{{lab.Box}, volume.Tiling{Whole: lab.Box, Tile: [3]int{7, 5, 6}}.Cores()} {
				_, s := join(t, lab, cores, opt)
				if s.Count != 1 || s.Total != want {
					t.Fatalf("axis %d short %v: %d clusters of %d voxels, want 1 of %d", axis, short, s.Count, s.Total, want)
				}
				if s.Percolates == short {
					t.Fatalf("axis %d short %v: percolates %v", axis, short, s.Percolates)
				}
				// A short tube still touches the inlet, so it is connected, not trapped.
				if s.ConnectedFraction != 1 || s.TrappedFraction != 0 {
					t.Fatalf("axis %d short %v: connected %v trapped %v", axis, short, s.ConnectedFraction, s.TrappedFraction)
				}
			}
			// A tube along another axis neither percolates nor is connected.
			_, s := join(t, lab, []volume.Box{lab.Box}, Options{FlowAxis: (axis + 1) % 3})
			if s.Percolates || s.TrappedFraction != 1 {
				t.Fatalf("axis %d, flow across: percolates %v trapped %v", axis, s.Percolates, s.TrappedFraction)
			}
		}
	}
}

// Source: analytic — three balls of known voxel counts: summary arithmetic
// (fractions, log2 histogram, trapped volume).
func TestSummaryArithmetic(t *testing.T) {
	g := []Ganglion{{Voxels: 100, Inlet: true, Outlet: true}, {Voxels: 7, Inlet: true}, {Voxels: 1}, {Voxels: 8}}
	s := Summarize(g, Options{})
	want := Summary{
		Connectivity: 26, Count: 4, Total: 116, Largest: 100, LargestFraction: 100.0 / 116,
		Percolates: true, Spanning: 1, SpanningFraction: 100.0 / 116,
		ConnectedVoxels: 107, TrappedVoxels: 9, ConnectedFraction: 107.0 / 116, TrappedFraction: 9.0 / 116,
		TrappedCount: 2, SizeHistogram: []int64{1, 0, 1, 1, 0, 0, 1},
	}
	if !reflect.DeepEqual(s, want) {
		t.Fatalf("got %+v\nwant %+v", s, want)
	}
}

// Tiles round-trip through JSON (the form workers publish) and give the same
// merge; tiles labelled from a cropped core give the same partial as from a
// volume with halo.
func TestTileJSONAndNoHalo(t *testing.T) {
	lab := randomVolume([3]int{20, 18, 22}, 0.12, 7)
	opt := Options{}
	cores := volume.Tiling{Whole: lab.Box, Tile: [3]int{6, 7, 8}}.Cores()
	withHalo := labelTiles(lab, cores, opt, false)
	bare := labelTiles(lab, cores, opt, true)
	if !reflect.DeepEqual(withHalo, bare) {
		t.Fatal("a tile's partial depends on voxels outside its core")
	}
	var decoded []*Tile
	b, err := json.Marshal(withHalo)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &decoded); err != nil {
		t.Fatal(err)
	}
	s1, err := Merge(withHalo, lab.Box, opt)
	if err != nil {
		t.Fatal(err)
	}
	s2, err := Merge(decoded, lab.Box, opt)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(s1, s2) {
		t.Fatalf("JSON round trip changed the merge: %+v vs %+v", s1, s2)
	}
	t.Logf("%d tiles, %d JSON bytes for %d voxels", len(cores), len(b), len(lab.Pix))
}

// The Local map relabels each tile's components with whole-volume ids that
// agree with a single-tile labelling voxel by voxel (same partition).
func TestLocalMapGivesSamePartition(t *testing.T) {
	lab := randomVolume([3]int{14, 15, 16}, 0.1, 8)
	opt := Options{}
	set := phase.Of(nw)
	single, _ := components(lab, set, lab.Box, 26)
	cores := volume.Tiling{Whole: lab.Box, Tile: [3]int{4, 6, 5}}.Cores()
	tiles := labelTiles(lab, cores, opt, false)
	m, err := Join(tiles, lab.Box, opt)
	if err != nil {
		t.Fatal(err)
	}
	global := make([]int32, len(lab.Pix))
	for i, c := range cores {
		ids, _ := components(lab, set, c, 26)
		k := 0
		for z := c.Min[0]; z < c.Max[0]; z++ {
			for y := c.Min[1]; y < c.Max[1]; y++ {
				for x := c.Min[2]; x < c.Max[2]; x++ {
					if ids[k] != 0 {
						global[lab.Index(z, y, x)] = m.Local[i][ids[k]-1] + 1
					}
					k++
				}
			}
		}
	}
	// The two labellings must be related by a bijection.
	fwd, back := map[int32]int32{}, map[int32]int32{}
	for i := range global {
		a, b := single[i], global[i]
		if (a == 0) != (b == 0) {
			t.Fatalf("voxel %d: set membership differs", i)
		}
		if a == 0 {
			continue
		}
		if x, ok := fwd[a]; ok && x != b {
			t.Fatalf("single-tile cluster %d maps to merged %d and %d", a, x, b)
		}
		if x, ok := back[b]; ok && x != a {
			t.Fatalf("merged cluster %d maps to single-tile %d and %d", b, x, a)
		}
		fwd[a], back[b] = b, a
	}
	if len(fwd) != len(m.Ganglia) {
		t.Fatalf("%d single-tile clusters, %d merged", len(fwd), len(m.Ganglia))
	}
}

func TestMergeRejectsBadInput(t *testing.T) {
	lab := randomVolume([3]int{8, 8, 8}, 0.2, 9)
	opt := Options{}
	cores := volume.Tiling{Whole: lab.Box, Tile: [3]int{4, 8, 8}}.Cores()
	tiles := labelTiles(lab, cores, opt, false)
	overlap := labelTiles(lab, []volume.Box{{Max: [3]int{5, 8, 8}}, {Min: [3]int{3, 0, 0}, Max: [3]int{6, 8, 8}}}, opt, false)
	bad := *tiles[0]
	bad.Faces[FaceHighZ].Runs = append([]int32(nil), bad.Faces[FaceHighZ].Runs...)
	bad.Faces[FaceHighZ].Runs[1]++
	cases := map[string]struct {
		tiles []*Tile
		opt   Options
	}{
		"gap":          {tiles[:1], opt},
		"overlap":      {overlap, opt},
		"connectivity": {tiles, Options{Connectivity: 6}},
		"bad option":   {tiles, Options{Connectivity: 18}},
		"flow axis":    {tiles, Options{FlowAxis: 3}},
		"runs":         {[]*Tile{&bad, tiles[1]}, opt},
	}
	for name, c := range cases {
		if _, err := Merge(c.tiles, lab.Box, c.opt); err == nil {
			t.Errorf("%s: no error", name)
		} else if !strings.HasPrefix(err.Error(), "cluster: ") {
			t.Errorf("%s: error %q lacks the package prefix", name, err)
		}
	}
}

// BenchmarkLabel reports the tile labelling throughput on a 128³ tile near
// the 26-connected percolation threshold.
func BenchmarkLabel(b *testing.B) {
	lab := randomVolume([3]int{128, 128, 128}, 0.1, 1)
	set := phase.Of(nw)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		Label(lab, set, lab.Box, lab.Box, Options{})
	}
	b.ReportMetric(float64(len(lab.Pix))*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}

// BenchmarkMerge reports the merge throughput for 64 tiles of 32³.
func BenchmarkMerge(b *testing.B) {
	lab := randomVolume([3]int{128, 128, 128}, 0.1, 1)
	cores := volume.Tiling{Whole: lab.Box, Tile: [3]int{32, 32, 32}}.Cores()
	tiles := labelTiles(lab, cores, Options{}, false)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := Merge(tiles, lab.Box, Options{}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(lab.Pix))*float64(b.N)/b.Elapsed().Seconds()/1e6, "MVox/s")
}

// FuzzPlane feeds arbitrary run lists to the plane decoder: it must reject
// malformed ones with an error (never panic), and a plane it accepts must
// survive re-encoding unchanged in content.
func FuzzPlane(f *testing.F) {
	f.Add(2, 3, []byte{0, 4, 1, 2})
	f.Add(1, 1, []byte{0, 1})
	f.Add(3, 2, []byte{5, 6})
	f.Add(2, 2, []byte{1, 3})
	f.Fuzz(func(t *testing.T, rows, cols int, raw []byte) {
		if rows < 0 || cols < 0 || rows > 64 || cols > 64 {
			return
		}
		p := Plane{Rows: rows, Cols: cols}
		for _, b := range raw {
			p.Runs = append(p.Runs, int32(int8(b)))
		}
		dst := make([]int32, rows*cols)
		if err := p.Decode(dst); err != nil {
			if !strings.HasPrefix(err.Error(), "cluster: ") {
				t.Fatalf("error %q lacks the package prefix", err)
			}
			return
		}
		q := encodePlane(dst, rows, cols)
		back := make([]int32, rows*cols)
		if err := q.Decode(back); err != nil {
			t.Fatalf("re-encoded plane rejected: %v", err)
		}
		if !slices.Equal(dst, back) {
			t.Fatal("re-encoding changed the plane")
		}
	})
}

// TestResolverRim: the ganglion Resolver.At reads from a tile's rim is the
// ganglion of that voxel in the whole volume (the partition into clusters
// of a single-tile labelling, which TestLabelMatchesScipy checks against
// scipy.ndimage.label), for every set voxel within the rim depth of its
// tile's faces, on grid and guillotine tilings; deeper voxels and voxels
// not in the set are refused.
func TestResolverRim(t *testing.T) {
	const depth = 3
	lab := randomVolume([3]int{24, 21, 19}, 0.3, 7)
	set := phase.Of(nw)
	opt := Options{Connectivity: 26}
	wt, wl := LabelLookup(lab, set, lab.Box, lab.Box, opt, 0)
	defer wl.Release()
	wm, err := Join([]*Tile{wt}, lab.Box, opt)
	if err != nil {
		t.Fatal(err)
	}
	for name, cores := range tilings(lab.Box, 4) {
		tiles := make([]*Tile, len(cores))
		for i, c := range cores {
			var l *Lookup
			tiles[i], l = LabelLookup(lab, set, c, lab.Box, opt, depth)
			l.Release()
		}
		m, err := Join(tiles, lab.Box, opt)
		if err != nil {
			t.Fatal(err)
		}
		r := m.Resolver(tiles)
		toWhole := map[int32]int32{}
		checked, refused := 0, 0
		for _, c := range cores {
			for z := c.Min[0]; z < c.Max[0]; z++ {
				for y := c.Min[1]; y < c.Max[1]; y++ {
					for x := c.Min[2]; x < c.Max[2]; x++ {
						p := [3]int{z, y, x}
						d := min(z-c.Min[0], c.Max[0]-1-z, y-c.Min[1], c.Max[1]-1-y, x-c.Min[2], c.Max[2]-1-x)
						g, err := r.At(p)
						switch {
						case lab.At(z, y, x) != nw || d >= depth:
							if err == nil {
								t.Fatalf("%s: voxel %v (set %v, depth %d) resolved to %d", name, p, lab.At(z, y, x) == nw, d, g)
							}
							refused++
						case err != nil:
							t.Fatalf("%s: voxel %v: %v", name, p, err)
						default:
							w := wm.Local[0][wl.At(z, y, x)-1]
							if prev, ok := toWhole[g]; ok && prev != w {
								t.Fatalf("%s: ganglion %d holds voxels of whole-volume ganglia %d and %d", name, g, prev, w)
							}
							toWhole[g] = w
							checked++
						}
					}
				}
			}
		}
		seen := map[int32]bool{}
		for _, w := range toWhole {
			if seen[w] {
				t.Fatalf("%s: two ganglia map to whole-volume ganglion %d", name, w)
			}
			seen[w] = true
		}
		if checked == 0 || refused == 0 {
			t.Fatalf("%s: %d voxels resolved, %d refused", name, checked, refused)
		}
	}
}
