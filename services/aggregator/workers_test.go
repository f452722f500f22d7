package aggregator

import (
	"context"
	"testing"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"

	"sluice/proto/sluicepb"
)

// TestWorkerLeavesOnStoppingBeat: a worker beating once an hour stays in
// the count (its grace is three hours) until its beat that says it stops,
// which removes it at once; a beat without an interval gets the default
// one, not zero grace.
func TestWorkerLeavesOnStoppingBeat(t *testing.T) {
	a := &Aggregator{Store: nil, Log: quiet()}
	hour := durationpb.New(time.Hour)
	a.WorkerBeat(&sluicepb.WorkerBeat{WorkerId: "w1", Host: "h", Interval: hour, Concurrency: 4, TilesDone: 7})
	a.WorkerBeat(&sluicepb.WorkerBeat{WorkerId: "w2", Host: "h"})
	h := a.Health(context.Background())
	if h.Workers != 2 || h.WorkerSlots != 4 || h.WorkerList[0].ID != "w1" || h.WorkerList[0].TilesDone != 7 || h.WorkerList[1].ID != "w2" {
		t.Fatalf("after two beats: %+v", h)
	}
	a.WorkerBeat(&sluicepb.WorkerBeat{WorkerId: "w1", Host: "h", Interval: hour, Stopping: true})
	if h := a.Health(context.Background()); h.Workers != 1 || h.WorkerList[0].ID != "w2" {
		t.Errorf("after w1's stopping beat: %+v", h)
	}
}
