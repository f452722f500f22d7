package store

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"net"
	"net/url"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/minio/minio-go/v7"

	"sluice/internal/testenv"
)

// A directory the process may not write to gives a real EACCES: the Put
// fails at once (one attempt, reported as final), the error names the
// operation and the file, and errors.Is finds fs.ErrPermission through the
// Retrying store's wrapping.
func TestLocalPermissionDeniedIsPermanent(t *testing.T) {
	if testenv.Unprivileged(t) {
		return
	}
	dir := t.TempDir()
	l, err := NewLocal(dir)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.Chmod(dir, 0o555); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.Chmod(dir, 0o755) })
	var f failures
	r := WithRetry(l, RetryPolicy{First: time.Millisecond, Max: time.Millisecond, Budget: time.Minute}, f.record)
	err = r.Put(context.Background(), "campaigns/c/campaign.json", []byte("{}"))
	if !errors.Is(err, fs.ErrPermission) || !errors.Is(err, syscall.EACCES) {
		t.Fatalf("Put into a read-only directory: %v; want fs.ErrPermission (EACCES) in the chain", err)
	}
	if !IsPermanent(err) || IsTransient(err) {
		t.Errorf("EACCES classified transient: %v", err)
	}
	if n, final := f.count(); n != 1 || final != 1 {
		t.Errorf("read-only directory: %d attempts (%d final), want exactly 1, final", n, final)
	}
	msg := err.Error()
	for _, want := range []string{"put", filepath.Join(dir, "campaigns"), "permission denied", "not retried"} {
		if !strings.Contains(msg, want) {
			t.Errorf("error %q does not name %q", msg, want)
		}
	}
	if strings.Contains(msg, "\n") {
		t.Errorf("error is not one line: %q", msg)
	}
	t.Logf("read-only directory: %v", err)
}

