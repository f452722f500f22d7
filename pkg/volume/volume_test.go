package volume

import (
	"math"
	"testing"
)

func TestIndexLayout(t *testing.T) {
	v := New[uint16](Box{Min: [3]int{2, 3, 4}, Max: [3]int{5, 7, 10}}, 1e-6)
	if got, want := len(v.Pix), 3*4*6; got != want {
		t.Fatalf("len(Pix) = %d, want %d", got, want)
	}
	// Documented formula: Pix[((z-z0)*NY + (y-y0))*NX + (x-x0)].
	if got, want := v.Index(3, 5, 9), ((3-2)*4+(5-3))*6+(9-4); got != want {
		t.Errorf("Index = %d, want %d", got, want)
	}
	v.Set(4, 6, 9, 7)
	if v.Pix[len(v.Pix)-1] != 7 {
		t.Errorf("last voxel not at the end of Pix")
	}
}

func TestCropPaste(t *testing.T) {
	v := NewShape[uint8](4, 4, 4, 1)
	for i := range v.Pix {
		v.Pix[i] = uint8(i)
	}
	c := v.Crop(Box{Min: [3]int{-1, 1, 1}, Max: [3]int{2, 3, 5}}, 255)
	if c.At(-1, 1, 1) != 255 || c.At(0, 1, 4) != 255 {
		t.Errorf("outside voxels not filled")
	}
	if c.At(1, 2, 3) != v.At(1, 2, 3) {
		t.Errorf("Crop moved voxels")
	}
	w := NewShape[uint8](4, 4, 4, 1)
	w.Paste(c)
	if w.At(1, 2, 3) != v.At(1, 2, 3) || w.At(3, 3, 3) != 0 {
		t.Errorf("Paste wrong")
	}
}

func TestTilingCoversOnce(t *testing.T) {
	tl := Tiling{Whole: BoxOf(10, 7, 5), Tile: [3]int{4, 3, 5}}
	if n := tl.Counts(); n != [3]int{3, 3, 1} {
		t.Fatalf("Counts = %v", n)
	}
	seen := make([]int, 10*7*5)
	for i := 0; i < tl.Len(); i++ {
		if tl.Index(tl.Position(i)[0], tl.Position(i)[1], tl.Position(i)[2]) != i {
			t.Fatalf("Index/Position disagree at %d", i)
		}
		b := tl.Core(i)
		for z := b.Min[0]; z < b.Max[0]; z++ {
			for y := b.Min[1]; y < b.Max[1]; y++ {
				for x := b.Min[2]; x < b.Max[2]; x++ {
					seen[(z*7+y)*5+x]++
				}
			}
		}
	}
	for i, n := range seen {
		if n != 1 {
			t.Fatalf("voxel %d covered %d times", i, n)
		}
	}
}

func TestParseLength(t *testing.T) {
	for _, c := range []struct {
		in   string
		want float64
	}{{"2.5um", 2.5e-6}, {"800nm", 8e-7}, {"0.01mm", 1e-5}, {"1e-6m", 1e-6}, {"3", 3e-6}, {"1.2µm", 1.2e-6}} {
		got, err := ParseLength(c.in)
		if err != nil || math.Abs(got-c.want) > 1e-12*c.want {
			t.Errorf("ParseLength(%q) = %g, %v; want %g", c.in, got, err, c.want)
		}
	}
	for _, bad := range []string{"", "um", "-1um", "abc", "NaNum"} {
		if _, err := ParseLength(bad); err == nil {
			t.Errorf("ParseLength(%q) accepted", bad)
		}
	}
}
