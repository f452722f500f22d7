package filter

import (
	"bytes"
	"flag"
	"fmt"
	"go/format"
	"os"
	"testing"
)

var updateNet = flag.Bool("update-median-network", false, "rewrite median_net_amd64.go from the generator")

// Comparator networks of the vector median (median_net_amd64.go), built
// here from Batcher's odd–even merge (Batcher 1968, "Sorting networks and
// their applications", AFIPS SJCC 32:307; Knuth, TAOCP vol. 3 §5.3.4) on
// power-of-two wire counts, padded with +∞ wires, then pruned: a
// comparator with a +∞ wire is a no-op or a relabelling, and only the
// comparator outputs the requested wires depend on are kept.

// oddEvenMerge appends the comparators merging the sorted halves of wires
// lo…hi (inclusive, a power of two in all) at distance r.
func oddEvenMerge(net [][2]int, lo, hi, r int) [][2]int {
	step := r * 2
	if step < hi-lo {
		net = oddEvenMerge(net, lo, hi, step)
		net = oddEvenMerge(net, lo+r, hi, step)
		for i := lo + r; i < hi-r; i += step {
			net = append(net, [2]int{i, i + r})
		}
		return net
	}
	return append(net, [2]int{lo, lo + r})
}

func oddEvenSort(net [][2]int, lo, hi int) [][2]int {
	if hi-lo >= 1 {
		mid := lo + (hi-lo)/2
		net = oddEvenSort(net, lo, mid)
		net = oddEvenSort(net, mid+1, hi)
		net = oddEvenMerge(net, lo, hi, 1)
	}
	return net
}

// netNode is a value of the pruned network: an input (op 0) or the min
// (op 1) or max (op 2) of two nodes.
type netNode struct {
	op, a, b int
	name     string
}

// pruneNet runs net symbolically on wires whose initial values are
// inputs[w] (a name, or "" for +∞) and returns the nodes the wires `want`
// end up holding depend on, in evaluation order, and the node of each
// wanted wire.
func pruneNet(net [][2]int, inputs []string, want []int) ([]netNode, []int) {
	const inf = -1
	var nodes []netNode
	wire := make([]int, len(inputs))
	for w, in := range inputs {
		if in == "" {
			wire[w] = inf
			continue
		}
		wire[w] = len(nodes)
		nodes = append(nodes, netNode{name: in})
	}
	for _, c := range net {
		i, j := wire[c[0]], wire[c[1]]
		switch {
		case j == inf: // min(x, ∞) = x, max = ∞: nothing moves
		case i == inf: // the value moves down, ∞ up
			wire[c[0]], wire[c[1]] = j, inf
		default:
			wire[c[0]] = len(nodes)
			nodes = append(nodes, netNode{op: 1, a: i, b: j})
			wire[c[1]] = len(nodes)
			nodes = append(nodes, netNode{op: 2, a: i, b: j})
		}
	}
	need := make([]bool, len(nodes))
	var out []int
	for _, w := range want {
		need[wire[w]] = true
		out = append(out, wire[w])
	}
	for k := len(nodes) - 1; k >= 0; k-- {
		if need[k] && nodes[k].op != 0 {
			need[nodes[k].a], need[nodes[k].b] = true, true
		}
	}
	var kept []netNode
	idx := make([]int, len(nodes))
	for k, n := range nodes {
		if !need[k] {
			continue
		}
		if n.op != 0 {
			n.a, n.b = idx[n.a], idx[n.b]
		}
		idx[k] = len(kept)
		kept = append(kept, n)
	}
	for i := range out {
		out[i] = idx[out[i]]
	}
	return kept, out
}

// evalNet evaluates pruned nodes on integer inputs named in vals.
func evalNet(nodes []netNode, vals map[string]int) []int {
	v := make([]int, len(nodes))
	for k, n := range nodes {
		switch n.op {
		case 0:
			v[k] = vals[n.name]
		case 1:
			v[k] = min(v[n.a], v[n.b])
		case 2:
			v[k] = max(v[n.a], v[n.b])
		}
	}
	return v
}

// sort9Net sorts 9 values: 16 wires, 7 of them +∞.
func sort9Net() ([]netNode, []int) {
	in := make([]string, 16)
	for i := 0; i < 9; i++ {
		in[i] = fmt.Sprintf("s%d", i)
	}
	return pruneNet(oddEvenSort(nil, 0, 15), in, []int{0, 1, 2, 3, 4, 5, 6, 7, 8})
}

// median27Net selects the 14th smallest of three sorted lists of 9 (a, b,
// c): a and b merged on 32 wires, the result and c merged on 64.
func median27Net() ([]netNode, []int) {
	in := make([]string, 64)
	for i := 0; i < 9; i++ {
		in[i] = fmt.Sprintf("a%d", i)
		in[16+i] = fmt.Sprintf("b%d", i)
		in[32+i] = fmt.Sprintf("c%d", i)
	}
	net := oddEvenMerge(nil, 0, 31, 1)
	net = oddEvenMerge(net, 0, 63, 1)
	return pruneNet(net, in, []int{13})
}

