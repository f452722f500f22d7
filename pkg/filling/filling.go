// Package filling finds the pore-filling events between two consecutive
// steps of a displacement: the pore-space voxels whose fluid changed from one
// step to the next, grouped into connected regions. A voxel wetting in the
// earlier step and nonwetting in the later one is drainage (w→n), the reverse
// is imbibition (n→w); voxels that are solid or outside the sample in either
// step, or hold the same fluid in both, are no event. Regions are the
// 26-connected components of each of the two change sets, found tile by tile
// with the two-pass labelling of package cluster and joined across tile faces
// by its union-find merge, so the events are those of the whole volume
// whatever the tiling.
//
// Per step pair the package reports, for each kind, the number of events,
// their summed volume, a histogram of event volumes in logarithmic (base-2)
// bins, the largest events with their centroids, and the rate (events per
// second of the time between the two steps). Observing pore-scale filling
// events (Haines jumps, snap-off) as connected changed regions between
// consecutive fast-tomography volumes is the approach of, e.g., Berg et al.
// 2013, Proc. Natl. Acad. Sci. 110:3755 (from memory); the definitions here
// are ours.
package filling

import (
	"fmt"
	"math"
	"math/bits"
	"sort"

	"sluice/pkg/cluster"
	"sluice/pkg/phase"
	"sluice/pkg/volume"
)

// Connectivity is the voxel connectivity of event regions.
const Connectivity = 26

// MaxListed is how many of the largest events of each kind a Result lists
// with their centroids.
const MaxListed = 100

// Change codes of the transition volume labelled per tile.
const (
	codeNone       = 0
	codeDrainage   = 1
	codeImbibition = 2
)

// KindTile is the partial of one kind of event in one tile: the tile's
// components (package cluster, for the merge across faces) and, per local
// component, the sums of its voxels' global coordinates (for centroids).
type KindTile struct {
	Clusters *cluster.Tile `json:"clusters"`
	// Sum[i-1] holds Σz, Σy, Σx over the voxels of local component i.
	Sum [][3]int64 `json:"sum_zyx"`
}

// Tile is the per-tile partial of the events between two steps.
type Tile struct {
	Core       volume.Box `json:"core"`
	Drainage   KindTile   `json:"drainage"`
	Imbibition KindTile   `json:"imbibition"`
}

// Changes returns the transition codes over core (1 drainage, 2
// imbibition, 0 none) of the labels prev (earlier step) and cur (later
// step), which must both cover core.
func Changes(prev, cur *volume.Labels, core volume.Box, codes phase.Codes) (*volume.Labels, error) {
	if core.Empty() || !prev.Box.ContainsBox(core) || !cur.Box.ContainsBox(core) {
		return nil, fmt.Errorf("filling: core %v is empty or not inside the labels of both steps (%v, %v)", core, prev.Box, cur.Box)
	}
	chg := volume.New[uint8](core, cur.VoxelSize)
	n := core.Size()
	w, nw := codes.Wetting, codes.Nonwetting
	i := 0
	for z := core.Min[0]; z < core.Max[0]; z++ {
		for y := core.Min[1]; y < core.Max[1]; y++ {
			p := prev.Pix[prev.Index(z, y, core.Min[2]):][:n[2]]
			c := cur.Pix[cur.Index(z, y, core.Min[2]):][:n[2]]
			out := chg.Pix[i : i+n[2]]
			for x := range out {
				switch {
				case p[x] == w && c[x] == nw:
					out[x] = codeDrainage
				case p[x] == nw && c[x] == w:
					out[x] = codeImbibition
				}
			}
			i += n[2]
		}
	}
	return chg, nil
}

