package aggregator

import (
	"sort"
	"time"

	"sluice/pkg/queue"
	"sluice/pkg/web"
	"sluice/proto/sluicepb"
)

// heardWorker is a worker's last beat and when it was heard.
type heardWorker struct {
	beat *sluicepb.WorkerBeat
	at   time.Time
}

// WorkerBeat records a worker's beat (see queue.WatchWorkers). A beat that
// says the worker stops removes it at once; a worker that stops without
// one (killed, cut off) drops out BeatsMissed intervals after its last
// beat.
func (a *Aggregator) WorkerBeat(b *sluicepb.WorkerBeat) {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.workers == nil {
		a.workers = map[string]heardWorker{}
	}
	if b.Stopping {
		delete(a.workers, b.WorkerId)
		return
	}
	a.workers[b.WorkerId] = heardWorker{beat: b, at: time.Now()}
}

// beatGrace is how long after its last beat a worker still counts as
// present: BeatsMissed of its own intervals (the default interval when
// the beat names none).
func beatGrace(b *sluicepb.WorkerBeat) time.Duration {
	d := b.GetInterval().AsDuration()
	if d <= 0 {
		d = queue.DefaultBeat
	}
	return queue.BeatsMissed * d
}

// presentWorkers forgets the workers not heard within their grace and
// describes the others, by id. Callers hold a.mu.
func (a *Aggregator) presentWorkers(now time.Time) []web.WorkerInfo {
	out := []web.WorkerInfo{}
	for id, w := range a.workers {
		if now.Sub(w.at) > beatGrace(w.beat) {
			delete(a.workers, id)
			continue
		}
		b := w.beat
		wi := web.WorkerInfo{ID: b.WorkerId, Host: b.Host, PID: b.Pid,
			LastSeen: w.at.UTC().Format(time.RFC3339), LastSeenAgo: now.Sub(w.at).Seconds(),
			BeatS: b.GetInterval().AsDuration().Seconds(), Concurrency: int(b.Concurrency),
			TilesDone: b.TilesDone, TilesFailed: b.TilesFailed, Current: append([]string{}, b.Current...)}
		if b.StartedAt != nil {
			wi.StartedAt = b.StartedAt.AsTime().UTC().Format(time.RFC3339)
		}
		out = append(out, wi)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].ID < out[j].ID })
	return out
}

// WorkersPresent counts the workers heard from within their grace (for
// the sluice_workers gauge).
func (a *Aggregator) WorkersPresent() int {
	a.mu.Lock()
	defer a.mu.Unlock()
	return len(a.presentWorkers(time.Now()))
}