// TestMedianNetworks checks both networks by the 0–1 principle (a
// comparator network sorts, or selects, every input iff it does every 0/1
// input; Knuth, TAOCP vol. 3 §5.3.4): all 2⁹ inputs of the 9-sorter, and
// all sorted 0/1 triples of lists (10³ cases) for the median, against a
// direct count. It also keeps median_net_amd64.go equal to the generator's
// output (rewrite with -update-median-network).
func TestMedianNetworks(t *testing.T) {
	s9, out9 := sort9Net()
	for m := 0; m < 1<<9; m++ {
		vals := map[string]int{}
		ones := 0
		for i := 0; i < 9; i++ {
			b := m >> i & 1
			vals[fmt.Sprintf("s%d", i)] = b
			ones += b
		}
		v := evalNet(s9, vals)
		for k, o := range out9 {
			if want := b2i(k >= 9-ones); v[o] != want {
				t.Fatalf("sort9 input %09b: output %d = %d, want %d", m, k, v[o], want)
			}
		}
	}
	med, outm := median27Net()
	for na := 0; na <= 9; na++ {
		for nb := 0; nb <= 9; nb++ {
			for nc := 0; nc <= 9; nc++ {
				vals := map[string]int{}
				for i := 0; i < 9; i++ {
					vals[fmt.Sprintf("a%d", i)] = b2i(i >= 9-na)
					vals[fmt.Sprintf("b%d", i)] = b2i(i >= 9-nb)
					vals[fmt.Sprintf("c%d", i)] = b2i(i >= 9-nc)
				}
				// The 14th smallest of 27 is 1 iff at least 14 ones.
				if got, want := evalNet(med, vals)[outm[0]], b2i(na+nb+nc >= 14); got != want {
					t.Fatalf("median of sorted 0/1 lists with %d, %d, %d ones: %d, want %d", na, nb, nc, got, want)
				}
			}
		}
	}
	ops := func(n []netNode) (c int) {
		for _, x := range n {
			if x.op != 0 {
				c++
			}
		}
		return c
	}
	t.Logf("sort9: %d min/max operations; median of 3 sorted 9-lists: %d", ops(s9), ops(med))
	src := genMedianNet(s9, out9, med, outm[0])
	const file = "median_net_amd64.go"
	if *updateNet {
		if err := os.WriteFile(file, src, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	got, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, src) {
		t.Errorf("%s differs from the generator's output; rewrite with go test -run MedianNetworks -update-median-network", file)
	}
}

func b2i(b bool) int {
	if b {
		return 1
	}
	return 0
}

// genMedianNet writes the Go source of the two networks on Uint16x16.
func genMedianNet(s9 []netNode, out9 []int, med []netNode, outm int) []byte {
	var b bytes.Buffer
	b.WriteString(`// Code generated by TestMedianNetworks (mediannet_test.go) -update-median-network; DO NOT EDIT.

//go:build goexperiment.simd && amd64

package filter

import "simd/archsimd"

// sort9Vec sorts p[0..8] lane by lane (ascending).
func sort9Vec(p *[9]archsimd.Uint16x16) {
`)
	name := func(nodes []netNode, k int) string {
		if nodes[k].op == 0 {
			return nodes[k].name
		}
		return fmt.Sprintf("v%d", k)
	}
	for k, n := range s9 {
		switch n.op {
		case 0:
			fmt.Fprintf(&b, "\t%s := p[%s]\n", n.name, n.name[1:])
		case 1:
			fmt.Fprintf(&b, "\tv%d := %s.Min(%s)\n", k, name(s9, n.a), name(s9, n.b))
		case 2:
			fmt.Fprintf(&b, "\tv%d := %s.Max(%s)\n", k, name(s9, n.a), name(s9, n.b))
		}
	}
	for i, o := range out9 {
		fmt.Fprintf(&b, "\tp[%d] = %s\n", i, name(s9, o))
	}
	b.WriteString(`}

// median27Vec returns, lane by lane, the 14th smallest of the 27 values of
// three ascending lists of 9: a[k], b[k] and c[k] are element k of the
// lists at offset i of the rows a[k], b[k], c[k].
func median27Vec(a, b, c *[9][]uint16, i int) archsimd.Uint16x16 {
`)
	for k, n := range med {
		switch n.op {
		case 0:
			fmt.Fprintf(&b, "\t%s := archsimd.LoadUint16x16Slice(%c[%s][i:])\n", n.name, n.name[0], n.name[1:])
		case 1:
			fmt.Fprintf(&b, "\tv%d := %s.Min(%s)\n", k, name(med, n.a), name(med, n.b))
		case 2:
			fmt.Fprintf(&b, "\tv%d := %s.Max(%s)\n", k, name(med, n.a), name(med, n.b))
		}
	}
	fmt.Fprintf(&b, "\treturn %s\n}\n", name(med, outm))
	src, err := format.Source(b.Bytes())
	if err != nil {
		panic(err)
	}
	return src
}
