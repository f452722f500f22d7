package volio

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"path"
	"strconv"
	"strings"
)

// hdf5Signature starts every HDF5 file, at offset 0 or, after a user block,
// at 512, 1024, 2048, … bytes (HDF5 File Format Specification, section II.A
// "Format Signature"; from memory of the published specification).
var hdf5Signature = []byte("\x89HDF\r\n\x1a\n")

// isHDF5 reports whether the file at name holds the HDF5 signature at one of
// the offsets the format allows (0, 512, 1024, … up to 64 KiB here).
func isHDF5(name string) bool {
	f, err := os.Open(name)
	if err != nil {
		return false
	}
	defer f.Close()
	sig := make([]byte, len(hdf5Signature))
	for off := int64(0); off <= 64<<10; {
		if _, err := f.ReadAt(sig, off); err != nil {
			return false
		}
		if bytes.Equal(sig, hdf5Signature) {
			return true
		}
		if off == 0 {
			off = 512
		} else {
			off *= 2
		}
	}
	return false
}

// hdf5Tree is what dataset resolution needs from an open HDF5 file: the
// kind of the object at an absolute path and string attributes.
type hdf5Tree interface {
	// kind returns h5Missing, h5Group, h5Dataset or h5Other.
	kind(p string) int
	// attrString returns the scalar string attribute name of the object at
	// p; ok is false when it is absent; err when it is there but not a
	// string.
	attrString(p, name string) (val string, ok bool, err error)
}

const (
	h5Missing = iota
	h5Group
	h5Dataset
	h5Other
)

// exchangeData is the dataset of the Data Exchange layout (De Carlo et al.,
// J. Synchrotron Rad. 21 (2014) 1224: reconstructions and projections under
// /exchange/data).
const exchangeData = "/exchange/data"

// resolveHDF5Dataset finds the dataset to read when none is named: the
// NeXus plottable data (NeXus format, "Find the plottable data": follow the
// `default` attribute from the root to an NXentry and from there to an
// NXdata group, whose `signal` attribute names the dataset), else
// /exchange/data. Anything else is an error saying how to name one.
func resolveHDF5Dataset(t hdf5Tree) (string, error) {
	cur := "/"
	followed := false
	for depth := 0; ; depth++ {
		if depth > 8 {
			return "", fmt.Errorf("NeXus default attributes nest deeper than 8 groups at %s", cur)
		}
		if sig, ok, err := t.attrString(cur, "signal"); err != nil {
			return "", fmt.Errorf("NeXus group %s: %v", cur, err)
		} else if ok && cur != "/" {
			p, err := h5Child(cur, sig)
			if err != nil {
				return "", fmt.Errorf("NeXus group %s: signal %v", cur, err)
			}
			if k := t.kind(p); k != h5Dataset {
				return "", fmt.Errorf("NeXus group %s: signal %q names no dataset", cur, sig)
			}
			return p, nil
		}
		def, ok, err := t.attrString(cur, "default")
		if err != nil {
			return "", fmt.Errorf("NeXus group %s: %v", cur, err)
		}
		if !ok {
			break
		}
		p, err := h5Child(cur, def)
		if err != nil {
			return "", fmt.Errorf("NeXus group %s: default %v", cur, err)
		}
		switch t.kind(p) {
		case h5Group:
			cur, followed = p, true
		case h5Dataset:
			return p, nil
		default:
			return "", fmt.Errorf("NeXus group %s: default %q names no group or dataset", cur, def)
		}
	}
	if followed {
		return "", fmt.Errorf("NeXus default attributes lead to %s, which has no signal attribute; name the dataset with --dataset", cur)
	}
	if t.kind(exchangeData) == h5Dataset {
		return exchangeData, nil
	}
	return "", fmt.Errorf("no NeXus default/signal attributes and no %s dataset; name the dataset with --dataset (e.g. --dataset /entry/data/data)", exchangeData)
}

// h5Child joins a group path and a NeXus child name (one path component).
func h5Child(group, name string) (string, error) {
	if name == "" || name == "." || name == ".." || strings.ContainsAny(name, "/\x00") || len(name) > 255 {
		return "", fmt.Errorf("%q is not a member name", name)
	}
	return path.Join(group, name), nil
}

// cleanHDF5Path checks a dataset path given by the user and makes it
// absolute.
func cleanHDF5Path(p string) (string, error) {
	if strings.ContainsRune(p, 0) || strings.TrimSpace(p) == "" {
		return "", fmt.Errorf("dataset path %q is empty or holds a NUL", p)
	}
	for _, part := range strings.Split(p, "/") {
		if part == ".." || part == "." {
			return "", fmt.Errorf("dataset path %q holds . or ..", p)
		}
	}
	return path.Clean("/" + p), nil
}

// h5Attr is a dataset attribute as the binding reads it: a scalar (or
// 1-element) string or number; several equal numbers also count as one
// (a voxel size given per axis).
type h5Attr struct {
	present bool
	isStr   bool
	str     string
	nums    []float64
}

