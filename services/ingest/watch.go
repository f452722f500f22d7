package ingest

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"sluice/pkg/layout"
	"sluice/pkg/store"
	"sluice/pkg/volio"
)

// Arrival is one scan found complete in a watched directory.
type Arrival struct {
	// Path is the volume: a raw file, a TIFF-slice directory or a Zarr
	// array directory.
	Path string
	// Step is the step name derived from the file name.
	Step string
	// TimeS is the experiment time of the scan in seconds from its marker
	// file, when HasTime.
	TimeS   float64
	HasTime bool
	// ModTime is the scan's modification time (the latest of its files),
	// set only when Watcher.ModTimes allows it to date the scan and the
	// marker gives no time; see Request.ModTime.
	ModTime time.Time
}

// Marker is the suffix of the file a reconstruction pipeline writes last,
// next to a finished volume: "scan_0042.raw" is complete once
// "scan_0042.raw.done" or "scan_0042.done" exists (the marker is named
// after the scan with or without its extension; see MarkerFor). The
// marker may be empty or hold JSON {"time_s": 1234.5}; anything else is
// refused (ReadMarker), never read as time 0.
//
// Why a marker: beamline reconstruction writes large volumes slice by slice
// or in chunks over tens of seconds, and a file whose size has stopped
// changing may still be incomplete (the writer can pause between slabs);
// a marker written after the last byte is the signal acquisition and
// reconstruction software already know how to give (it is how data-transfer
// tools at facilities usually hand over files — common practice). For
// writers that cannot make one, Watcher.Settle falls back to "size and
// modification time unchanged for this long".
const Marker = ".done"

// ErrMarker marks a marker file that cannot be used: content that is not
// the documented JSON, or a short-form marker two scans could claim.
var ErrMarker = errors.New("bad marker file")

// scanStem is a scan's name without its extension ("scan_0042.raw" →
// "scan_0042"), or "" when it has none.
func scanStem(name string) string {
	ext := filepath.Ext(name)
	if ext == "" || ext == name {
		return ""
	}
	return strings.TrimSuffix(name, ext)
}

// isScanName reports whether a directory entry may be a scan: not a dot
// file, a marker or a header side file.
func isScanName(name string) bool {
	return !strings.HasPrefix(name, ".") && !strings.HasSuffix(name, Marker) && !strings.HasSuffix(name, ".sluice.json")
}

// MarkerFor finds the marker of scan among the entry names of its
// directory: "<scan>.done" first, else "<scan without extension>.done".
// The short form is refused (ErrMarker) when another scan of the directory
// has the same stem ("scan_0000.raw" and "scan_0000.tif" for
// "scan_0000.done"): the marker cannot say which one is complete. It
// returns "" when there is no marker.
func MarkerFor(names map[string]bool, scan string) (string, error) {
	if names[scan+Marker] {
		return scan + Marker, nil
	}
	stem := scanStem(scan)
	if stem == "" || !names[stem+Marker] {
		return "", nil
	}
	for other := range names {
		if other != scan && isScanName(other) && (other == stem || scanStem(other) == stem) {
			a, b := min(scan, other), max(scan, other)
			return "", fmt.Errorf("%w: %s: ambiguous, it could mark %s or %s (name it %s.done or %s.done)", ErrMarker, stem+Marker, a, b, a, b)
		}
	}
	return stem + Marker, nil
}

// orphanMarkers returns the markers among names that name no scan, in
// either form.
func orphanMarkers(names map[string]bool) []string {
	claimed := map[string]bool{}
	for n := range names {
		if isScanName(n) {
			claimed[n+Marker] = true
			if s := scanStem(n); s != "" {
				claimed[s+Marker] = true
			}
		}
	}
	var out []string
	for n := range names {
		if strings.HasSuffix(n, Marker) && !strings.HasPrefix(n, ".") && !claimed[n] {
			out = append(out, n)
		}
	}
	sort.Strings(out)
	return out
}

