package store

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"testing"
)

// conformance checks the Store contract written in the package doc; every
// implementation runs it.
func conformance(t *testing.T, s Store) {
	ctx := context.Background()

	t.Run("missing", func(t *testing.T) {
		_, err := s.Get(ctx, "nothing/here")
		if !errors.Is(err, fs.ErrNotExist) {
			t.Fatalf("Get of a missing key: err = %v, want fs.ErrNotExist", err)
		}
		if _, err := s.Stat(ctx, "nothing/here"); !errors.Is(err, fs.ErrNotExist) {
			t.Fatalf("Stat of a missing key: err = %v, want fs.ErrNotExist", err)
		}
		ok, err := Exists(ctx, s, "nothing/here")
		if ok || err != nil {
			t.Fatalf("Exists of a missing key = %v, %v", ok, err)
		}
		if err := s.Delete(ctx, "nothing/here"); err != nil {
			t.Fatalf("Delete of a missing key: %v", err)
		}
	})

	t.Run("roundtrip", func(t *testing.T) {
		rng := rand.New(rand.NewPCG(1, 2))
		for _, n := range []int{0, 1, 4096, 3 << 20} {
			data := make([]byte, n)
			for i := range data {
				data[i] = byte(rng.Uint32())
			}
			key := fmt.Sprintf("rt/v%d/.zarray", n)
			if err := s.Put(ctx, key, data); err != nil {
				t.Fatal(err)
			}
			got, err := s.Get(ctx, key)
			if err != nil {
				t.Fatal(err)
			}
			if !bytes.Equal(got, data) {
				t.Fatalf("%s: got %d bytes, want %d equal bytes", key, len(got), len(data))
			}
			info, err := s.Stat(ctx, key)
			if err != nil || info.Size != int64(n) || info.Key != key {
				t.Fatalf("Stat(%s) = %+v, %v; want size %d", key, info, err, n)
			}
			if ok, err := Exists(ctx, s, key); !ok || err != nil {
				t.Fatalf("Exists(%s) = %v, %v", key, ok, err)
			}
		}
		// Overwrite replaces the whole value, also with a shorter one.
		if err := s.Put(ctx, "rt/over", []byte("a long first value")); err != nil {
			t.Fatal(err)
		}
		if err := s.Put(ctx, "rt/over", []byte("short")); err != nil {
			t.Fatal(err)
		}
		if got, _ := s.Get(ctx, "rt/over"); string(got) != "short" {
			t.Fatalf("after overwrite got %q", got)
		}
	})

	t.Run("list", func(t *testing.T) {
		put := []string{"ls/a/bc", "ls/a/b/c/d", "ls/a/b/e", "ls/ab", "ls/z", "other/x"}
		for _, k := range put {
			if err := s.Put(ctx, k, []byte(k)); err != nil {
				t.Fatal(err)
			}
		}
		for _, c := range []struct {
			prefix string
			want   []string
		}{
			{"ls/", []string{"ls/a/b/c/d", "ls/a/b/e", "ls/a/bc", "ls/ab", "ls/z"}},
			{"ls/a/b", []string{"ls/a/b/c/d", "ls/a/b/e", "ls/a/bc"}},
			{"ls/a/b/", []string{"ls/a/b/c/d", "ls/a/b/e"}},
			{"ls/a", []string{"ls/a/b/c/d", "ls/a/b/e", "ls/a/bc", "ls/ab"}},
			{"ls/q", nil},
			{"nope/", nil},
		} {
			got, err := s.List(ctx, c.prefix)
			if err != nil {
				t.Fatalf("List(%q): %v", c.prefix, err)
			}
			if len(got) == 0 && len(c.want) == 0 {
				continue
			}
			if !reflect.DeepEqual(got, c.want) {
				t.Errorf("List(%q) = %q, want %q", c.prefix, got, c.want)
			}
		}
		all, err := s.List(ctx, "")
		if err != nil {
			t.Fatal(err)
		}
		for _, k := range put {
			if !contains(all, k) {
				t.Errorf("List(\"\") misses %s", k)
			}
		}
		if err := s.Delete(ctx, "ls/a/b/e"); err != nil {
			t.Fatal(err)
		}
		got, _ := s.List(ctx, "ls/a/b/")
		if !reflect.DeepEqual(got, []string{"ls/a/b/c/d"}) {
			t.Errorf("after Delete, List = %q", got)
		}
		if _, err := s.Get(ctx, "ls/a/b/e"); !errors.Is(err, fs.ErrNotExist) {
			t.Errorf("Get after Delete: %v", err)
		}
	})

	t.Run("dirs", func(t *testing.T) {
		for _, k := range []string{"dirs/a/x", "dirs/b/c/d", "dirs/b-1/y", "dirs/f", "dirs/e/z", "dirsx/q/r"} {
			if err := s.Put(ctx, k, []byte(k)); err != nil {
				t.Fatal(err)
			}
		}
		// A directory whose only key is deleted is gone, as on S3.
		if err := s.Delete(ctx, "dirs/e/z"); err != nil {
			t.Fatal(err)
		}
		for _, c := range []struct {
			prefix string
			want   []string
		}{
			{"dirs/", []string{"a", "b", "b-1"}},
			{"dirs/b/", []string{"c"}},
			{"dirs/b/c/", nil},
			{"dirs/a/", nil},
			{"nope/", nil},
		} {
			got, err := s.Dirs(ctx, c.prefix)
			if err != nil {
				t.Fatalf("Dirs(%q): %v", c.prefix, err)
			}
			if len(got) == 0 && len(c.want) == 0 {
				continue
			}
			if !reflect.DeepEqual(got, c.want) {
				t.Errorf("Dirs(%q) = %q, want %q", c.prefix, got, c.want)
			}
		}
		top, err := s.Dirs(ctx, "")
		if err != nil {
			t.Fatal(err)
		}
		for _, d := range []string{"dirs", "dirsx"} {
			if !contains(top, d) {
				t.Errorf("Dirs(\"\") = %q, misses %s", top, d)
			}
		}
		for _, bad := range []string{"dirs", "../", "dirs//"} {
			if _, err := s.Dirs(ctx, bad); !errors.Is(err, ErrKey) {
				t.Errorf("Dirs(%q): err = %v, want ErrKey", bad, err)
			}
		}
	})

	t.Run("invalid keys", func(t *testing.T) {
		for _, k := range badKeys {
			if err := s.Put(ctx, k, []byte("x")); !errors.Is(err, ErrKey) {
				t.Errorf("Put(%q): err = %v, want ErrKey", k, err)
			}
			if _, err := s.Get(ctx, k); !errors.Is(err, ErrKey) {
				t.Errorf("Get(%q): err = %v, want ErrKey", k, err)
			}
			if err := s.Delete(ctx, k); !errors.Is(err, ErrKey) {
				t.Errorf("Delete(%q): err = %v, want ErrKey", k, err)
			}
		}
		if _, err := s.List(ctx, "../"); !errors.Is(err, ErrKey) {
			t.Errorf("List(../): err = %v, want ErrKey", err)
		}
	})

	t.Run("atomic overwrite", func(t *testing.T) {
		// Writers replace one key with uniform values; every read must see
		// one whole value, never a mix or a truncated file.
		const n = 256 << 10
		vals := [][]byte{bytes.Repeat([]byte{'a'}, n), bytes.Repeat([]byte{'b'}, n/2)}
		if err := s.Put(ctx, "atomic/v", vals[0]); err != nil {
			t.Fatal(err)
		}
		var wg sync.WaitGroup
		errc := make(chan error, 64)
		for w := 0; w < 2; w++ {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for i := 0; i < 15; i++ {
					if err := s.Put(ctx, "atomic/v", vals[(w+i)%2]); err != nil {
						errc <- err
						return
					}
				}
			}()
		}
		for r := 0; r < 2; r++ {
			wg.Add(1)
			go func() {
				defer wg.Done()
				for i := 0; i < 30; i++ {
					got, err := s.Get(ctx, "atomic/v")
					if err != nil {
						errc <- err
						return
					}
					if !bytes.Equal(got, vals[0]) && !bytes.Equal(got, vals[1]) {
						errc <- fmt.Errorf("read a torn value of %d bytes", len(got))
						return
					}
				}
			}()
		}
		wg.Wait()
		close(errc)
		for err := range errc {
			t.Error(err)
		}
	})
}