// h5Meta interprets the attributes that carry voxel size and acquisition
// time. They count only when their unit is stated:
//
//	voxel_size  "2.5um" (a string with unit), or a number with
//	            voxel_size_units "nm", "um", "µm", "mm" or "m"
//	            (a list of three equal numbers is one voxel edge)
//	time_s      a number of seconds
//	time        a number with time_units "s", "min" or "h"
//
// A voxel_size or time without its unit is an error, so that a number
// whose unit we would guess never reaches a result; the caller ignores a
// unitless voxel_size when the user gave the voxel size himself.
func h5Meta(get func(name string) (h5Attr, error)) (voxelSize float64, timeS float64, hasTime bool, err error) {
	vs, err := get("voxel_size")
	if err != nil {
		return 0, 0, false, err
	}
	if vs.present {
		if voxelSize, err = h5Length(vs, get); err != nil {
			return 0, 0, false, err
		}
	}
	ts, err := get("time_s")
	if err != nil {
		return 0, 0, false, err
	}
	if ts.present {
		v, err := h5Number("time_s", ts)
		if err != nil {
			return 0, 0, false, err
		}
		if !(v >= 0) || math.IsInf(v, 0) {
			return 0, 0, false, fmt.Errorf("attribute time_s = %g is not a non-negative number of seconds", v)
		}
		return voxelSize, v, true, nil
	}
	t, err := get("time")
	if err != nil {
		return 0, 0, false, err
	}
	if !t.present {
		return voxelSize, 0, false, nil
	}
	v, err := h5Number("time", t)
	if err != nil {
		return 0, 0, false, err
	}
	u, err := get("time_units")
	if err != nil {
		return 0, 0, false, err
	}
	if !u.present || !u.isStr {
		return 0, 0, false, fmt.Errorf("attribute time = %g has no unit: add time_units (\"s\", \"min\" or \"h\") or store time_s", v)
	}
	per := map[string]float64{"s": 1, "sec": 1, "second": 1, "seconds": 1, "min": 60, "minute": 60, "minutes": 60, "h": 3600, "hour": 3600, "hours": 3600}
	f, ok := per[strings.ToLower(strings.TrimSpace(u.str))]
	if !ok {
		return 0, 0, false, fmt.Errorf("attribute time_units %q is not s, min or h", u.str)
	}
	v *= f
	if !(v >= 0) || math.IsInf(v, 0) {
		return 0, 0, false, fmt.Errorf("attribute time = %g %s is not a non-negative time", v/f, u.str)
	}
	return voxelSize, v, true, nil
}

// h5Number returns the single number of a numeric attribute.
func h5Number(name string, a h5Attr) (float64, error) {
	if a.isStr {
		v, err := strconv.ParseFloat(strings.TrimSpace(a.str), 64)
		if err != nil {
			return 0, fmt.Errorf("attribute %s %q is not a number", name, a.str)
		}
		return v, nil
	}
	if len(a.nums) != 1 {
		return 0, fmt.Errorf("attribute %s holds %d numbers, want one", name, len(a.nums))
	}
	return a.nums[0], nil
}

// h5Units maps the unit names accepted in voxel_size_units to metres.
var h5Units = map[string]float64{"nm": 1e9, "um": 1e6, "µm": 1e6, "μm": 1e6, "micron": 1e6, "microns": 1e6, "mm": 1e3, "m": 1}

func h5Length(a h5Attr, get func(string) (h5Attr, error)) (float64, error) {
	var v, per float64
	if a.isStr {
		s := strings.TrimSpace(a.str)
		num := strings.TrimRight(s, "abcdefghijklmnopqrstuvwxyzµμ ")
		unit := strings.TrimSpace(s[len(num):])
		p, ok := h5Units[unit]
		if !ok {
			return 0, fmt.Errorf("attribute voxel_size %q has no unit nm, um, mm or m", a.str)
		}
		f, err := strconv.ParseFloat(strings.TrimSpace(num), 64)
		if err != nil {
			return 0, fmt.Errorf("attribute voxel_size %q is not a number with a unit", a.str)
		}
		v, per = f, p
	} else {
		if len(a.nums) == 0 {
			return 0, fmt.Errorf("attribute voxel_size holds no number")
		}
		for _, x := range a.nums[1:] {
			if x != a.nums[0] {
				return 0, fmt.Errorf("attribute voxel_size %v is not cubic (sluice needs equal voxel edges)", a.nums)
			}
		}
		v = a.nums[0]
		u, err := get("voxel_size_units")
		if err != nil {
			return 0, err
		}
		if !u.present || !u.isStr {
			return 0, errUnitless
		}
		p, ok := h5Units[strings.TrimSpace(u.str)]
		if !ok {
			return 0, fmt.Errorf("attribute voxel_size_units %q is not nm, um, mm or m", u.str)
		}
		per = p
	}
	if !(v > 0) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("attribute voxel_size %g is not a positive length", v)
	}
	return v / per, nil
}

// errUnitless: a numeric voxel_size without voxel_size_units.
var errUnitless = fmt.Errorf("attribute voxel_size is a number without a unit: add voxel_size_units (e.g. \"um\") to the dataset or pass --voxel-size")