// ReadMarker reads a marker file: empty (or blank) means "complete, no
// time"; otherwise it must be a JSON object whose time_s is a finite,
// non-negative number of seconds. Anything else (`time 405`, a time in a
// string, a missing time_s) is an ErrMarker naming the file: a step must
// not silently get t = 0.
func ReadMarker(path string) (timeS float64, hasTime bool, err error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return 0, false, fmt.Errorf("%w: %s: %w", ErrMarker, path, err)
	}
	if len(bytes.TrimSpace(b)) == 0 {
		return 0, false, nil
	}
	var m map[string]json.RawMessage
	if err := json.Unmarshal(b, &m); err != nil || m == nil {
		return 0, false, fmt.Errorf("%w: %s: not empty and not a JSON object such as {\"time_s\": 405}", ErrMarker, path)
	}
	raw, ok := m["time_s"]
	if !ok {
		return 0, false, fmt.Errorf("%w: %s: JSON without time_s (the step's time in seconds, e.g. {\"time_s\": 405})", ErrMarker, path)
	}
	var t float64
	if err := json.Unmarshal(raw, &t); err != nil || string(bytes.TrimSpace(raw)) == "null" {
		return 0, false, fmt.Errorf("%w: %s: time_s is %s, not a number of seconds", ErrMarker, path, raw)
	}
	if t < 0 || math.IsInf(t, 0) || math.IsNaN(t) {
		return 0, false, fmt.Errorf("%w: %s: time_s %g is not a finite time ≥ 0 s", ErrMarker, path, t)
	}
	return t, true, nil
}

// Watcher finds complete scans in a directory, each once.
type Watcher struct {
	Dir string
	// Settle, if positive, also accepts scans without a marker once their
	// size and modification time have not changed for this long.
	Settle time.Duration
	// Poll is the scan interval (default 1 s).
	Poll time.Duration
	// ModTimes lets a scan's modification time date it when its marker
	// gives no time (Arrival.ModTime); without it such a scan needs a time
	// in its header or from the caller (--times), else ingest refuses it.
	ModTimes bool
	// Attempts bounds how often a scan whose ingest failed is offered
	// again (default 5), after 2, 4, 8 … polls: an object store or NATS
	// outage longer than the services' own retries must not lose a scan,
	// and bad input must not be retried for ever.
	Attempts int
	Log      *slog.Logger
	// GaveUp, if set, is called once when a scan is given up after
	// Attempts failures, with the last error: the place to record the
	// rejection where users look (the campaign's store) and to count it.
	// A scan given up is offered again only when its file or marker
	// changes (a fixed copy, a rewritten marker).
	GaveUp func(a Arrival, attempts int, err error)

	seen   map[string]bool
	sizes  map[string]sizeSeen
	failed map[string]bool
	tries  map[string]int       // failed ingests per scan name
	after  map[string]time.Time // no new attempt before
	said   map[string]bool      // markers already reported as unusable or orphaned
	badMkr map[string]sizeSeen  // scan → its refused marker as it was when read
	gaveUp map[string]scanStamp // scan given up → its file and marker then
}

// scanStamp is a scan's file and marker as they were at a moment: when it
// differs later, the scan was replaced or its marker rewritten.
type scanStamp struct{ file, marker sizeSeen }

// stampOf reads the stamp of scan name in the watched directory.
func (w *Watcher) stampOf(names map[string]bool, name string) scanStamp {
	var s scanStamp
	if size, mtime, err := treeSize(filepath.Join(w.Dir, name)); err == nil {
		s.file = sizeSeen{size: size, mtime: mtime}
	}
	if m, err := MarkerFor(names, name); err == nil && m != "" {
		if fi, err := os.Stat(filepath.Join(w.Dir, m)); err == nil {
			s.marker = sizeSeen{size: fi.Size(), mtime: fi.ModTime()}
		}
	}
	return s
}

func (a scanStamp) same(b scanStamp) bool {
	return a.file.size == b.file.size && a.file.mtime.Equal(b.file.mtime) &&
		a.marker.size == b.marker.size && a.marker.mtime.Equal(b.marker.mtime)
}

type sizeSeen struct {
	size  int64
	mtime time.Time
	since time.Time
}

