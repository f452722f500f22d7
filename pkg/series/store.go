package series

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
)

// Store reads and writes whole objects by key ("campaigns/c1/series.json").
// Get of a missing key returns an error wrapping fs.ErrNotExist. Put must
// replace the object atomically: readers see the old bytes or the new
// bytes, never a mix. pkg/volio's buckets (local directory, S3) satisfy it.
type Store interface {
	Get(ctx context.Context, key string) ([]byte, error)
	Put(ctx context.Context, key string, data []byte) error
}

// Keys returns the object keys of a campaign's series.json and series.csv.
func Keys(campaign string) (jsonKey, csvKey string, err error) {
	if !ValidName(campaign) {
		return "", "", fmt.Errorf("series: invalid campaign name %q (want [a-z0-9][a-z0-9._-]{0,63})", campaign)
	}
	p := "campaigns/" + campaign + "/"
	return p + "series.json", p + "series.csv", nil
}

// Decode parses series.json. An empty input is an empty series.
func Decode(b []byte) ([]Row, error) {
	if len(bytes.TrimSpace(b)) == 0 {
		return nil, nil
	}
	var rows []Row
	if err := json.Unmarshal(b, &rows); err != nil {
		return nil, fmt.Errorf("series: series.json: %w", err)
	}
	for i := range rows {
		if err := rows[i].Validate(); err != nil {
			return nil, fmt.Errorf("series: series.json row %d: %w", i, unprefixed(err))
		}
	}
	return rows, nil
}

// EncodeJSON writes rows as series.json: an indented JSON array, one row
// object per step, with a final newline.
func EncodeJSON(rows []Row) ([]byte, error) {
	if rows == nil {
		rows = []Row{}
	}
	b, err := json.MarshalIndent(rows, "", " ")
	if err != nil {
		return nil, fmt.Errorf("series: encode series.json: %w", err)
	}
	return append(b, '\n'), nil
}

// Sort orders rows by time, then by step name, and derives the front
// velocities (FrontVelocities) and thermodynamic contact angles
// (ThermodynamicAngles) of the new order.
func Sort(rows []Row) {
	sort.SliceStable(rows, func(i, j int) bool {
		if rows[i].Time != rows[j].Time {
			return rows[i].Time < rows[j].Time
		}
		return rows[i].Step < rows[j].Step
	})
	FrontVelocities(rows)
	ThermodynamicAngles(rows)
}

// FrontVelocities sets each row's front_velocity_m_per_s from the row
// before it (rows sorted by time): v_i = (x_i − x_{i−1}) / (t_i − t_{i−1}),
// x the front position, t the step time (a finite difference between
// consecutive steps; negative when the front recedes). Null for the first
// row, when either step has no front, or when the times do not increase.
// A value stored earlier is always replaced, so reprocessing or a step
// arriving out of order leaves every velocity consistent with its
// neighbours.
func FrontVelocities(rows []Row) {
	for i := range rows {
		rows[i].FrontVelocity = nil
		if i == 0 {
			continue
		}
		a, b := &rows[i-1], &rows[i]
		if a.FrontPosition == nil || b.FrontPosition == nil || !(b.Time > a.Time) {
			continue
		}
		v := (*b.FrontPosition - *a.FrontPosition) / (b.Time - a.Time)
		if !math.IsNaN(v) && !math.IsInf(v, 0) {
			b.FrontVelocity = &v
		}
	}
}

// Merge returns rows with row upserted: the row of the same step, if any,
// is replaced; the result is sorted by time then step. rows is not
// modified.
func Merge(rows []Row, row Row) []Row {
	out := make([]Row, 0, len(rows)+1)
	for _, r := range rows {
		if r.Step != row.Step {
			out = append(out, r)
		}
	}
	out = append(out, row)
	Sort(out)
	return out
}

