package volio

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"sluice/pkg/volume"
)

// benchScan is a 256³ uint16 volume that looks like a two-phase tomogram:
// two grey levels in a smooth pattern plus Gaussian noise (σ = 500), so the
// compression ratio is that of noisy data, not of zeros.
func benchScan() *volume.Volume[uint16] {
	const n = 256
	v := volume.NewShape[uint16](n, n, n, 2.5e-6)
	rng := rand.New(rand.NewPCG(1, 2))
	for z := 0; z < n; z++ {
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				g := 20000.0
				if math.Sin(float64(x)/7)*math.Sin(float64(y)/9)*math.Sin(float64(z)/11) > 0 {
					g = 40000
				}
				v.Pix[v.Index(z, y, x)] = uint16(g + 500*rng.NormFloat64())
			}
		}
	}
	return v
}

// BenchmarkZarrZstd writes and reads a 256³ uint16 volume in 64³ chunks
// through a Dir bucket, uncompressed (level0) and with zstd at level 1
// (klauspost SpeedFastest), 3 (SpeedDefault) and 9
// (SpeedBetterCompression); MB/s counts uncompressed voxel bytes and
// "ratio" is uncompressed / stored bytes.
func BenchmarkZarrZstd(b *testing.B) {
	v := benchScan()
	ctx := context.Background()
	root := b.TempDir()
	bytes := int64(len(v.Pix) * 2)
	for _, level := range []int{0, 1, 3, 9} {
		meta := ZarrMeta{Shape: [3]int{256, 256, 256}, Chunks: [3]int{64, 64, 64}, DType: volume.Uint16, Compressor: "zstd", Level: level}
		if level == 0 {
			meta.Compressor = ""
		}
		z, err := CreateZarr(ctx, Dir(root), fmt.Sprintf("scan%d.zarr", level), meta)
		if err != nil {
			b.Fatal(err)
		}
		// Write once so the read benchmarks find every chunk when run alone.
		if err := z.WriteBox(ctx, v); err != nil {
			b.Fatal(err)
		}
		var stored int64
		for i := 0; i < 64; i++ {
			data, err := Dir(root).Get(ctx, z.ChunkKey([3]int{i / 16, i / 4 % 4, i % 4}))
			if err != nil {
				b.Fatal(err)
			}
			stored += int64(len(data))
		}
		b.Run(fmt.Sprintf("level%d/write", level), func(b *testing.B) {
			b.SetBytes(bytes)
			for i := 0; i < b.N; i++ {
				if err := z.WriteBox(ctx, v); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(bytes)/float64(stored), "ratio")
		})
		b.Run(fmt.Sprintf("level%d/read", level), func(b *testing.B) {
			b.SetBytes(bytes)
			for i := 0; i < b.N; i++ {
				if _, err := z.ReadBox(ctx, v.Box); err != nil {
					b.Fatal(err)
				}
			}
		})
		b.Run(fmt.Sprintf("level%d/read-tile-halo", level), func(b *testing.B) {
			// A 64³ tile core with a 4-voxel halo touches 27 chunks; MB/s
			// counts the voxels returned.
			box := volume.Box{Min: [3]int{64, 64, 64}, Max: [3]int{128, 128, 128}}.Grow(4)
			b.SetBytes(int64(box.Voxels() * 2))
			for i := 0; i < b.N; i++ {
				if _, err := z.ReadBox(ctx, box); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