// TileOf labels the drainage and imbibition regions of core. whole is the
// box of the whole volume.
func TileOf(prev, cur *volume.Labels, core, whole volume.Box, codes phase.Codes) (*Tile, error) {
	if !whole.ContainsBox(core) {
		return nil, fmt.Errorf("filling: core %v is not inside the volume %v", core, whole)
	}
	chg, err := Changes(prev, cur, core, codes)
	if err != nil {
		return nil, err
	}
	t := &Tile{Core: core}
	t.Drainage = labelKind(chg, codeDrainage, core, whole)
	t.Imbibition = labelKind(chg, codeImbibition, core, whole)
	return t, nil
}

func labelKind(chg *volume.Labels, code uint8, core, whole volume.Box) KindTile {
	ct, look := cluster.LabelLookup(chg, phase.Of(code), core, whole, cluster.Options{Connectivity: Connectivity}, 0)
	defer look.Release()
	sum := make([][3]int64, len(ct.Sizes))
	look.Runs(func(z, y, x0, x1 int, id int32) {
		n := int64(x1 - x0)
		s := &sum[id-1]
		s[0] += int64(z) * n
		s[1] += int64(y) * n
		s[2] += int64(x0+x1-1) * n / 2 // x0 + … + x1−1
	})
	return KindTile{Clusters: ct, Sum: sum}
}

// Event is one connected region of changed voxels of the whole volume.
type Event struct {
	Voxels int64 `json:"voxels"`
	// Centroid is the mean voxel index (z, y, x) of the region.
	Centroid [3]float64 `json:"-"`
}

// Join merges the tiles' partials (their cores must cover whole exactly
// once) into the drainage and imbibition events of the whole volume, each
// list largest first (ties by centroid z, y, x), the same for every tiling.
func Join(tiles []*Tile, whole volume.Box) (drainage, imbibition []Event, err error) {
	for i, t := range tiles {
		if t == nil || t.Drainage.Clusters == nil || t.Imbibition.Clusters == nil {
			return nil, nil, fmt.Errorf("filling: tile %d has no event partial", i)
		}
	}
	join := func(get func(*Tile) KindTile) ([]Event, error) {
		cts := make([]*cluster.Tile, len(tiles))
		for i, t := range tiles {
			k := get(t)
			if len(k.Sum) != len(k.Clusters.Sizes) {
				return nil, fmt.Errorf("filling: tile %d has %d components and %d coordinate sums", i, len(k.Clusters.Sizes), len(k.Sum))
			}
			cts[i] = k.Clusters
		}
		m, err := cluster.Join(cts, whole, cluster.Options{Connectivity: Connectivity})
		if err != nil {
			return nil, fmt.Errorf("filling: %w", err)
		}
		sums := make([][3]int64, len(m.Ganglia))
		for i, t := range tiles {
			for j, g := range m.Local[i] {
				s := get(t).Sum[j]
				for a := range 3 {
					sums[g][a] += s[a]
				}
			}
		}
		ev := make([]Event, len(m.Ganglia))
		for g, gg := range m.Ganglia {
			ev[g].Voxels = gg.Voxels
			for a := range 3 {
				ev[g].Centroid[a] = float64(sums[g][a]) / float64(gg.Voxels)
			}
		}
		sort.SliceStable(ev, func(i, j int) bool {
			if ev[i].Voxels != ev[j].Voxels {
				return ev[i].Voxels > ev[j].Voxels
			}
			return ev[i].Centroid[0] < ev[j].Centroid[0] ||
				ev[i].Centroid[0] == ev[j].Centroid[0] && (ev[i].Centroid[1] < ev[j].Centroid[1] ||
					ev[i].Centroid[1] == ev[j].Centroid[1] && ev[i].Centroid[2] < ev[j].Centroid[2])
		})
		return ev, nil
	}
	if drainage, err = join(func(t *Tile) KindTile { return t.Drainage }); err != nil {
		return nil, nil, err
	}
	if imbibition, err = join(func(t *Tile) KindTile { return t.Imbibition }); err != nil {
		return nil, nil, err
	}
	return drainage, imbibition, nil
}

