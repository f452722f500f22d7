package queue

import (
	"strings"
	"testing"

	"google.golang.org/protobuf/proto"

	"sluice/pkg/layout"
	pb "sluice/proto/sluicepb"
)

// FuzzDecodeTask feeds arbitrary bytes to the task decoder the worker uses:
// it must never panic, and every task that passes CheckTask must have a
// four-part message id and round-trip through the wire format unchanged.
func FuzzDecodeTask(f *testing.F) {
	for _, tk := range []*pb.TileTask{
		task("c", "0001", 0, pb.Priority_PRIORITY_LIVE),
		task("co2.brine-7", "step_0042", 63, pb.Priority_PRIORITY_BATCH),
		{Campaign: "../x", Step: "1", ParamHash: "a"},
	} {
		b, _ := proto.Marshal(tk)
		f.Add(b)
	}
	f.Add([]byte{0xff, 0xff, 0xff})
	f.Fuzz(func(t *testing.T, data []byte) {
		tk := new(pb.TileTask)
		if proto.Unmarshal(data, tk) != nil || CheckTask(tk) != nil {
			return
		}
		if parts := strings.Split(TaskID(tk), "/"); len(parts) != 4 {
			t.Fatalf("task id %q of a valid task has %d parts", TaskID(tk), len(parts))
		}
		again, err := proto.Marshal(tk)
		if err != nil {
			t.Fatal(err)
		}
		back := new(pb.TileTask)
		if err := proto.Unmarshal(again, back); err != nil || !proto.Equal(tk, back) {
			t.Fatalf("round trip changed the task: %v vs %v (%v)", tk, back, err)
		}
	})
}

// FuzzToken checks that every valid campaign name becomes exactly one subject
// token that is also a valid KV key part, and that distinct names never share
// a token.
func FuzzToken(f *testing.F) {
	for _, s := range []string{"a", "a.b", "a..b", "a_b", "a=b", "x.y-z_w"} {
		f.Add(s, "a_b")
	}
	f.Fuzz(func(t *testing.T, a, b string) {
		if !layout.ValidName(a) {
			return
		}
		ta := Token(a)
		if ta == "" || strings.ContainsAny(ta, ".*> \t\r\n") {
			t.Fatalf("Token(%q) = %q is not a single subject token", a, ta)
		}
		for _, c := range ta {
			if !(c >= 'a' && c <= 'z' || c >= '0' && c <= '9' || strings.ContainsRune("-_=", c)) {
				t.Fatalf("Token(%q) = %q holds %q, not allowed in KV keys", a, ta, c)
			}
		}
		if layout.ValidName(b) && a != b && ta == Token(b) {
			t.Fatalf("Token(%q) == Token(%q) == %q", a, b, ta)
		}
	})
}
