package campaign

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"strings"

	"sluice/pkg/layout"
)

// Rejection records a scan the watcher gave up: the file could not be
// ingested after every attempt (truncated, wrong shape, no header …). It
// is stored under RejectedKey so that the live page, the API, `sluice
// status` and the report show it with its reason; it is removed when a
// later ingest of the same step succeeds.
type Rejection struct {
	// Step is the step name the scan would have had; it names the record.
	Step string `json:"step"`
	// File is the scan's path as the watcher saw it.
	File string `json:"file"`
	// Reason is the last error, on one line.
	Reason string `json:"reason"`
	// Attempts is how often ingest was tried.
	Attempts int `json:"attempts"`
	// At is when the scan was given up (RFC 3339, UTC).
	At string `json:"at"`
}

// RejectedDir is the prefix of a campaign's rejection records.
func RejectedDir(c layout.Campaign) string { return c.Dir() + "rejected/" }

// RejectedKey is where the rejection of step is recorded. The step name
// passed the layout's name check, so it is safe as a key segment.
func RejectedKey(c layout.Campaign, step string) (string, error) {
	if err := layout.CheckName("step", step); err != nil {
		return "", err
	}
	return RejectedDir(c) + step + ".json", nil
}

// OneLine folds an error message onto one line (newlines and runs of
// blanks become single spaces) for a rejection reason.
func OneLine(s string) string { return strings.Join(strings.Fields(s), " ") }

// PutRejection stores r (r.Step names it).
func PutRejection(ctx context.Context, st Putter, c layout.Campaign, r Rejection) error {
	key, err := RejectedKey(c, r.Step)
	if err != nil {
		return err
	}
	r.Reason = OneLine(r.Reason)
	return PutJSON(ctx, st, key, r)
}

// Lister lists keys under a prefix and reads them.
type Lister interface {
	Getter
	List(ctx context.Context, prefix string) ([]string, error)
}

// Deleter removes a key.
type Deleter interface {
	Delete(ctx context.Context, key string) error
}

// ClearRejection removes the rejection record of step, if any: the scan
// was ingested after all.
func ClearRejection(ctx context.Context, st Deleter, c layout.Campaign, step string) error {
	key, err := RejectedKey(c, step)
	if err != nil {
		return err
	}
	return st.Delete(ctx, key)
}

// Rejections returns the campaign's rejection records in step-name order.
func Rejections(ctx context.Context, st Lister, c layout.Campaign) ([]Rejection, error) {
	keys, err := st.List(ctx, RejectedDir(c))
	if err != nil {
		return nil, fmt.Errorf("campaign %s: rejected scans: %w", c.Name(), err)
	}
	var out []Rejection
	for _, k := range keys {
		if !strings.HasSuffix(k, ".json") {
			continue
		}
		var r Rejection
		if err := GetJSON(ctx, st, k, &r); err != nil {
			if errors.Is(err, fs.ErrNotExist) {
				continue // cleared between List and Get
			}
			return nil, fmt.Errorf("campaign %s: %w", c.Name(), err)
		}
		out = append(out, r)
	}
	return out, nil
}