// Listed is one of the largest events of a kind, in SI units.
type Listed struct {
	Voxels   int64   `json:"voxels"`
	VolumeM3 float64 `json:"volume_m3"`
	// CentroidM is the centroid (z, y, x) in metres from the corner of the
	// volume: voxel (i, j, k) has its centre at ((i+½)h, (j+½)h, (k+½)h).
	CentroidM [3]float64 `json:"centroid_zyx_m"`
}

// Kind is the summary of one kind of event between two steps.
type Kind struct {
	// Count is the number of events (connected regions).
	Count int64 `json:"count"`
	// Voxels and VolumeM3 are the summed size of all events.
	Voxels   int64   `json:"voxels"`
	VolumeM3 float64 `json:"volume_m3"`
	// RatePerS is Count over the time between the two steps (1/s); null
	// when that time is not positive.
	RatePerS *float64 `json:"rate_per_s"`
	// Histogram[k] counts events of 2^k to 2^(k+1)−1 voxels; BinLowM3[k]
	// is the volume of 2^k voxels (m³), the low edge of bin k.
	Histogram []int64   `json:"volume_histogram"`
	BinLowM3  []float64 `json:"volume_bin_low_m3"`
	// Largest lists at most MaxListed of the largest events, largest first.
	Largest []Listed `json:"largest"`
}

// Result is the pore_filling object of a step result: the events between
// the previous step and this one.
type Result struct {
	// PreviousStep names the step the changes are counted from; null for
	// the first step of a run (no events).
	PreviousStep *string `json:"previous_step"`
	// IntervalS is the time from the previous step to this one (s).
	IntervalS *float64 `json:"interval_s"`
	// Connectivity of event regions (26).
	Connectivity int `json:"connectivity"`
	// Drainage (w→n) and Imbibition (n→w); null when not computable.
	Drainage   *Kind `json:"drainage"`
	Imbibition *Kind `json:"imbibition"`
	// Note says why the events are null, when they are.
	Note string `json:"note,omitempty"`
}

// Summarize turns the events of one kind into SI units: h is the voxel
// edge (m), dt the time between the steps (s).
func Summarize(ev []Event, h, dt float64) *Kind {
	k := &Kind{Count: int64(len(ev)), Histogram: []int64{}, BinLowM3: []float64{}, Largest: []Listed{}}
	v := h * h * h
	for i, e := range ev {
		k.Voxels += e.Voxels
		b := bits.Len64(uint64(e.Voxels)) - 1
		for len(k.Histogram) <= b {
			k.BinLowM3 = append(k.BinLowM3, math.Ldexp(v, len(k.Histogram)))
			k.Histogram = append(k.Histogram, 0)
		}
		k.Histogram[b]++
		if i < MaxListed {
			k.Largest = append(k.Largest, Listed{Voxels: e.Voxels, VolumeM3: float64(e.Voxels) * v,
				CentroidM: [3]float64{(e.Centroid[0] + 0.5) * h, (e.Centroid[1] + 0.5) * h, (e.Centroid[2] + 0.5) * h}})
		}
	}
	k.VolumeM3 = float64(k.Voxels) * v
	if dt > 0 {
		r := float64(k.Count) / dt
		k.RatePerS = &r
	}
	return k
}

// First is the Result of the first step of a run: no previous step, no
// events.
func First() *Result {
	return &Result{Connectivity: Connectivity, Note: "first step of the run: no previous step to compare with"}
}

// Without is the Result of a step whose events cannot be computed against
// its previous step prev, with the reason.
func Without(prev, reason string) *Result {
	return &Result{PreviousStep: &prev, Connectivity: Connectivity, Note: reason}
}

// Between builds the Result from the joined events: prev names the
// previous step, h is the voxel edge (m), dt the time from prev to this
// step (s).
func Between(prev string, drainage, imbibition []Event, h, dt float64) *Result {
	r := &Result{PreviousStep: &prev, Connectivity: Connectivity, IntervalS: &dt,
		Drainage: Summarize(drainage, h, dt), Imbibition: Summarize(imbibition, h, dt)}
	return r
}