// Load reads a campaign's series; a campaign without a series yet has no
// rows and no error.
func Load(ctx context.Context, s Store, campaign string) ([]Row, error) {
	jk, _, err := Keys(campaign)
	if err != nil {
		return nil, err
	}
	b, err := s.Get(ctx, jk)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("series: read %s: %w", jk, err)
	}
	rows, err := Decode(b)
	if err != nil {
		return nil, fmt.Errorf("series: %s: %w", jk, unprefixed(err))
	}
	return rows, nil
}

// Save writes series.json and then series.csv of a campaign.
func Save(ctx context.Context, s Store, campaign string, rows []Row) error {
	jk, ck, err := Keys(campaign)
	if err != nil {
		return err
	}
	Sort(rows)
	jb, err := EncodeJSON(rows)
	if err != nil {
		return err
	}
	cb, err := EncodeCSV(rows)
	if err != nil {
		return err
	}
	if err := s.Put(ctx, jk, jb); err != nil {
		return fmt.Errorf("series: write %s: %w", jk, err)
	}
	if err := s.Put(ctx, ck, cb); err != nil {
		return fmt.Errorf("series: write %s: %w", ck, err)
	}
	return nil
}

// Upsert reads the campaign's series, replaces or inserts the row of
// row.Step and writes both files back. Upserting the same row again leaves
// the files byte for byte unchanged. It is a read-modify-write: the caller
// must serialise upserts of one campaign (the aggregator is the single
// writer of a campaign's series). It returns the new series.
func Upsert(ctx context.Context, s Store, campaign string, row Row) ([]Row, error) {
	if err := row.Validate(); err != nil {
		return nil, err
	}
	rows, err := Load(ctx, s, campaign)
	if err != nil {
		return nil, err
	}
	rows = Merge(rows, row)
	if err := Save(ctx, s, campaign, rows); err != nil {
		return nil, err
	}
	return rows, nil
}

// Dir is a Store on a local directory: key "a/b" is the file Dir/a/b. Put
// writes a temporary file in the same directory, syncs it and renames it
// over the target, so the replacement is atomic on POSIX file systems.
type Dir string

// Get reads the file of key.
func (d Dir) Get(_ context.Context, key string) ([]byte, error) {
	p, err := d.path(key)
	if err != nil {
		return nil, err
	}
	b, err := os.ReadFile(p)
	if err != nil {
		return nil, fmt.Errorf("series: %w", err)
	}
	return b, nil
}

// Put atomically replaces the file of key with data.
func (d Dir) Put(_ context.Context, key string, data []byte) error {
	p, err := d.path(key)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
		return fmt.Errorf("series: %w", err)
	}
	f, err := os.CreateTemp(filepath.Dir(p), "."+filepath.Base(p)+".tmp-*")
	if err != nil {
		return fmt.Errorf("series: %w", err)
	}
	tmp := f.Name()
	_, werr := f.Write(data)
	if werr == nil {
		werr = f.Sync()
	}
	if cerr := f.Close(); werr == nil {
		werr = cerr
	}
	if werr == nil {
		werr = os.Rename(tmp, p)
	}
	if werr != nil {
		os.Remove(tmp)
		return fmt.Errorf("series: write %s: %w", p, werr)
	}
	return nil
}

func (d Dir) path(key string) (string, error) {
	if key == "" || strings.HasPrefix(key, "/") || strings.Contains(key, "\\") {
		return "", fmt.Errorf("series: invalid key %q", key)
	}
	for _, part := range strings.Split(key, "/") {
		if part == "" || part == "." || part == ".." {
			return "", fmt.Errorf("series: invalid key %q", key)
		}
	}
	return filepath.Join(string(d), filepath.FromSlash(key)), nil
}

// unprefixed returns err without the "series: " its text starts with (the
// caller adds its own), still unwrapping to err.
func unprefixed(err error) error {
	return &prefixError{strings.TrimPrefix(err.Error(), "series: "), err}
}

type prefixError struct {
	msg string
	err error
}

func (e *prefixError) Error() string { return e.msg }
func (e *prefixError) Unwrap() error { return e.err }