var badKeys = []string{
	"", "/abs", "a/", "a//b", "./a", "a/./b", "../x", "a/../../x", "a/..", "..",
	"a\\b", "a\x00b", "a/.sluice-tmp-123",
}

func contains(list []string, s string) bool {
	for _, v := range list {
		if v == s {
			return true
		}
	}
	return false
}

func TestLocalConformance(t *testing.T) {
	dir := t.TempDir()
	s, err := NewLocal(filepath.Join(dir, "store"))
	if err != nil {
		t.Fatal(err)
	}
	conformance(t, s)
	// Nothing escaped the root, and no temporary file was left behind.
	entries, _ := os.ReadDir(dir)
	if len(entries) != 1 || entries[0].Name() != "store" {
		t.Errorf("files outside the store root: %v", entries)
	}
	filepath.WalkDir(s.Root(), func(p string, d fs.DirEntry, err error) error {
		if err == nil && strings.Contains(d.Name(), tempMarker) {
			t.Errorf("temporary file left behind: %s", p)
		}
		return nil
	})
}

func TestLocalListSkipsTemporaryFiles(t *testing.T) {
	s, err := NewLocal(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if err := s.Put(ctx, "a/x", []byte("1")); err != nil {
		t.Fatal(err)
	}
	// A crash between CreateTemp and Rename leaves such a file.
	if err := os.WriteFile(filepath.Join(s.Root(), "a", tempMarker+"999"), []byte("partial"), 0o644); err != nil {
		t.Fatal(err)
	}
	got, err := s.List(ctx, "a/")
	if err != nil || !reflect.DeepEqual(got, []string{"a/x"}) {
		t.Fatalf("List = %q, %v; want [a/x]", got, err)
	}
}

func TestLocalDirectoryIsNotAValue(t *testing.T) {
	s, err := NewLocal(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	if err := s.Put(ctx, "d/v", []byte("1")); err != nil {
		t.Fatal(err)
	}
	if _, err := s.Stat(ctx, "d"); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("Stat of a directory: %v, want fs.ErrNotExist", err)
	}
	if ok, _ := Exists(ctx, s, "d"); ok {
		t.Error("Exists reports a directory as a value")
	}
	if err := s.Delete(ctx, "d"); err == nil {
		t.Error("Delete of a directory succeeded")
	}
}

func TestCheckKey(t *testing.T) {
	for _, k := range badKeys {
		if CheckKey(k) == nil {
			t.Errorf("CheckKey(%q) accepted", k)
		}
	}
	for _, k := range []string{"a", "campaigns/c1/steps/0001/volume.zarr/.zarray", "a/b.c/..d", "x/0/1/2", ".zattrs"} {
		if err := CheckKey(k); err != nil {
			t.Errorf("CheckKey(%q): %v", k, err)
		}
	}
}

// FuzzCheckKey checks that any accepted key names a path strictly inside the
// store root, with the same segments (nothing cleaned away).
func FuzzCheckKey(f *testing.F) {
	for _, k := range append(badKeys, "a/b", "campaigns/c/steps/s/manifest.json", "...", "a/.../b") {
		f.Add(k)
	}
	root := filepath.FromSlash("/srv/store")
	f.Fuzz(func(t *testing.T, key string) {
		if CheckKey(key) != nil {
			return
		}
		if !fs.ValidPath(key) {
			t.Fatalf("accepted %q, which io/fs says is not a valid path", key)
		}
		p := filepath.Join(root, filepath.FromSlash(key))
		rel, err := filepath.Rel(root, p)
		if err != nil || rel == "." || rel == ".." || strings.HasPrefix(rel, "../") || filepath.ToSlash(rel) != key {
			t.Fatalf("key %q maps to %s (rel %q)", key, p, rel)
		}
	})
}

func TestOpenLocal(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	for _, loc := range []string{dir + "/plain", "file://" + dir + "/url", "file://localhost" + dir + "/host"} {
		s, err := Open(ctx, loc, Credentials{})
		if err != nil {
			t.Fatalf("Open(%s): %v", loc, err)
		}
		l, ok := s.(*Local)
		if !ok {
			t.Fatalf("Open(%s) = %T, want *Local", loc, s)
		}
		if fi, err := os.Stat(l.Root()); err != nil || !fi.IsDir() {
			t.Fatalf("Open(%s) did not make %s", loc, l.Root())
		}
	}
	for _, loc := range []string{"", "file://relative/path", "ftp://host/x", "s3://", "s3://user:pw@bucket/x",
		"s3://b?tls=maybe", "s3://b?colour=red", "s3://b/../x"} {
		if _, err := Open(ctx, loc, Credentials{}); err == nil {
			t.Errorf("Open(%q) accepted", loc)
		} else if strings.Contains(err.Error(), "pw") {
			t.Errorf("Open(%q) error shows the password: %v", loc, err)
		}
	}
}
