// Package store keeps sluice's objects (Zarr chunks, manifests, tile results,
// series) behind one small interface with two implementations: Local, a
// directory on the local file system (the embedded default), and S3, any
// S3-compatible object store (MinIO, Ceph RGW, AWS S3) reached through
// minio-go v7.
//
// Keys are slash-separated relative paths such as
// "campaigns/c1/steps/0001/volume.zarr/0/0/0" (see package layout). A key is
// valid when it is non-empty, does not start or end with a slash, has no empty,
// "." or ".." segment, is UTF-8 and holds no backslash or control character; every method rejects other
// keys, so no key can reach outside the store's root.
//
// Both stores give the same semantics: Put replaces the whole value
// atomically (a reader sees the old or the new value, never a mix), Get of a
// missing key returns an error wrapping fs.ErrNotExist, Delete of a missing
// key is not an error, and List returns every key starting with a prefix in
// lexical order.
package store

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"strings"
	"time"
	"unicode/utf8"
)

// Store is object storage addressed by slash-separated keys.
type Store interface {
	// Get returns the value under key; a missing key gives an error
	// wrapping fs.ErrNotExist.
	Get(ctx context.Context, key string) ([]byte, error)
	// Put stores data under key, replacing any earlier value atomically.
	Put(ctx context.Context, key string, data []byte) error
	// List returns, in lexical order, all keys that start with prefix
	// (a plain string prefix, as in S3; "" lists everything).
	List(ctx context.Context, prefix string) ([]string, error)
	// Dirs returns, in lexical order, the distinct key segments that
	// follow prefix in keys continuing past them ("b" for the key
	// prefix+"b/c"), as an S3 listing with delimiter "/" reports common
	// prefixes: one level, without listing what lies below. prefix is ""
	// or ends with "/".
	Dirs(ctx context.Context, prefix string) ([]string, error)
	// Delete removes key; a missing key is not an error.
	Delete(ctx context.Context, key string) error
	// Stat describes the value under key; a missing key gives an error
	// wrapping fs.ErrNotExist.
	Stat(ctx context.Context, key string) (Info, error)
}

// Info describes one stored value.
type Info struct {
	Key     string
	Size    int64
	ModTime time.Time
}

// Exists reports whether key holds a value in s, by its metadata alone
// (the value is not read).
func Exists(ctx context.Context, s interface {
	Stat(ctx context.Context, key string) (Info, error)
}, key string) (bool, error) {
	_, err := s.Stat(ctx, key)
	switch {
	case err == nil:
		return true, nil
	case errors.Is(err, fs.ErrNotExist):
		return false, nil
	}
	return false, err
}

// ErrKey is wrapped by the error for an invalid key or prefix.
var ErrKey = errors.New("invalid key")

// tempMarker is part of the name of every temporary file Local writes; keys
// holding it are rejected so a temporary file is never mistaken for a value.
const tempMarker = ".sluice-tmp-"

// CheckKey returns an error wrapping ErrKey when key is not a valid key.
func CheckKey(key string) error {
	if key == "" {
		return fmt.Errorf("store: empty key: %w", ErrKey)
	}
	if strings.HasSuffix(key, "/") {
		return fmt.Errorf("store: key %q ends with a slash: %w", key, ErrKey)
	}
	return checkPath(key)
}

// checkDirPrefix validates a Dirs prefix: "" or a valid key followed by a
// slash.
func checkDirPrefix(prefix string) error {
	if prefix != "" && !strings.HasSuffix(prefix, "/") {
		return fmt.Errorf("store: prefix %q of a directory listing does not end with a slash: %w", prefix, ErrKey)
	}
	return checkPrefix(prefix)
}

// checkPrefix validates a List prefix: "" or a valid key, optionally followed
// by a slash.
func checkPrefix(prefix string) error {
	if prefix == "" {
		return nil
	}
	return checkPath(strings.TrimSuffix(prefix, "/"))
}

func checkPath(p string) error {
	if p == "" || strings.HasPrefix(p, "/") {
		return fmt.Errorf("store: key %q is absolute or empty: %w", p, ErrKey)
	}
	if !utf8.ValidString(p) {
		return fmt.Errorf("store: key %q is not UTF-8: %w", p, ErrKey)
	}
	for _, r := range p {
		if r < 0x20 || r == 0x7f || r == '\\' {
			return fmt.Errorf("store: key %q holds a backslash or control character: %w", p, ErrKey)
		}
	}
	for _, seg := range strings.Split(p, "/") {
		switch {
		case seg == "":
			return fmt.Errorf("store: key %q has an empty segment: %w", p, ErrKey)
		case seg == "." || seg == "..":
			return fmt.Errorf("store: key %q has a %q segment: %w", p, seg, ErrKey)
		case strings.Contains(seg, tempMarker):
			return fmt.Errorf("store: key %q uses the reserved name %q: %w", p, tempMarker, ErrKey)
		}
	}
	return nil
}

// notFound returns the error for a missing key.
func notFound(op, where, key string) error {
	return fmt.Errorf("store: %s %s: %w", op, where+key, fs.ErrNotExist)
}
