package store

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"syscall"
)

// Local is a Store on a local directory: key "a/b/c" is the file <Root>/a/b/c.
//
// Put writes a temporary file in the target's directory, syncs it, renames
// it over the target and syncs the directory, so after Put returns the value
// survives a crash and a concurrent reader sees either the old or the new
// file. Empty directories left by Delete are not removed.
type Local struct {
	root string // absolute, cleaned
}

// NewLocal returns a Local store rooted at dir, creating dir if needed.
func NewLocal(dir string) (*Local, error) {
	if dir == "" {
		return nil, errors.New("store: local store needs a directory")
	}
	abs, err := filepath.Abs(dir)
	if err != nil {
		return nil, fmt.Errorf("store: local directory %s: %w", dir, err)
	}
	if err := os.MkdirAll(abs, 0o755); err != nil {
		return nil, fmt.Errorf("store: local directory %s: %w", abs, pathErr(err))
	}
	return &Local{root: abs}, nil
}

// Root returns the absolute directory of the store.
func (l *Local) Root() string { return l.root }

func (l *Local) String() string { return "file://" + filepath.ToSlash(l.root) }

func (l *Local) file(key string) (string, error) {
	if err := CheckKey(key); err != nil {
		return "", err
	}
	return filepath.Join(l.root, filepath.FromSlash(key)), nil
}

// Get reads the file of key.
func (l *Local) Get(ctx context.Context, key string) ([]byte, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	name, err := l.file(key)
	if err != nil {
		return nil, err
	}
	data, err := os.ReadFile(name)
	if err != nil {
		return nil, l.osErr("get", name, err)
	}
	return data, nil
}

// Stat describes the file of key; directories are not values.
func (l *Local) Stat(ctx context.Context, key string) (Info, error) {
	if err := ctx.Err(); err != nil {
		return Info{}, err
	}
	name, err := l.file(key)
	if err != nil {
		return Info{}, err
	}
	fi, err := os.Stat(name)
	if err != nil {
		return Info{}, l.osErr("stat", name, err)
	}
	if !fi.Mode().IsRegular() {
		return Info{}, fmt.Errorf("store: stat %s: not a value: %w", name, fs.ErrNotExist)
	}
	return Info{Key: key, Size: fi.Size(), ModTime: fi.ModTime()}, nil
}

// Put writes the file of key atomically and durably.
func (l *Local) Put(ctx context.Context, key string, data []byte) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	name, err := l.file(key)
	if err != nil {
		return err
	}
	dir := filepath.Dir(name)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return l.osErr("put", name, err)
	}
	f, err := os.CreateTemp(dir, tempMarker+"*")
	if err != nil {
		return l.osErr("put", name, err)
	}
	tmp := f.Name()
	_, err = f.Write(data)
	if err == nil {
		err = f.Sync()
	}
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
		return l.osErr("put", name, err)
	}
	if err := syncDir(dir); err != nil {
		return fmt.Errorf("store: put %s: sync directory: %w", name, pathErr(err))
	}
	return nil
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	return err
}

// Delete removes the file of key.
func (l *Local) Delete(ctx context.Context, key string) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	name, err := l.file(key)
	if err != nil {
		return err
	}
	fi, err := os.Lstat(name)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err == nil && fi.IsDir() {
		return fmt.Errorf("store: delete %s: a directory, not a value: %w", name, syscall.EISDIR)
	}
	if err := os.Remove(name); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return l.osErr("delete", name, err)
	}
	return nil
}

// List walks the directory holding prefix and returns the matching keys.
func (l *Local) List(ctx context.Context, prefix string) ([]string, error) {
	if err := checkPrefix(prefix); err != nil {
		return nil, err
	}
	// Walk only the deepest directory that every match lives under.
	base := ""
	if i := strings.LastIndex(prefix, "/"); i >= 0 {
		base = prefix[:i]
	}
	start := filepath.Join(l.root, filepath.FromSlash(base))
	var keys []string
	err := filepath.WalkDir(start, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			if errors.Is(err, fs.ErrNotExist) {
				return nil
			}
			return err
		}
		if err := ctx.Err(); err != nil {
			return err
		}
		rel, rerr := filepath.Rel(l.root, p)
		if rerr != nil {
			return rerr
		}
		key := filepath.ToSlash(rel)
		if d.IsDir() {
			// Prune directories that cannot hold a match.
			if p != start && !strings.HasPrefix(key+"/", prefix) && !strings.HasPrefix(prefix, key+"/") {
				return filepath.SkipDir
			}
			return nil
		}
		if d.Type().IsRegular() && strings.HasPrefix(key, prefix) && !strings.Contains(d.Name(), tempMarker) {
			keys = append(keys, key)
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("store: list %s under %s: %w", prefix, l.root, err)
	}
	sort.Strings(keys)
	return keys, nil
}

// Dirs reads the directory of prefix and returns its subdirectories that
// hold at least one key (Delete leaves empty directories behind; S3 has
// none).
func (l *Local) Dirs(ctx context.Context, prefix string) ([]string, error) {
	if err := checkDirPrefix(prefix); err != nil {
		return nil, err
	}
	dir := filepath.Join(l.root, filepath.FromSlash(prefix))
	entries, err := os.ReadDir(dir)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("store: list directories %s under %s: %w", prefix, l.root, pathErr(err))
	}
	var out []string
	for _, e := range entries {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		if !e.IsDir() || strings.Contains(e.Name(), tempMarker) {
			continue
		}
		found, err := holdsKey(filepath.Join(dir, e.Name()))
		if err != nil {
			return nil, fmt.Errorf("store: list directories %s under %s: %w", prefix, l.root, pathErr(err))
		}
		if found {
			out = append(out, e.Name())
		}
	}
	return out, nil // os.ReadDir sorts by name
}

// errFound ends holdsKey's walk at the first key.
var errFound = errors.New("found")

// holdsKey reports whether a key lies anywhere below dir; it stops at the
// first one.
func holdsKey(dir string) (bool, error) {
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			if errors.Is(err, fs.ErrNotExist) {
				return nil
			}
			return err
		}
		if d.Type().IsRegular() && !strings.Contains(d.Name(), tempMarker) {
			return errFound
		}
		return nil
	})
	if err == errFound {
		return true, nil
	}
	return false, err
}

// osErr names the operation and the file of a failed system call. The
// *fs.PathError (or *os.LinkError) is dropped, as it repeats a path (often a
// temporary file's); its errno stays in the chain for IsPermanent.
func (l *Local) osErr(op, name string, err error) error {
	if errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("store: %s %s: %w", op, name, fs.ErrNotExist)
	}
	return fmt.Errorf("store: %s %s: %w", op, name, pathErr(err))
}

// pathErr returns the error inside an *fs.PathError or *os.LinkError.
func pathErr(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	var le *os.LinkError
	if errors.As(err, &le) {
		return le.Err
	}
	return err
}
