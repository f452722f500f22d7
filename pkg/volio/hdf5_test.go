//go:build hdf5 && cgo

package volio

import (
	"bytes"
	"errors"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"sluice/pkg/volume"
)

// h5pyMatrix writes one HDF5 file per (dtype, byte order) with one dataset
// per storage/filter combination, and next to it the reference voxels as
// numpy converts them (float32 for signed and float types), little-endian.
//
// Source: h5py 3.7 (Debian python3-h5py) over the HDF5 1.10 C library, and
// hdf5plugin 4.0 (Debian python3-hdf5plugin), whose filter classes set the
// registered filter ids and parameters; the filters themselves are Debian's
// plugins (hdf5-filter-plugin: LZ4, BZip2; hdf5-filter-plugin-blosc-serial;
// hdf5-plugin-lzf). Bitshuffle (32008) and Zstandard (32015) have no Debian
// 12 plugin, so h5py cannot write them here and they are not checked.
const h5pyMatrix = `
import sys, os, numpy as np, h5py, hdf5plugin
root = sys.argv[1]
rng = np.random.default_rng(16)
shape = (9, 14, 11)
kinds = {"u1": "u1", "u2": "u2", "i1": "i1", "i2": "i2", "f4": "f4", "f8": "f8"}
filters = {
    "contig": None,
    "chunk": {},
    "gzip": {"compression": "gzip", "compression_opts": 6},
    "gzipshuf": {"compression": "gzip", "shuffle": True},
    "lzf": {"compression": "lzf"},
    "lz4": dict(hdf5plugin.LZ4()),
    "bz2": dict(hdf5plugin.BZip2()),
    "blosclz": dict(hdf5plugin.Blosc(cname="blosclz", shuffle=hdf5plugin.Blosc.SHUFFLE)),
    "blosclz4": dict(hdf5plugin.Blosc(cname="lz4", shuffle=hdf5plugin.Blosc.BITSHUFFLE)),
    "bloszstd": dict(hdf5plugin.Blosc(cname="zstd", shuffle=hdf5plugin.Blosc.NOSHUFFLE)),
    "bloszlib": dict(hdf5plugin.Blosc(cname="zlib", shuffle=hdf5plugin.Blosc.SHUFFLE)),
    "bloslz4hc": dict(hdf5plugin.Blosc(cname="lz4hc", shuffle=hdf5plugin.Blosc.SHUFFLE)),
}
for k, dt in kinds.items():
    if dt[0] == "f":
        a = (rng.standard_normal(shape) * 1000).astype(dt)
        a.flat[::7] = rng.integers(0, 70000, a.size)[::7]
    else:
        info = np.iinfo(dt)
        a = rng.integers(info.min, info.max, shape, endpoint=True).astype(dt)
    ref = a.astype("<u1" if k == "u1" else "<u2" if k == "u2" else "<f4")
    ref.tofile(os.path.join(root, k + ".bin"))
    for order in "<>":
        with h5py.File(os.path.join(root, k + ("le" if order == "<" else "be") + ".h5"), "w") as f:
            for name, kw in filters.items():
                t = np.dtype(order + dt) if dt not in ("u1", "i1") else np.dtype(dt)
                if kw is None:
                    f.create_dataset(name, data=a.astype(t))
                else:
                    f.create_dataset(name, data=a.astype(t), chunks=(4, 5, 6), **kw)
`

