package campaign

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"

	"sluice/pkg/layout"
)

// Getter and Putter are the parts of an object store (package store, or a
// volio.Bucket) that the JSON helpers below need.
type Getter interface {
	Get(ctx context.Context, key string) ([]byte, error)
}

// Putter stores a value under a key.
type Putter interface {
	Put(ctx context.Context, key string, data []byte) error
}

// GetJSON decodes the JSON object stored under key into v. A missing key
// keeps the store's error (wrapping fs.ErrNotExist); bad JSON names the key.
func GetJSON(ctx context.Context, st Getter, key string, v any) error {
	b, err := st.Get(ctx, key)
	if err != nil {
		return err
	}
	if err := json.Unmarshal(b, v); err != nil {
		return fmt.Errorf("%s: %w", key, err)
	}
	return nil
}

// PutJSON stores v as indented JSON under key.
func PutJSON(ctx context.Context, st Putter, key string, v any) error {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return err
	}
	return st.Put(ctx, key, b)
}

// LoadRecord reads a campaign's campaign.json.
func LoadRecord(ctx context.Context, st Getter, c layout.Campaign) (Record, error) {
	var r Record
	if err := GetJSON(ctx, st, c.Config(), &r); err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return r, fmt.Errorf("campaign %s: no %s in the store", c.Name(), c.Config())
		}
		return r, fmt.Errorf("campaign %s: %w", c.Name(), err)
	}
	return r, nil
}
