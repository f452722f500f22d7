package volio

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"sluice/pkg/volume"
)

// Every band of rows read from a raw file (both byte orders, every dtype)
// or a Zarr array equals the same box cropped from the volume written; bands
// outside the volume and truncated files are errors.
func TestReadBand(t *testing.T) {
	dir := t.TempDir()
	box := volume.BoxOf(9, 11, 5)
	for _, dt := range []volume.DType{volume.Uint8, volume.Uint16, volume.Float32} {
		v := pattern(dt, box, 7)
		for _, order := range []string{"little", "big"} {
			p := filepath.Join(dir, fmt.Sprintf("%s-%s.raw", dt, order))
			if err := WriteRaw(p, v, WriteOptions{ByteOrder: order}); err != nil {
				t.Fatal(err)
			}
			checkBands(t, p, v)
		}
		zp := filepath.Join(dir, dt.String()+".zarr")
		z, err := CreateZarr(context.Background(), Dir(zp), "", ZarrMeta{Shape: [3]int{9, 11, 5}, Chunks: [3]int{4, 4, 4}, DType: dt, Compressor: "zstd"})
		if err != nil {
			t.Fatal(err)
		}
		if err := z.WriteBox(context.Background(), v); err != nil {
			t.Fatal(err)
		}
		checkBands(t, zp, v)
	}
	// A file cut short after opening: the band reaching past the end is
	// reported as truncated with the bytes that were there.
	// Source: size arithmetic by hand (9·11·5 uint16 = 990 bytes; cut to
	// 500; the band z 4:9 starts at byte 4·55·2 = 440).
	p := filepath.Join(dir, "uint16-little.raw")
	s, err := OpenStream(p, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	os.Truncate(p, 500)
	if _, err := s.(BandReader).ReadBand(4, 9, 0, 11); !errors.Is(err, ErrTruncated) || err.Error() != "volio: "+p+": truncated raw volume: got 500 of 990 bytes" {
		t.Errorf("truncated band: %v", err)
	}
}

func checkBands(t *testing.T, path string, v volume.Any) {
	t.Helper()
	s, err := OpenStream(path, Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	br, ok := s.(BandReader)
	if !ok {
		t.Fatalf("%s: stream %T reads no bands", path, s)
	}
	for _, b := range [][4]int{{0, 9, 0, 11}, {0, 4, 0, 4}, {4, 8, 4, 8}, {8, 9, 8, 11}, {3, 5, 10, 11}} {
		got, err := br.ReadBand(b[0], b[1], b[2], b[3])
		if err != nil {
			t.Fatalf("%s band %v: %v", path, b, err)
		}
		want := cropAny(v, volume.Box{Min: [3]int{b[0], b[2], 0}, Max: [3]int{b[1], b[3], 5}})
		sameVolume(t, fmt.Sprintf("%s band %v", path, b), got, want)
	}
	for _, b := range [][4]int{{0, 10, 0, 11}, {0, 9, 0, 12}, {-1, 2, 0, 1}, {3, 3, 0, 1}, {0, 1, 5, 4}} {
		if _, err := br.ReadBand(b[0], b[1], b[2], b[3]); !errors.Is(err, ErrFormat) {
			t.Errorf("%s band %v: %v, want a format error", path, b, err)
		}
	}
}