// Every dtype, byte order, layout and filter that h5py writes here reads
// bit-identically to the array it was written from (after the documented
// conversion to float32 of signed and 64-bit types), whole and in bands
// that cut through chunks.
func TestHDF5WrittenByH5py(t *testing.T) {
	dir := t.TempDir()
	runPython(t, []string{"numpy", "h5py", "hdf5plugin"}, h5pyMatrix, dir)
	filters := []string{"contig", "chunk", "gzip", "gzipshuf", "lzf", "lz4", "bz2", "blosclz", "blosclz4", "bloszstd", "bloszlib", "bloslz4hc"}
	want := map[string]volume.DType{"u1": volume.Uint8, "u2": volume.Uint16, "i1": volume.Float32, "i2": volume.Float32, "f4": volume.Float32, "f8": volume.Float32}
	n := 0
	for k, dt := range want {
		ref, err := Open(filepath.Join(dir, k+".bin"), Options{Shape: [3]int{9, 14, 11}, DType: dt})
		if err != nil {
			t.Fatal(err)
		}
		for _, order := range []string{"le", "be"} {
			file := filepath.Join(dir, k+order+".h5")
			for _, f := range filters {
				what := k + order + "/" + f
				got, err := Open(file, Options{Dataset: "/" + f})
				if f == "lzf" {
					// Debian 12's hdf5-plugin-lzf does not load (its
					// liblzf_filter.so lacks liblzf: "undefined symbol:
					// lzf_decompress"); it must then be refused, never
					// misread. TestHDF5LZFPreloaded reads it with liblzf
					// preloaded.
					if err != nil && (!errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "HDF5 filter 32000 (LZF)")) {
						t.Errorf("%s: %v", what, err)
					}
					if err != nil {
						n++
						continue
					}
				}
				if err != nil {
					t.Errorf("%s: %v", what, err)
					continue
				}
				sameVolume(t, what, got, ref)
				// A band through the chunk grid (chunks are 4×5×6), as ingest reads.
				s, err := OpenStream(file, Options{Dataset: f})
				if err != nil {
					t.Fatal(err)
				}
				if h := s.Header(); h.Format != "hdf5" || h.Shape != [3]int{9, 14, 11} || h.DType != dt || h.HasTime || h.VoxelSize != 0 {
					t.Errorf("%s: header %+v", what, h)
				}
				band, err := s.(BandReader).ReadBandInto(nil, 3, 7, 2, 12)
				if err != nil {
					t.Fatalf("%s band: %v", what, err)
				}
				wantBand := cropAny(ref, volume.Box{Min: [3]int{3, 2, 0}, Max: [3]int{7, 12, 11}})
				sameVolume(t, what+" band", band, wantBand)
				s.Close()
				n++
			}
		}
	}
	if n != 6*2*12 {
		t.Errorf("checked %d datasets, want %d", n, 6*2*12)
	}
}

// NeXus default/signal attributes and the Data Exchange path are followed
// when no dataset is named; voxel size and time come from the dataset's
// attributes only with their units.
func TestHDF5DefaultDatasetAndAttributes(t *testing.T) {
	dir := t.TempDir()
	// Source: NeXus format (nexusformat.org, "Find the plottable data"):
	// root@default → NXentry, NXentry@default → NXdata, NXdata@signal →
	// dataset; Data Exchange (De Carlo et al. 2014): /exchange/data.
	runPython(t, []string{"numpy", "h5py"}, `
import sys, os, numpy as np, h5py
root = sys.argv[1]
a = np.arange(4*5*6, dtype="u2").reshape(4, 5, 6)
b = (a * 3).astype("u2")
with h5py.File(os.path.join(root, "nexus.h5"), "w") as f:
    f.attrs["default"] = "entry"
    e = f.create_group("entry"); e.attrs["NX_class"] = "NXentry"; e.attrs["default"] = "plot"
    d = e.create_group("plot"); d.attrs["NX_class"] = "NXdata"; d.attrs["signal"] = "volume"
    ds = d.create_dataset("volume", data=a, chunks=(2, 5, 6), compression="gzip")
    ds.attrs["voxel_size"] = "2.5um"
    ds.attrs["time_s"] = 405.5
    e.create_dataset("decoy", data=b)
with h5py.File(os.path.join(root, "exchange.h5"), "w") as f:
    ds = f.create_dataset("exchange/data", data=b)
    ds.attrs["voxel_size"] = np.float32(0.65)
    ds.attrs["voxel_size_units"] = "um"
    ds.attrs["time"] = 2.0
    ds.attrs["time_units"] = "min"
with h5py.File(os.path.join(root, "unitless.h5"), "w") as f:
    f.create_dataset("exchange/data", data=b).attrs["voxel_size"] = 2.5
with h5py.File(os.path.join(root, "unitlesstime.h5"), "w") as f:
    f.create_dataset("exchange/data", data=b).attrs["time"] = 60
with h5py.File(os.path.join(root, "none.h5"), "w") as f:
    f.create_dataset("scan/vol", data=b)
with h5py.File(os.path.join(root, "nosignal.h5"), "w") as f:
    f.attrs["default"] = "entry"; f.create_group("entry")
a.astype("<u2").tofile(os.path.join(root, "a.bin")); b.astype("<u2").tofile(os.path.join(root, "b.bin"))
`, dir)
	rawOpt := Options{Shape: [3]int{4, 5, 6}, DType: volume.Uint16}
	a, err := Open(filepath.Join(dir, "a.bin"), rawOpt)
	if err != nil {
		t.Fatal(err)
	}
	b, err := Open(filepath.Join(dir, "b.bin"), rawOpt)
	if err != nil {
		t.Fatal(err)
	}
	h, err := ReadHeader(filepath.Join(dir, "nexus.h5"), Options{})
	if err != nil {
		t.Fatal(err)
	}
	if !sameLength(h.VoxelSize, 2.5e-6) || !h.HasTime || h.TimeS != 405.5 {
		t.Errorf("nexus header %+v, want 2.5 µm at 405.5 s", h)
	}
	got, err := Open(filepath.Join(dir, "nexus.h5"), Options{})
	if err != nil {
		t.Fatal(err)
	}
	sameVolume(t, "nexus default", got, a)
	got, err = Open(filepath.Join(dir, "nexus.h5"), Options{Dataset: "entry/decoy"})
	if err != nil {
		t.Fatal(err)
	}
	sameVolume(t, "nexus named", got, b)

	h, err = ReadHeader(filepath.Join(dir, "exchange.h5"), Options{})
	if err != nil {
		t.Fatal(err)
	}
	// float32(0.65) µm: compare at float32 precision (relative 6e-8).
	if math.Abs(h.VoxelSize-0.65e-6) > 1e-7*0.65e-6 || !h.HasTime || h.TimeS != 120 {
		t.Errorf("exchange header %+v, want 0.65 µm at 120 s", h)
	}
	got, err = Open(filepath.Join(dir, "exchange.h5"), Options{})
	if err != nil {
		t.Fatal(err)
	}
	sameVolume(t, "exchange", got, b)

	// A unitless voxel size is refused, unless the user gives one.
	for _, c := range []struct{ file, msg string }{
		{"unitless.h5", "voxel_size is a number without a unit"},
		{"unitlesstime.h5", "time = 60 has no unit"},
		{"none.h5", "no NeXus default/signal attributes and no /exchange/data dataset"},
		{"nosignal.h5", "lead to /entry, which has no signal attribute"},
	} {
		_, err := ReadHeader(filepath.Join(dir, c.file), Options{})
		if err == nil || !strings.Contains(err.Error(), c.msg) || !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), c.file) {
			t.Errorf("%s: got %v, want ErrFormat naming the file with %q", c.file, err, c.msg)
		}
	}
	h, err = ReadHeader(filepath.Join(dir, "unitless.h5"), Options{VoxelSize: 3e-6})
	if err != nil || h.VoxelSize != 3e-6 {
		t.Errorf("unitless with a given voxel size: %+v %v", h, err)
	}
}