// Run calls found for every complete scan, in name order within a poll,
// until ctx ends. An error from found is logged and the scan offered again
// up to Attempts times with a doubling delay, then given up (bad input must
// not stop the campaign). A store refusal (store.IsRefused) ends Run with
// that error at once.
func (w *Watcher) Run(ctx context.Context, found func(Arrival) error) error {
	if w.Poll <= 0 {
		w.Poll = time.Second
	}
	if w.Log == nil {
		w.Log = slog.Default()
	}
	t := time.NewTicker(w.Poll)
	defer t.Stop()
	for {
		arr, err := w.Scan()
		if err != nil {
			w.Log.Warn("watch: cannot read directory", "dir", w.Dir, "err", err)
		}
		for _, a := range arr {
			if err := found(a); err != nil {
				if store.IsRefused(err) {
					// The store refuses ingest itself (wrong keys, a full or
					// read-only disk): every scan would fail alike, and giving
					// them up one by one would lose them. Stop with the cause;
					// a restarted watcher offers them again.
					return fmt.Errorf("ingest: %s: %w", a.Path, err)
				}
				w.retry(a, err)
			}
		}
		select {
		case <-ctx.Done():
			return nil
		case <-t.C:
		}
	}
}

// retry forgets a failed scan so that a later poll offers it again, or
// gives it up after Attempts failures.
func (w *Watcher) retry(a Arrival, err error) {
	if w.Attempts <= 0 {
		w.Attempts = 5
	}
	name := filepath.Base(a.Path)
	w.tries[name]++
	n := w.tries[name]
	if n >= w.Attempts {
		w.gaveUp[name] = w.stampOf(w.names(), name)
		if w.GaveUp != nil {
			w.GaveUp(a, n, err) // recorded before it is logged as given up
		}
		w.Log.Error("ingest failed; giving the scan up and continuing with the next", "path", a.Path, "attempts", n, "err", err)
		return
	}
	wait := w.Poll << n
	if badInput(err) {
		// The file itself is at fault: say so at error level now, not only
		// when the attempts run out. It is still offered again, in case it
		// is replaced by a good copy under the same name.
		w.Log.Error("ingest failed: bad scan file; will look at it again", "path", a.Path, "attempt", n, "in", wait, "err", err)
	} else {
		w.Log.Warn("ingest failed; will try the scan again", "path", a.Path, "attempt", n, "in", wait, "err", err)
	}
	delete(w.seen, name)
	w.after[name] = time.Now().Add(wait)
}

// names returns the entry names of the watched directory (none when it
// cannot be read).
func (w *Watcher) names() map[string]bool {
	out := map[string]bool{}
	ents, _ := os.ReadDir(w.Dir)
	for _, e := range ents {
		out[e.Name()] = true
	}
	return out
}

func (w *Watcher) init() {
	if w.seen == nil {
		w.seen, w.sizes, w.failed = map[string]bool{}, map[string]sizeSeen{}, map[string]bool{}
		w.tries, w.after, w.said, w.badMkr = map[string]int{}, map[string]time.Time{}, map[string]bool{}, map[string]sizeSeen{}
		w.gaveUp = map[string]scanStamp{}
	}
}

