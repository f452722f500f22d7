package volio

import (
	"context"
	"io/fs"
	"os"
	"path"
	"path/filepath"
	"strings"
)

// Bucket is the key-value storage a Zarr array lives in: a local directory
// (Dir) or an object store. Keys are slash-separated paths relative to the
// bucket root.
type Bucket interface {
	// Get returns the value stored under key; a missing key gives an error
	// wrapping fs.ErrNotExist.
	Get(ctx context.Context, key string) ([]byte, error)
	// Put stores data under key, replacing any earlier value; it keeps no
	// reference to data after it returns (writers reuse the buffer).
	Put(ctx context.Context, key string, data []byte) error
}

// Dir is a Bucket on a local directory. Key "a/b/c" is the file
// <Dir>/a/b/c. Put writes a temporary file next to the target and renames it
// into place, so readers never see a partly written value.
type Dir string

func (d Dir) file(key string) (string, error) {
	if !fs.ValidPath(key) || key == "." || strings.Contains(key, "\\") {
		return "", fileErr(path.Join(string(d), key), ErrFormat, "invalid key %q", key)
	}
	return filepath.Join(string(d), filepath.FromSlash(key)), nil
}

// Get reads the file for key.
func (d Dir) Get(ctx context.Context, key string) ([]byte, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	name, err := d.file(key)
	if err != nil {
		return nil, err
	}
	data, err := os.ReadFile(name)
	if err != nil {
		return nil, osErr(name, err)
	}
	return data, nil
}

// Put writes the file for key atomically (temporary file + rename).
func (d Dir) Put(ctx context.Context, key string, data []byte) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	name, err := d.file(key)
	if err != nil {
		return err
	}
	return writeFileAtomic(name, data)
}

// writeFileAtomic writes data to name through a temporary file in the same
// directory and a rename.
func writeFileAtomic(name string, data []byte) error {
	dir := filepath.Dir(name)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return osErr(dir, err)
	}
	f, err := os.CreateTemp(dir, ".tmp-"+filepath.Base(name)+"-*")
	if err != nil {
		return osErr(name, err)
	}
	tmp := f.Name()
	_, err = f.Write(data)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Chmod(tmp, 0o644)
	}
	if err == nil {
		err = os.Rename(tmp, name)
	}
	if err != nil {
		os.Remove(tmp)
		return osErr(name, err)
	}
	return nil
}