// A full device gives a real ENOSPC (/dev/full always answers so); wrapped
// as the local store wraps system errors, it is permanent. So is a
// read-only file system and a quota, and a refused connection or a timeout
// is transient.
func TestClassifySystemErrors(t *testing.T) {
	l := &Local{root: "/data"}
	full, err := os.OpenFile("/dev/full", os.O_WRONLY, 0)
	if err != nil {
		t.Skipf("no /dev/full: %v", err)
	}
	_, werr := full.Write([]byte("chunk"))
	full.Close()
	if !errors.Is(werr, syscall.ENOSPC) {
		t.Fatalf("write to /dev/full: %v, want ENOSPC", werr)
	}
	// A refused connection: listen, note the port, close, dial.
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := ln.Addr().String()
	ln.Close()
	_, refused := net.Dial("tcp", addr)
	if !errors.Is(refused, syscall.ECONNREFUSED) {
		t.Fatalf("dial of a closed port: %v, want ECONNREFUSED", refused)
	}
	// A timeout: a deadline already past.
	_, timeout := net.DialTimeout("tcp", addr, time.Nanosecond)
	var ne net.Error
	if !errors.As(timeout, &ne) || !ne.Timeout() {
		t.Fatalf("dial with a past deadline: %v, want a timeout", timeout)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()

	for _, c := range []struct {
		name               string
		err                error
		permanent, refused bool
	}{
		{"ENOSPC from /dev/full", l.osErr("put", "/data/x", werr), true, true},
		{"EROFS", l.osErr("put", "/data/x", &fs.PathError{Op: "open", Path: "/data/x", Err: syscall.EROFS}), true, true},
		{"EDQUOT", l.osErr("put", "/data/x", &fs.PathError{Op: "write", Path: "/data/x", Err: syscall.EDQUOT}), true, true},
		{"EPERM", l.osErr("put", "/data/x", &os.LinkError{Op: "rename", Old: "a", New: "b", Err: syscall.EPERM}), true, true},
		{"ENOTDIR", l.osErr("put", "/data/x/y", &fs.PathError{Op: "mkdir", Path: "/data/x", Err: syscall.ENOTDIR}), true, false},
		{"missing key", notFound("get", "file:///data/", "k"), true, false},
		{"invalid key", CheckKey("../k"), true, false},
		{"cancelled", fmt.Errorf("store: get k: %w", ctx.Err()), true, false},
		{"connection refused", fmt.Errorf("store: get k: %w", &url.Error{Op: "Get", URL: "http://" + addr, Err: refused}), false, false},
		{"timeout", fmt.Errorf("store: get k: %w", timeout), false, false},
		{"unknown", errors.New("store: get k: something odd"), false, false},
	} {
		if got := IsPermanent(c.err); got != c.permanent {
			t.Errorf("%s: IsPermanent(%v) = %v, want %v", c.name, c.err, got, c.permanent)
		}
		if got := IsTransient(c.err); got == c.permanent {
			t.Errorf("%s: IsTransient(%v) = %v, want %v", c.name, c.err, got, !c.permanent)
		}
		if got := IsRefused(c.err); got != c.refused {
			t.Errorf("%s: IsRefused(%v) = %v, want %v", c.name, c.err, got, c.refused)
		}
	}
	if IsPermanent(nil) || IsTransient(nil) {
		t.Error("nil classified as an error")
	}
}

// S3 replies by status and code. The codes and statuses are those of the
// S3 API reference (Error Responses, "List of error codes", recalled from
// memory) and MinIO's own XMinioServerNotInitialized / XMinioStorageFull.
func TestClassifyS3Replies(t *testing.T) {
	s := &S3{where: "s3://b/", creds: Credentials{AccessKey: "AKIAEXAMPLE", SecretKey: "secret-example"}}
	for _, c := range []struct {
		code               string
		status             int
		permanent, refused bool
	}{
		{"AccessDenied", 403, true, true},
		{"InvalidAccessKeyId", 403, true, true},
		{"SignatureDoesNotMatch", 403, true, true},
		{"NoSuchBucket", 404, true, true},
		{"XMinioStorageFull", 507, true, true},
		{"EntityTooLarge", 400, true, false},
		{"InternalError", 500, false, false},
		{"SlowDown", 503, false, false},
		{"XMinioServerNotInitialized", 503, false, false},
		{"ServiceUnavailable", 503, false, false},
		{"RequestTimeout", 400, false, false},
		{"", 502, false, false},
		{"", 429, false, false},
	} {
		err := s.err("put", "k", minio.ErrorResponse{Code: c.code, StatusCode: c.status, Message: c.code})
		if got := IsPermanent(err); got != c.permanent {
			t.Errorf("%s (%d): IsPermanent = %v, want %v (%v)", c.code, c.status, got, c.permanent, err)
		}
		if got := IsRefused(err); got != c.refused {
			t.Errorf("%s (%d): IsRefused = %v, want %v (%v)", c.code, c.status, got, c.refused, err)
		}
	}
}

// The scrubbed error of the S3 client never shows a credential or a URL
// signature, yet unwraps to the client's error, so the classification and
// errors.Is/As see the refused connection inside.
func TestScrubbedErrorUnwraps(t *testing.T) {
	const access, secret = "AKIA-sluice-test-01", "sluice-secret-key-do-not-print"
	s := &S3{where: "s3://b/p/", creds: Credentials{AccessKey: access, SecretKey: secret}}
	inner := &url.Error{Op: "Get",
		URL: "http://h:9/b/p/k?X-Amz-Credential=" + access + "%2F20260101&X-Amz-Signature=0123abcd",
		Err: &net.OpError{Op: "dial", Net: "tcp", Err: os.NewSyscallError("connect", syscall.ECONNREFUSED)}}
	client := fmt.Errorf("request with key %s and secret %s failed:\n%w", access, secret, inner)
	err := fmt.Errorf("worker: tile 3: %w", s.err("get", "k", client))
	msg := err.Error()
	for _, bad := range []string{access, secret, "0123abcd", "\n"} {
		if strings.Contains(msg, bad) {
			t.Errorf("scrubbed error shows %q: %s", bad, msg)
		}
	}
	if !strings.Contains(msg, "store: get s3://b/p/k") || !strings.Contains(msg, redacted) {
		t.Errorf("scrubbed error lost its context: %s", msg)
	}
	var ue *url.Error
	if !errors.Is(err, syscall.ECONNREFUSED) || !errors.As(err, &ue) || ue != inner {
		t.Errorf("scrubbed error does not unwrap to the client's: %v", err)
	}
	if !IsTransient(err) {
		t.Errorf("refused connection behind a scrubbed error classified permanent")
	}
}

// Against a real MinIO server: a wrong secret key is answered 403
// (SignatureDoesNotMatch). Opening the store fails with a permanent error;
// an operation through a Retrying store fails after exactly one attempt,
// reported as final, and the error shows no key. A Retrying store over a
// stopped server keeps retrying (IsTransient) — see
// TestRetryingRidesOutRestart.
func TestS3WrongSecretFailsAtOnce(t *testing.T) {
	m := testenv.StartMinIO(t)
	ctx := context.Background()
	good := Credentials{Secret(m.AccessKey), Secret(m.SecretKey)}
	if _, err := Open(ctx, m.URL("wrong-secret"), good); err != nil {
		t.Fatal(err)
	}
	const wrongSecret = "wrong-secret-key-sluice-42"
	bad := Credentials{Secret(m.AccessKey), wrongSecret}

	_, err := Open(ctx, m.URL("wrong-secret"), bad)
	var r minio.ErrorResponse
	if err == nil || !IsPermanent(err) || !errors.As(err, &r) || r.StatusCode != 403 {
		t.Fatalf("Open with a wrong secret: %v (status %d); want a permanent 403", err, r.StatusCode)
	}

	cfg := S3Config{Endpoint: m.Endpoint, Bucket: "wrong-secret", AccessKey: bad.AccessKey, SecretKey: bad.SecretKey}
	s, err := newS3Client(cfg)
	if err != nil {
		t.Fatal(err)
	}
	var f failures
	rs := WithRetry(s, RetryPolicy{First: time.Millisecond, Max: time.Millisecond, Budget: time.Minute}, f.record)
	for _, op := range []struct {
		name string
		do   func() error
	}{
		{"put", func() error { return rs.Put(ctx, "campaigns/c/x.json", []byte("x")) }},
		{"get", func() error { _, err := rs.Get(ctx, "campaigns/c/x.json"); return err }},
		{"list", func() error { _, err := rs.List(ctx, "campaigns/"); return err }},
	} {
		f = failures{}
		err := op.do()
		r = minio.ErrorResponse{}
		if !errors.As(err, &r) || r.StatusCode != 403 || !IsPermanent(err) {
			t.Errorf("%s with a wrong secret: %v (status %d); want a permanent 403", op.name, err, r.StatusCode)
		}
		if n, final := f.count(); n != 1 || final != 1 {
			t.Errorf("%s with a wrong secret: %d attempts (%d final), want exactly 1, final", op.name, n, final)
		}
		if err != nil && (strings.Contains(err.Error(), wrongSecret) || !strings.Contains(err.Error(), "not retried")) {
			t.Errorf("%s: %v", op.name, err)
		}
		t.Logf("%s with a wrong secret: %v", op.name, err)
	}

	// A bucket that was never made (or was deleted under a running
	// service) is a refusal, not a missing key.
	gone, err := newS3Client(S3Config{Endpoint: m.Endpoint, Bucket: "never-made", AccessKey: good.AccessKey, SecretKey: good.SecretKey})
	if err != nil {
		t.Fatal(err)
	}
	f = failures{}
	_, err = WithRetry(gone, RetryPolicy{First: time.Millisecond, Max: time.Millisecond, Budget: time.Minute}, f.record).Get(ctx, "campaigns/c/x.json")
	if errors.Is(err, fs.ErrNotExist) || !IsRefused(err) {
		t.Errorf("Get from a missing bucket: %v; want a refusal, not a missing key", err)
	}
	if n, final := f.count(); n != 1 || final != 1 {
		t.Errorf("Get from a missing bucket: %d attempts (%d final), want exactly 1, final", n, final)
	}
	t.Logf("missing bucket: %v", err)
}