// Scan returns the scans that became complete since the last call.
func (w *Watcher) Scan() ([]Arrival, error) {
	w.init()
	ents, err := os.ReadDir(w.Dir)
	if err != nil {
		return nil, err
	}
	names := map[string]bool{}
	for _, e := range ents {
		names[e.Name()] = true
	}
	var out []Arrival
	keys := make([]string, 0, len(ents))
	for _, e := range ents {
		keys = append(keys, e.Name())
	}
	sort.Strings(keys)
	now := time.Now()
	for _, m := range orphanMarkers(names) {
		if !w.said[m] {
			w.said[m] = true
			w.Log.Warn("watch: marker names no scan; ignored", "marker", filepath.Join(w.Dir, m))
		}
	}
	for _, name := range keys {
		if g, ok := w.gaveUp[name]; ok && w.seen[name] && !g.same(w.stampOf(names, name)) {
			// Given up, then replaced or re-marked: a fresh start.
			delete(w.gaveUp, name)
			delete(w.seen, name)
			delete(w.tries, name)
			delete(w.after, name)
			w.Log.Info("watch: rejected scan changed; looking at it again", "path", filepath.Join(w.Dir, name))
		}
		if w.seen[name] || !isScanName(name) {
			continue
		}
		if now.Before(w.after[name]) {
			continue
		}
		path := filepath.Join(w.Dir, name)
		var timeS float64
		hasTime := false
		marker, err := MarkerFor(names, name)
		if err != nil {
			// The short marker fits two scans: neither is taken on its
			// word (each can still get its own <scan>.done).
			if !w.said[err.Error()] {
				w.said[err.Error()] = true
				w.Log.Error("watch: marker refused", "err", err)
			}
			continue
		}
		if marker != "" {
			mpath := filepath.Join(w.Dir, marker)
			var stamp sizeSeen
			if fi, err := os.Stat(mpath); err == nil {
				stamp = sizeSeen{size: fi.Size(), mtime: fi.ModTime()}
			}
			if bad, ok := w.badMkr[name]; ok && bad.size == stamp.size && bad.mtime.Equal(stamp.mtime) {
				continue // refused before and not rewritten since
			}
			if timeS, hasTime, err = ReadMarker(mpath); err != nil {
				// The step is rejected, not given time 0; the campaign
				// goes on with the next scan. A corrected marker is read
				// again.
				w.badMkr[name] = stamp
				w.Log.Error("watch: scan not ingested", "path", path, "err", err)
				continue
			}
			delete(w.badMkr, name)
		} else if w.Settle > 0 {
			size, mtime, err := treeSize(path)
			if err != nil {
				continue
			}
			s, ok := w.sizes[name]
			if !ok || s.size != size || !s.mtime.Equal(mtime) {
				w.sizes[name] = sizeSeen{size: size, mtime: mtime, since: now}
				continue
			}
			if now.Sub(s.since) < w.Settle {
				continue
			}
		} else {
			continue
		}
		w.seen[name] = true
		step, err := StepName(name)
		if err != nil {
			w.Log.Error("watch: skipping scan", "path", path, "err", err)
			continue
		}
		a := Arrival{Path: path, Step: step, TimeS: timeS, HasTime: hasTime}
		if !hasTime && w.ModTimes {
			if _, mtime, err := treeSize(path); err == nil {
				a.ModTime = mtime
			}
		}
		out = append(out, a)
	}
	return out, nil
}

// StepName derives a step name from a file name: lower case, extension
// (.raw, .zarr, .tif, .h5 …) dropped, characters outside [a-z0-9._-] replaced by
// '-'.
func StepName(file string) (string, error) {
	base := strings.ToLower(filepath.Base(file))
	for _, ext := range []string{".raw", ".zarr", ".tiff", ".tif", ".vol", ".bin", ".h5", ".hdf5", ".nxs", ".hdf"} {
		base = strings.TrimSuffix(base, ext)
	}
	b := []byte(base)
	for i, c := range b {
		if !(c >= 'a' && c <= 'z' || c >= '0' && c <= '9' || c == '.' || c == '_' || c == '-') {
			b[i] = '-'
		}
	}
	s := strings.TrimLeft(string(b), "._-")
	if len(s) > layout.MaxNameLen {
		s = s[:layout.MaxNameLen]
	}
	if err := layout.CheckName("step", s); err != nil {
		return "", fmt.Errorf("ingest: %s: cannot derive a step name: %w", file, err)
	}
	return s, nil
}

// ModTime is the modification time of a scan: of its file, or the latest
// of the files under its directory (a TIFF stack, a Zarr array).
func ModTime(path string) (time.Time, error) {
	_, t, err := treeSize(path)
	return t, err
}

// treeSize sums the sizes of a file or of all files under a directory and
// returns the latest modification time.
func treeSize(path string) (int64, time.Time, error) {
	var size int64
	var latest time.Time
	err := filepath.WalkDir(path, func(p string, d os.DirEntry, err error) error {
		if err != nil {
			return err
		}
		fi, err := d.Info()
		if err != nil {
			return err
		}
		size += fi.Size()
		if fi.ModTime().After(latest) {
			latest = fi.ModTime()
		}
		return nil
	})
	return size, latest, err
}

// badInput reports whether err is a fault of the scan file (truncated,
// malformed, too large) rather than of the store or the queue.
func badInput(err error) bool {
	return errors.Is(err, volio.ErrTruncated) || errors.Is(err, volio.ErrFormat) || errors.Is(err, volio.ErrTooLarge)
}
