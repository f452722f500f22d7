package volio

import (
	"fmt"
	"math"
	"strings"
	"testing"
)

// fakeTree is an HDF5 object tree for the resolution logic: kinds by
// absolute path and string attributes by "path@name".
type fakeTree struct {
	kinds map[string]int
	attrs map[string]string
}

func (f fakeTree) kind(p string) int {
	if k, ok := f.kinds[p]; ok {
		return k
	}
	return h5Missing
}

func (f fakeTree) attrString(p, name string) (string, bool, error) {
	v, ok := f.attrs[p+"@"+name]
	if strings.HasPrefix(v, "#") {
		return "", false, fmt.Errorf("attribute %s is not a string", name)
	}
	return v, ok, nil
}

// Source: NeXus format ("Find the plottable data", nexusformat.org):
// /@default → NXentry, entry@default → NXdata, NXdata@signal → dataset;
// Data Exchange (De Carlo et al. 2014): /exchange/data.
func TestResolveHDF5Dataset(t *testing.T) {
	nexus := fakeTree{
		kinds: map[string]int{"/": h5Group, "/entry": h5Group, "/entry/plot": h5Group, "/entry/plot/v": h5Dataset, "/exchange/data": h5Dataset},
		attrs: map[string]string{"/@default": "entry", "/entry@default": "plot", "/entry/plot@signal": "v"},
	}
	for _, c := range []struct {
		name  string
		tree  fakeTree
		want  string
		error string
	}{
		{"nexus over exchange", nexus, "/entry/plot/v", ""},
		{"exchange", fakeTree{kinds: map[string]int{"/": h5Group, "/exchange/data": h5Dataset}}, "/exchange/data", ""},
		{"default names a dataset", fakeTree{kinds: map[string]int{"/": h5Group, "/e": h5Group, "/e/d": h5Dataset}, attrs: map[string]string{"/@default": "e", "/e@default": "d"}}, "/e/d", ""},
		{"signal without default chain", fakeTree{kinds: map[string]int{"/": h5Group}, attrs: map[string]string{"/@signal": "x"}}, "", "no NeXus default/signal"},
		{"nothing", fakeTree{kinds: map[string]int{"/": h5Group, "/scan": h5Dataset}}, "", "name the dataset with --dataset"},
		{"dangling default", fakeTree{kinds: map[string]int{"/": h5Group}, attrs: map[string]string{"/@default": "entry"}}, "", `default "entry" names no group or dataset`},
		{"signal to a group", fakeTree{kinds: map[string]int{"/": h5Group, "/e": h5Group, "/e/g": h5Group}, attrs: map[string]string{"/@default": "e", "/e@signal": "g"}}, "", `signal "g" names no dataset`},
		{"path in default", fakeTree{kinds: map[string]int{"/": h5Group}, attrs: map[string]string{"/@default": "../etc"}}, "", "not a member name"},
		{"numeric default", fakeTree{kinds: map[string]int{"/": h5Group}, attrs: map[string]string{"/@default": "#1"}}, "", "not a string"},
		{"no signal", fakeTree{kinds: map[string]int{"/": h5Group, "/e": h5Group}, attrs: map[string]string{"/@default": "e"}}, "", "lead to /e, which has no signal"},
		{"loop", fakeTree{kinds: map[string]int{"/": h5Group, "/e": h5Group}, attrs: map[string]string{"/@default": "e", "/e@default": "."}}, "", "not a member name"},
	} {
		got, err := resolveHDF5Dataset(c.tree)
		if c.error == "" {
			if err != nil || got != c.want {
				t.Errorf("%s: got %q %v, want %q", c.name, got, err, c.want)
			}
		} else if err == nil || !strings.Contains(err.Error(), c.error) {
			t.Errorf("%s: got %q %v, want an error with %q", c.name, got, err, c.error)
		}
	}
}

func attrs(m map[string]h5Attr) func(string) (h5Attr, error) {
	return func(n string) (h5Attr, error) { return m[n], nil }
}

func str(s string) h5Attr             { return h5Attr{present: true, isStr: true, str: s} }
func num(v ...float64) h5Attr         { return h5Attr{present: true, nums: v} }
func relEq(a, b float64) bool         { return math.Abs(a-b) <= 1e-12*math.Abs(b) }
func hasErr(err error, s string) bool { return err != nil && strings.Contains(err.Error(), s) }

