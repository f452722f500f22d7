package ingest

import (
	"bufio"
	"context"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"runtime/debug"
	"strconv"
	"strings"
	"testing"

	"sluice/pkg/campaign"
	"sluice/pkg/forward"
	"sluice/pkg/layout"
	"sluice/pkg/scan"
	"sluice/pkg/store"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
)

// memShape is the scan of the memory test: 128 MiB of uint16 with a wide
// cross-section (z × y × x = 256 × 1024 × 256): at tile 32 a slab (tile
// height × cross-section) is 16 MiB, a band (one row of chunks) 512 KiB.
var memShape = [3]int{256, 1024, 256}

const memTile = 32

// TestIngestMemoryBounded stores a scan 256 times larger than one band of
// chunks in a separate process and checks that the growth of its peak
// resident set stays within a bound derived from the band size, below
// twice one slab and far below the scan size: ingest streams band by band
// and never holds the volume or a whole cross-section.
//
// Bound (derivation): a band (B bytes: tile × tile × nx voxels) is live
// while the raw reader fills it (machine byte order: straight into the
// volume) and the Zarr writer encodes its chunks (raw chunk + compressed
// copy, each ≤ B); the garbage collector lets the heap reach about twice
// the live set (GOGC=100), so ≤ 2·(B + 2B) plus a fixed part for the zstd
// encoders (one per chunk goroutine) and the runtime: 32 MiB allowed.
func TestIngestMemoryBounded(t *testing.T) {
	if path := os.Getenv("SLUICE_INGEST_MEMORY_CHILD"); path != "" {
		ingestMemoryChild(t, path)
		return
	}
	dir := t.TempDir()
	path := filepath.Join(dir, "scan-0001.raw")
	writePatternScan(t, path, memShape)
	cmd := exec.Command(os.Args[0], "-test.run=^TestIngestMemoryBounded$", "-test.count=1")
	cmd.Env = append(os.Environ(), "SLUICE_INGEST_MEMORY_CHILD="+path)
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("child: %v\n%s", err, out)
	}
	var base, peak int64
	for _, l := range strings.Split(string(out), "\n") {
		if rest, ok := strings.CutPrefix(l, "MEMORY "); ok {
			fmt.Sscan(rest, &base, &peak)
		}
	}
	if peak == 0 {
		t.Fatalf("child reported no memory figures:\n%s", out)
	}
	band := int64(memTile * memTile * memShape[2] * 2)
	slab := int64(memTile * memShape[1] * memShape[2] * 2)
	scanBytes := int64(memShape[0]*memShape[1]*memShape[2]) * 2
	bound := 2*(3*band) + 32<<20
	grew := (peak - base) * 1024
	t.Logf("scan %d MiB, slab %d MiB, band %d KiB: peak RSS grew by %.1f MiB (bound %.1f MiB)", scanBytes>>20, slab>>20, band>>10, float64(grew)/(1<<20), float64(bound)/(1<<20))
	if grew > bound {
		t.Errorf("ingest of a %d MiB scan grew the peak RSS by %.1f MiB, more than the band-derived bound %.1f MiB", scanBytes>>20, float64(grew)/(1<<20), float64(bound)/(1<<20))
	}
	if bound >= 2*(2*slab) || bound >= scanBytes/2 {
		t.Fatalf("test scan too small to tell band streaming from slab or whole-volume reads")
	}
}

// ingestMemoryChild stores the scan at path as a step and prints its
// resident set before (VmRSS, after resetting the high-water mark) and the
// peak after (VmHWM), both in KiB.
func ingestMemoryChild(t *testing.T, path string) {
	ctx := context.Background()
	st, err := store.Open(ctx, filepath.Join(filepath.Dir(path), "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = memTile
	if _, err := EnsureCampaign(ctx, st, "mem", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	in := &Ingester{Store: st, Version: "test"}
	debug.FreeOSMemory()
	// Linux: writing 5 to clear_refs resets VmHWM to the current RSS
	// (proc(5)).
	if err := os.WriteFile("/proc/self/clear_refs", []byte("5"), 0); err != nil {
		t.Skipf("cannot reset the peak RSS: %v", err)
	}
	base := procStatus(t, "VmRSS")
	man, err := in.StoreStep(ctx, Request{Campaign: "mem", Step: "scan-0001", Path: path, HasTime: true})
	if err != nil {
		t.Fatal(err)
	}
	if man.Shape != memShape {
		t.Fatalf("stored shape %v, want %v", man.Shape, memShape)
	}
	fmt.Printf("MEMORY %d %d\n", base, procStatus(t, "VmHWM"))
}

func procStatus(t *testing.T, key string) int64 {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		t.Skipf("no /proc: %v", err)
	}
	for _, l := range strings.Split(string(b), "\n") {
		if v, ok := strings.CutPrefix(l, key+":"); ok {
			n, err := strconv.ParseInt(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(v), "kB")), 10, 64)
			if err != nil {
				t.Fatal(err)
			}
			return n
		}
	}
	t.Fatalf("no %s in /proc/self/status", key)
	return 0
}

