package queue

import (
	"context"
	"sync/atomic"
	"testing"
	"time"

	pb "sluice/proto/sluicepb"
)

// BenchmarkPublishTask measures stored (server-acknowledged) task publishes
// per second on the embedded server's file store.
func BenchmarkPublishTask(b *testing.B) {
	_, q := newQueue(b, Policy{})
	ctx := context.Background()
	tk := task("bench", "0001", 0, pb.Priority_PRIORITY_BATCH)
	tk.TileCount = 0
	b.ResetTimer()
	start := time.Now()
	for i := 0; i < b.N; i++ {
		tk.Tile = int32(i)
		if _, err := q.PublishTask(ctx, tk); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/time.Since(start).Seconds(), "tasks/s")
}

// BenchmarkTaskRoundTrip measures tasks per second through the whole
// path: publish, pull (one per request, live then batch), handler, confirmed ack.
func BenchmarkTaskRoundTrip(b *testing.B) {
	_, q := newQueue(b, Policy{})
	ctx, cancel := context.WithCancel(context.Background())
	var handled atomic.Int64
	all := make(chan struct{})
	n := int64(b.N)
	done := make(chan error, 1)
	go func() {
		done <- q.Work(ctx, func(context.Context, *pb.TileTask) error {
			if handled.Add(1) == n {
				close(all)
			}
			return nil
		}, WorkOptions{Concurrency: 2, IdleWait: 50 * time.Millisecond})
	}()
	tk := task("bench", "0001", 0, pb.Priority_PRIORITY_BATCH)
	tk.TileCount = 0
	b.ResetTimer()
	start := time.Now()
	for i := 0; i < b.N; i++ {
		tk.Tile = int32(i)
		if _, err := q.PublishTask(ctx, tk); err != nil {
			b.Fatal(err)
		}
	}
	<-all
	b.ReportMetric(float64(b.N)/time.Since(start).Seconds(), "tasks/s")
	b.StopTimer()
	cancel()
	<-done
}

// BenchmarkTaskDrainSerial measures what one worker slot pays per tile for
// the queue alone: b.N tasks are stored first (untimed), then a worker with
// one slot pulls each, publishes its result as the worker does (no
// segmentation, no store I/O) and acknowledges it (confirmed ack) until the
// stream is drained. ms/task is the per-tile queue overhead
// that docs/performance.md sets against the tile's compute time.
func BenchmarkTaskDrainSerial(b *testing.B) {
	_, q := newQueue(b, Policy{})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	tk := task("bench", "0001", 0, pb.Priority_PRIORITY_BATCH)
	tk.TileCount = 0
	for i := 0; i < b.N; i++ {
		tk.Tile = int32(i)
		if _, err := q.PublishTask(ctx, tk); err != nil {
			b.Fatal(err)
		}
	}
	var handled atomic.Int64
	all := make(chan struct{})
	n := int64(b.N)
	done := make(chan error, 1)
	b.ResetTimer()
	start := time.Now()
	go func() {
		done <- q.Work(ctx, func(ctx context.Context, t *pb.TileTask) error {
			// As the worker does: publish the tile's result (stored,
			// deduplicated), then the queue acknowledges the task.
			if _, err := q.PublishResult(ctx, &pb.TileDone{Campaign: t.Campaign, Step: t.Step, Tile: t.Tile,
				TileCount: t.TileCount, ParamHash: t.ParamHash, WorkerId: "bench"}); err != nil {
				return err
			}
			if handled.Add(1) == n {
				close(all)
			}
			return nil
		}, WorkOptions{Concurrency: 1, IdleWait: 50 * time.Millisecond, Beat: -1})
	}()
	<-all
	el := time.Since(start)
	b.StopTimer()
	b.ReportMetric(el.Seconds()*1e3/float64(b.N), "ms/task")
	cancel()
	<-done
}
