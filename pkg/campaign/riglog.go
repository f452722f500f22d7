package campaign

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"time"

	"sluice/pkg/layout"
	"sluice/pkg/riglog"
	"sluice/pkg/series"
)

// RigLogKey returns the key of the campaign's rig log: the flow rig's CSV
// file as last read, byte for byte, so that every run parses it with its
// own rig_log configuration (a corrected clock offset or unit is a new
// parameter hash, and reprocessing applies it).
func RigLogKey(c layout.Campaign) string { return c.Dir() + "rig/log.csv" }

// RigLogSourceKey returns the key of the record of where the stored rig
// log came from (RigLogSource).
func RigLogSourceKey(c layout.Campaign) string { return c.Dir() + "rig/source.json" }

// RigLogSource is the content of RigLogSourceKey.
type RigLogSource struct {
	// File is the rig log's path as it was read; errors name it.
	File     string `json:"file"`
	Bytes    int    `json:"bytes"`
	Records  int    `json:"records"`
	StoredAt string `json:"stored_at"`
}

// StoreRigLog parses data (the complete lines of the rig's file) with
// cfg and, when it reads right, stores it with its source record; a log
// that is refused is not stored, and the error names the file and line.
// It returns the parsed log.
func StoreRigLog(ctx context.Context, st Putter, c layout.Campaign, file string, data []byte, cfg riglog.Config) (*riglog.Log, error) {
	l, err := riglog.Parse(file, data, cfg)
	if err != nil {
		return nil, err
	}
	if err := st.Put(ctx, RigLogKey(c), data); err != nil {
		return nil, err
	}
	src := RigLogSource{File: file, Bytes: len(data), Records: l.Len(), StoredAt: time.Now().UTC().Format(time.RFC3339)}
	return l, PutJSON(ctx, st, RigLogSourceKey(c), src)
}

// LoadRigLog reads the campaign's stored rig log and parses it with cfg:
// nil, nil when none is stored.
func LoadRigLog(ctx context.Context, st Getter, c layout.Campaign, cfg riglog.Config) (*riglog.Log, error) {
	b, err := st.Get(ctx, RigLogKey(c))
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	name := "rig log"
	var src RigLogSource
	if GetJSON(ctx, st, RigLogSourceKey(c), &src) == nil && src.File != "" {
		name = src.File
	}
	return riglog.Parse(name, b, cfg)
}

// ApplyRigLog sets the experiment-log columns of rows (sorted by time)
// from the campaign's stored rig log as cfg reads it (package riglog); a
// campaign without a rig_log section or without a stored log gets them
// cleared. An unreadable log clears them too and is returned as the error,
// so the caller can say so without losing the step.
func ApplyRigLog(ctx context.Context, st Getter, c layout.Campaign, cfg *riglog.Config, rows []series.Row) error {
	if cfg == nil {
		riglog.Apply(rows, nil, riglog.Config{})
		return nil
	}
	l, err := LoadRigLog(ctx, st, c, *cfg)
	if err != nil {
		riglog.Apply(rows, nil, *cfg)
		return fmt.Errorf("rig log of campaign %s: %w", c.Name(), err)
	}
	riglog.Apply(rows, l, *cfg)
	return nil
}