// Bad HDF5 input is refused in one line naming the file and the problem.
func TestHDF5Refused(t *testing.T) {
	dir := t.TempDir()
	runPython(t, []string{"numpy", "h5py"}, `
import sys, os, numpy as np, h5py
root = sys.argv[1]
with h5py.File(os.path.join(root, "good.h5"), "w") as f:
    f.create_dataset("exchange/data", data=np.ones((20, 30, 40), "u2"))
    f.create_dataset("flat", data=np.ones((30, 40), "u2"))
    f.create_dataset("four", data=np.ones((2, 3, 4, 5), "u2"))
    f.create_dataset("wide", data=np.ones((2, 3, 4), "i4"))
    f.create_dataset("strs", data=np.array([[[b"ab"]]]))
`, dir)
	good := filepath.Join(dir, "good.h5")
	data, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	trunc := filepath.Join(dir, "trunc.h5")
	if err := os.WriteFile(trunc, data[:len(data)/2], 0o644); err != nil {
		t.Fatal(err)
	}
	head := filepath.Join(dir, "head.h5")
	if err := os.WriteFile(head, data[:100], 0o644); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		file, dataset string
		kind          error
		msg           string
	}{
		{trunc, "", ErrTruncated, "truncated"},
		{head, "", ErrTruncated, "cannot open as HDF5: unable to open file (truncated file: eof = 100"},
		{good, "/nope", ErrFormat, "no dataset /nope in the file"},
		{good, "/exchange", ErrFormat, "/exchange is a group, not a dataset"},
		{good, "flat", ErrFormat, "dataset /flat: has 2 dimensions (30×40), want 3"},
		{good, "four", ErrFormat, "has 4 dimensions (2×3×4×5), want 3"},
		{good, "wide", ErrFormat, "holds 32-bit signed integers"},
		{good, "strs", ErrFormat, "holds neither integers nor floats"},
		{good, "../x", ErrFormat, "holds . or .."},
	} {
		_, err := Open(c.file, Options{Dataset: c.dataset})
		if err == nil || !errors.Is(err, c.kind) || !strings.Contains(err.Error(), c.msg) ||
			!strings.Contains(err.Error(), filepath.Base(c.file)) || strings.Contains(err.Error(), "\n") {
			t.Errorf("%s %q: got %v, want one line with %q", filepath.Base(c.file), c.dataset, err, c.msg)
		}
	}
	// Over the voxel limit before anything is read.
	if _, err := Open(good, Options{MaxVoxels: 1000}); !errors.Is(err, ErrTooLarge) {
		t.Errorf("limit: got %v, want ErrTooLarge", err)
	}
	// A dataset named for a file that is not HDF5.
	raw := filepath.Join(dir, "x.raw")
	os.WriteFile(raw, make([]byte, 8), 0o644)
	if _, err := Open(raw, Options{Dataset: "/a", Shape: [3]int{1, 2, 4}, DType: volume.Uint8}); err == nil || !strings.Contains(err.Error(), "not HDF5") {
		t.Errorf("dataset on a raw file: %v", err)
	}
}

