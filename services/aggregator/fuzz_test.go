package aggregator

import (
	"context"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"google.golang.org/protobuf/proto"

	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/store"
	"sluice/proto/sluicepb"
)

const fuzzHash = "0123456789abcdef"

// fuzzAggregator is a started aggregator over a local store holding one
// campaign "c" (current hash fuzzHash) and nothing else.
func fuzzAggregator(f *testing.F) (*Aggregator, store.Store, []string) {
	ctx := context.Background()
	st, err := store.Open(ctx, f.TempDir(), store.Credentials{})
	if err != nil {
		f.Fatal(err)
	}
	c, _ := layout.NewCampaign("c")
	r := campaign.Record{Name: "c", Current: fuzzHash, Config: campaign.Default(), Runs: []string{fuzzHash}}
	if err := campaign.PutJSON(ctx, st, c.Config(), r); err != nil {
		f.Fatal(err)
	}
	a := &Aggregator{Store: st, Log: slog.New(slog.NewTextHandler(io.Discard, nil))}
	if err := a.Start(ctx); err != nil {
		f.Fatal(err)
	}
	keys, err := st.List(ctx, layout.Root+"/")
	if err != nil {
		f.Fatal(err)
	}
	return a, st, keys
}

// seedMessages adds marshalled messages and the bad-input corpus's task
// garbage as seeds.
func seedMessages(f *testing.F, ms ...proto.Message) {
	for _, m := range ms {
		b, err := proto.Marshal(m)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	for _, n := range []string{"task-garbage.bin", "task-box-out-of-range.bin"} {
		b, err := os.ReadFile(filepath.Join("..", "..", "testdata", "bad", n))
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
}

// FuzzTileDone feeds arbitrary bytes to the tile-result path of the
// aggregator: decode, check, TileDone. It must never panic; a message that
// fails CheckTileDone is dropped (nil error, so it is not redelivered
// forever); and since no tile result is stored, no message can make the
// aggregator write anything — in particular no step result for a step
// without tiles.
func FuzzTileDone(f *testing.F) {
	seedMessages(f,
		&sluicepb.TileDone{Campaign: "c", Step: "s1", Tile: 0, TileCount: 1, ParamHash: fuzzHash},
		&sluicepb.TileDone{Campaign: "c", Step: "s1", Tile: 0, TileCount: 0, ParamHash: fuzzHash},
		&sluicepb.TileDone{Campaign: "c", Step: "s1", Tile: -1, TileCount: 4, ParamHash: fuzzHash},
		&sluicepb.TileDone{Campaign: "../c", Step: "s1", Tile: 0, TileCount: 1, ParamHash: "x/y"},
	)
	a, st, before := fuzzAggregator(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		d := new(sluicepb.TileDone)
		if proto.Unmarshal(data, d) != nil {
			return
		}
		checkErr := CheckTileDone(d)
		if checkErr == nil && (d.Tile < 0 || d.Tile >= d.TileCount || !layout.ValidName(d.Campaign) || !layout.ValidName(d.Step)) {
			t.Fatalf("CheckTileDone accepted %v", d)
		}
		err := a.TileDone(context.Background(), d)
		if checkErr != nil && err != nil {
			t.Fatalf("invalid result %v returned %v; want it dropped", d, err)
		}
		after, lerr := st.List(context.Background(), layout.Root+"/")
		if lerr != nil {
			t.Fatal(lerr)
		}
		if !slices.Equal(after, before) {
			t.Fatalf("result %v changed the store: %v", d, after)
		}
	})
}

// FuzzStepReady does the same for step announcements.
func FuzzStepReady(f *testing.F) {
	seedMessages(f,
		&sluicepb.StepReady{Campaign: "c", Step: "s1", TileCount: 8, ParamHash: fuzzHash, ManifestKey: "campaigns/c/steps/s1/manifest.json"},
		&sluicepb.StepReady{Campaign: "c", Step: "s1", TileCount: -3, ParamHash: fuzzHash},
		&sluicepb.StepReady{Campaign: "..", Step: "a/b", TileCount: 1, ParamHash: ""},
	)
	a, st, before := fuzzAggregator(f)
	f.Fuzz(func(t *testing.T, data []byte) {
		r := new(sluicepb.StepReady)
		if proto.Unmarshal(data, r) != nil {
			return
		}
		checkErr := CheckStepReady(r)
		if checkErr == nil && (r.TileCount < 1 || !layout.ValidName(r.Campaign) || !layout.ValidName(r.Step)) {
			t.Fatalf("CheckStepReady accepted %v", r)
		}
		err := a.StepReady(context.Background(), r)
		if checkErr != nil && err != nil {
			t.Fatalf("invalid announcement %v returned %v; want it dropped", r, err)
		}
		after, lerr := st.List(context.Background(), layout.Root+"/")
		if lerr != nil {
			t.Fatal(lerr)
		}
		if !slices.Equal(after, before) {
			t.Fatalf("announcement %v changed the store: %v", r, after)
		}
	})
}
