//go:build hdf5 && cgo

package volio

import (
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"testing"

	"sluice/pkg/volume"
)

// BenchmarkScanRead reads benchScan (256³ uint16, noisy two-phase) the way
// ingest does, 64 slices at a time through OpenStream, from HDF5 files
// written by h5py (contiguous; 64³ chunks with gzip level 4 + shuffle, LZ4,
// Blosc lz4 + shuffle) and from Zarr v2 arrays (ours with zstd level 3, and
// zarr-python's default Blosc lz4 + shuffle). MB/s counts uncompressed
// voxel bytes.
func BenchmarkScanRead(b *testing.B) {
	v := benchScan()
	dir := b.TempDir()
	raw := filepath.Join(dir, "scan.bin")
	if err := os.WriteFile(raw, leBytes(v), 0o644); err != nil {
		b.Fatal(err)
	}
	ctx := context.Background()
	z, err := CreateZarr(ctx, Dir(dir), "zstd.zarr", ZarrMeta{Shape: [3]int{256, 256, 256}, Chunks: [3]int{64, 64, 64}, DType: volume.Uint16, Compressor: "zstd", Level: 3})
	if err != nil {
		b.Fatal(err)
	}
	if err := z.WriteBox(ctx, v); err != nil {
		b.Fatal(err)
	}
	py := `
import sys, os, numpy as np, h5py, hdf5plugin, zarr
d = sys.argv[1]
a = np.fromfile(os.path.join(d, "scan.bin"), "<u2").reshape(256, 256, 256)
with h5py.File(os.path.join(d, "scan.h5"), "w") as f:
    f.create_dataset("contig", data=a)
    f.create_dataset("gzip", data=a, chunks=(64, 64, 64), compression="gzip", compression_opts=4, shuffle=True)
    f.create_dataset("lz4", data=a, chunks=(64, 64, 64), **hdf5plugin.LZ4())
    f.create_dataset("blosc", data=a, chunks=(64, 64, 64), **hdf5plugin.Blosc(cname="lz4", shuffle=hdf5plugin.Blosc.SHUFFLE))
zarr.open(os.path.join(d, "blosc.zarr"), mode="w", shape=a.shape, chunks=(64, 64, 64), dtype="<u2")[:] = a
`
	if out, err := exec.Command(refPython, "-c", py, dir).CombinedOutput(); err != nil {
		b.Skipf("h5py/zarr writer unavailable: %v %s", err, lastLine(string(out)))
	}
	for _, c := range []struct{ name, path, dataset string }{
		{"hdf5-contiguous", "scan.h5", "contig"},
		{"hdf5-gzip4-shuffle", "scan.h5", "gzip"},
		{"hdf5-lz4", "scan.h5", "lz4"},
		{"hdf5-blosc-lz4-shuffle", "scan.h5", "blosc"},
		{"zarr-zstd3", "zstd.zarr", ""},
		{"zarr-blosc-lz4-shuffle", "blosc.zarr", ""},
	} {
		b.Run(c.name, func(b *testing.B) {
			b.SetBytes(int64(len(v.Pix) * 2))
			for i := 0; i < b.N; i++ {
				s, err := OpenStream(filepath.Join(dir, c.path), Options{Dataset: c.dataset})
				if err != nil {
					b.Fatal(err)
				}
				for z0 := 0; z0 < 256; z0 += 64 {
					if _, err := s.ReadSlab(z0, z0+64); err != nil {
						b.Fatal(err)
					}
				}
				s.Close()
			}
		})
	}
}