// writePatternScan writes a uint16 raw scan with its header, plane by
// plane: a grey ramp with a 12-bit hash texture (incompressible enough that
// the zstd path is exercised, cheap to produce).
func writePatternScan(t *testing.T, path string, s [3]int) {
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	plane := make([]byte, 2*s[1]*s[2])
	for z := 0; z < s[0]; z++ {
		for i := 0; i < s[1]*s[2]; i++ {
			h := uint32(z*s[1]*s[2]+i) * 2654435761
			binary.LittleEndian.PutUint16(plane[2*i:], uint16(20000+z+int(h>>20)))
		}
		if _, err := w.Write(plane); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Flush(); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
	h, _ := json.Marshal(volio.RawHeader{Shape: s[:], DType: "uint16", VoxelSize: "2um"})
	if err := os.WriteFile(path+".sluice.json", h, 0o644); err != nil {
		t.Fatal(err)
	}
}

// TestThresholdsKnownPlanEqualsPass1: when the configuration fixes
// everything pass 1 would find, the plan made without reading the step is
// the plan scan.Prepare makes from the stored grey values; any setting that
// needs the histogram turns the shortcut off.
func TestThresholdsKnownPlanEqualsPass1(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	st, err := store.Open(ctx, filepath.Join(dir, "store"), store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	// Solid lower half, a nonwetting ball in the wetting upper half.
	lab := volume.NewShape[uint8](40, 40, 40, 2e-6)
	for z := 0; z < 40; z++ {
		for y := 0; y < 40; y++ {
			for x := 0; x < 40; x++ {
				v := uint8(1)
				if z < 16 {
					v = 0
				} else if (z-28)*(z-28)+(y-20)*(y-20)+(x-20)*(x-20) < 64 {
					v = 2
				}
				lab.Set(z, y, x, v)
			}
		}
	}
	lv := forward.Default()
	g, err := forward.Render(lab, lv)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "scan-0001.raw")
	if err := volio.WriteRaw(path, forward.Uint16(g), volio.WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	cfg := campaign.Default()
	cfg.Tile = 16
	cfg.DetectSample = false
	cfg.Segment.Threshold = "fixed"
	cfg.Segment.Fixed = []float64{(lv.Nonwetting + lv.Wetting) / 2, (lv.Wetting + lv.Solid) / 2}
	cfg.Segment.PartialVolume.Blur = lv.Blur
	cfg.Segment.PartialVolume.SolidGrey = lv.Solid
	if !ThresholdsKnown(cfg, volume.Uint16) {
		t.Fatalf("fixed thresholds, no sample detection, given solid grey: want known")
	}
	if _, err := EnsureCampaign(ctx, st, "known", cfg, "test", ""); err != nil {
		t.Fatal(err)
	}
	in := &Ingester{Store: st, Version: "test"}
	man, err := in.StoreStep(ctx, Request{Campaign: "known", Step: "scan-0001", Path: path, HasTime: true})
	if err != nil {
		t.Fatal(err)
	}
	plan, err := PlanStep(ctx, st, man, cfg, 1, "test")
	if err != nil {
		t.Fatal(err)
	}
	step, _ := layout.NewStep("known", "scan-0001")
	src, err := ZarrSource(ctx, st, step.Volume())
	if err != nil {
		t.Fatal(err)
	}
	prep, eff, err := scan.Prepare(src, man.Whole(), volume.Uint16, cfg, nil, 1)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(plan.Thresholds, prep.Thresholds) {
		t.Errorf("thresholds without pass 1 %+v, with pass 1 %+v", plan.Thresholds, prep.Thresholds)
	}
	if plan.Config.Hash() != eff.Hash() || !reflect.DeepEqual(plan.Config.Segment, eff.Segment) {
		t.Errorf("effective config without pass 1 differs from pass 1's:\n%+v\n%+v", plan.Config.Segment, eff.Segment)
	}

	// Each of these needs something only the histogram gives.
	for name, change := range map[string]func(*campaign.Config){
		"otsu":          func(c *campaign.Config) { c.Segment.Threshold = "otsu" },
		"detect sample": func(c *campaign.Config) { c.DetectSample = true },
		"solid grey":    func(c *campaign.Config) { c.Segment.PartialVolume.SolidGrey = 0 },
		"local fluid":   func(c *campaign.Config) { c.Segment.PartialVolume.LocalFluid = 1 },
	} {
		c := cfg
		c.Segment.Fixed = append([]float64(nil), cfg.Segment.Fixed...)
		change(&c)
		if ThresholdsKnown(c, volume.Uint16) {
			t.Errorf("%s: ThresholdsKnown true, want false", name)
		}
	}
	if ThresholdsKnown(cfg, volume.Float32) {
		t.Errorf("float32 without a configured grey range: ThresholdsKnown true, want false")
	}
}