// A dataset whose filter plugin cannot be found is refused at open, naming
// the filter and the Debian package. The plugin path is read when the
// library starts, so the check runs in a child process with an empty
// HDF5_PLUGIN_PATH.
func TestHDF5MissingPlugin(t *testing.T) {
	if h5ChildProcess(t) {
		return
	}
	dir := t.TempDir()
	runPython(t, []string{"numpy", "h5py", "hdf5plugin"}, `
import sys, os, numpy as np, h5py, hdf5plugin
with h5py.File(os.path.join(sys.argv[1], "p.h5"), "w") as f:
    f.create_dataset("lz4", data=np.ones((4, 5, 6), "u2"), chunks=(2, 5, 6), **hdf5plugin.LZ4())
    f.create_dataset("blosc", data=np.ones((4, 5, 6), "u2"), chunks=(2, 5, 6), **hdf5plugin.Blosc())
    f.create_dataset("lzf", data=np.ones((4, 5, 6), "u2"), chunks=(2, 5, 6), compression="lzf")
`, dir)
	empty := t.TempDir()
	for _, c := range []struct{ ds, msg string }{
		{"lz4", "HDF5 filter 32004 (LZ4)"}, {"blosc", "HDF5 filter 32001 (Blosc)"}, {"lzf", "HDF5 filter 32000 (LZF)"},
	} {
		line := runH5Child(t, "TestHDF5MissingPlugin", "SLUICE_H5_CHILD="+filepath.Join(dir, "p.h5"), "SLUICE_H5_DATASET="+c.ds, "HDF5_PLUGIN_PATH="+empty)
		if !strings.Contains(line, c.msg) || !strings.Contains(line, "p.h5") || !strings.Contains(line, "install its plugin") {
			t.Errorf("%s without plugins: %q, want a line naming %q", c.ds, line, c.msg)
		}
	}
}

// h5ChildProcess, in a child process started by runH5Child, opens the file and
// dataset named in the environment, compares it with the raw reference
// when one is named, and prints one line: OPENED, SAME or the error.
func h5ChildProcess(t *testing.T) bool {
	f := os.Getenv("SLUICE_H5_CHILD")
	if f == "" {
		return false
	}
	v, err := Open(f, Options{Dataset: os.Getenv("SLUICE_H5_DATASET")})
	switch {
	case err != nil:
		os.Stdout.WriteString(err.Error() + "\n")
	case os.Getenv("SLUICE_H5_REF") != "":
		ref, err := Open(os.Getenv("SLUICE_H5_REF"), Options{Shape: v.Bounds().Size(), DType: v.DType()})
		if err != nil {
			os.Stdout.WriteString(err.Error() + "\n")
		} else if bytes.Equal(leBytes(ref), leBytes(v)) {
			os.Stdout.WriteString("SAME\n")
		} else {
			os.Stdout.WriteString("DIFFERENT\n")
		}
	default:
		os.Stdout.WriteString("OPENED\n")
	}
	return true
}

// runH5Child runs test in a child process with env added and returns the
// first line it printed.
func runH5Child(t *testing.T, test string, env ...string) string {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run", "^"+test+"$")
	cmd.Env = append(os.Environ(), env...)
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("child: %v\n%s", err, out)
	}
	line, _, _ := bytes.Cut(out, []byte("\n"))
	return string(line)
}

// With liblzf preloaded, Debian's LZF plugin loads and LZF datasets of
// every dtype and byte order read bit-identically.
func TestHDF5LZFPreloaded(t *testing.T) {
	if h5ChildProcess(t) {
		return
	}
	const liblzf = "/usr/lib/x86_64-linux-gnu/liblzf.so.1"
	if _, err := os.Stat(liblzf); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s missing (Debian liblzf1)", liblzf)
		}
		t.Skipf("%s missing (Debian liblzf1)", liblzf)
	}
	dir := t.TempDir()
	runPython(t, []string{"numpy", "h5py", "hdf5plugin"}, h5pyMatrix, dir)
	for _, k := range []string{"u1", "u2", "i1", "i2", "f4", "f8"} {
		for _, order := range []string{"le", "be"} {
			line := runH5Child(t, "TestHDF5LZFPreloaded", "LD_PRELOAD="+liblzf, "SLUICE_H5_CHILD="+filepath.Join(dir, k+order+".h5"),
				"SLUICE_H5_DATASET=lzf", "SLUICE_H5_REF="+filepath.Join(dir, k+".bin"))
			if line != "SAME" {
				t.Errorf("%s%s/lzf with liblzf preloaded: %s", k, order, line)
			}
		}
	}
}