// Voxel size and time count only with their units (our attribute
// convention, package doc); 1 min = 60 s, 1 h = 3600 s, 1 µm = 1e-6 m (SI).
func TestHDF5Meta(t *testing.T) {
	for _, c := range []struct {
		name    string
		a       map[string]h5Attr
		vs, ts  float64
		hasTime bool
		err     string
	}{
		{"none", nil, 0, 0, false, ""},
		{"string um", map[string]h5Attr{"voxel_size": str("2.5um")}, 2.5e-6, 0, false, ""},
		{"string µm spaced", map[string]h5Attr{"voxel_size": str("0.65 µm")}, 0.65e-6, 0, false, ""},
		{"string nm", map[string]h5Attr{"voxel_size": str("800nm")}, 800e-9, 0, false, ""},
		{"number with units", map[string]h5Attr{"voxel_size": num(1.3), "voxel_size_units": str("mm")}, 1.3e-3, 0, false, ""},
		{"three equal", map[string]h5Attr{"voxel_size": num(2, 2, 2), "voxel_size_units": str("um")}, 2e-6, 0, false, ""},
		{"three unequal", map[string]h5Attr{"voxel_size": num(2, 2, 3), "voxel_size_units": str("um")}, 0, 0, false, "not cubic"},
		{"unitless number", map[string]h5Attr{"voxel_size": num(2.5)}, 0, 0, false, "without a unit"},
		{"unitless string", map[string]h5Attr{"voxel_size": str("2.5")}, 0, 0, false, "has no unit"},
		{"bad unit", map[string]h5Attr{"voxel_size": str("2.5 inch")}, 0, 0, false, "has no unit"},
		{"negative", map[string]h5Attr{"voxel_size": str("-1um")}, 0, 0, false, "not a positive length"},
		{"time_s", map[string]h5Attr{"time_s": num(405.5)}, 0, 405.5, true, ""},
		{"time min", map[string]h5Attr{"time": num(2), "time_units": str("min")}, 0, 120, true, ""},
		{"time h", map[string]h5Attr{"time": num(1.5), "time_units": str("h")}, 0, 5400, true, ""},
		{"time unitless", map[string]h5Attr{"time": num(60)}, 0, 0, false, "has no unit"},
		{"time bad unit", map[string]h5Attr{"time": num(60), "time_units": str("days")}, 0, 0, false, "is not s, min or h"},
		{"time negative", map[string]h5Attr{"time_s": num(-1)}, 0, 0, false, "non-negative"},
		{"time NaN", map[string]h5Attr{"time_s": num(math.NaN())}, 0, 0, false, "non-negative"},
		{"time two numbers", map[string]h5Attr{"time_s": num(1, 2)}, 0, 0, false, "holds 2 numbers"},
	} {
		vs, ts, ht, err := h5Meta(attrs(c.a))
		if c.err != "" {
			if !hasErr(err, c.err) {
				t.Errorf("%s: got %v, want an error with %q", c.name, err, c.err)
			}
			continue
		}
		if err != nil || !relEq(vs, c.vs) && !(vs == 0 && c.vs == 0) || ts != c.ts || ht != c.hasTime {
			t.Errorf("%s: got %g m, %g s (%v), %v; want %g m, %g s (%v)", c.name, vs, ts, ht, err, c.vs, c.ts, c.hasTime)
		}
	}
}

// FuzzHDF5Resolve drives dataset resolution and attribute interpretation
// with arbitrary attribute values: no panic, a dataset path only when it
// names a dataset of the tree, and every voxel size positive and finite.
func FuzzHDF5Resolve(f *testing.F) {
	f.Add("entry", "plot", "v", "2.5um", "um", 1.5, "min")
	f.Add("../x", "", "", "2.5", "", math.NaN(), "")
	f.Add("e", ".", "/", "1e400m", "mm", -1.0, "h")
	f.Fuzz(func(t *testing.T, def1, def2, signal, vs, vsUnits string, tm float64, tmUnits string) {
		tree := fakeTree{
			kinds: map[string]int{"/": h5Group, "/entry": h5Group, "/entry/plot": h5Group, "/entry/plot/v": h5Dataset, "/exchange/data": h5Dataset},
			attrs: map[string]string{"/@default": def1, "/entry@default": def2, "/entry/plot@signal": signal},
		}
		p, err := resolveHDF5Dataset(tree)
		if err == nil && tree.kind(p) != h5Dataset {
			t.Fatalf("resolved %q, not a dataset", p)
		}
		if _, err := cleanHDF5Path(def1 + "/" + def2); err == nil && strings.Contains(def1+def2, "..") && !strings.Contains(def1+def2, "...") {
			// ".." inside a longer name ("a..b") is a legal member name.
			for _, part := range strings.Split(def1+"/"+def2, "/") {
				if part == ".." {
					t.Fatalf("path with .. accepted: %q", def1+"/"+def2)
				}
			}
		}
		m := map[string]h5Attr{"voxel_size": str(vs), "voxel_size_units": str(vsUnits), "time": num(tm), "time_units": str(tmUnits)}
		v, ts, ht, err := h5Meta(attrs(m))
		if err == nil {
			if v != 0 && !(v > 0 && !math.IsInf(v, 0)) {
				t.Fatalf("voxel size %g from %q", v, vs)
			}
			if ht && !(ts >= 0 && !math.IsInf(ts, 0)) {
				t.Fatalf("time %g from %g %q", ts, tm, tmUnits)
			}
		}
		m["voxel_size"] = num(tm)
		if v, _, _, err := h5Meta(attrs(m)); err == nil && v != 0 && !(v > 0 && !math.IsInf(v, 0)) {
			t.Fatalf("voxel size %g from %g %q", v, tm, vsUnits)
		}
	})
}
