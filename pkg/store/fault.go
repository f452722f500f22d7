package store

import (
	"context"
	"errors"
	"io/fs"
	"net"
	"net/http"
	"syscall"

	"github.com/minio/minio-go/v7"
)

// Store errors fall in two classes. A permanent error is one no retry can
// cure: the store has answered (a missing key, an invalid key), the caller
// has given up (a cancelled context), or the store refuses the work until
// someone changes something (access denied, wrong keys, a missing bucket,
// a full or read-only file system). Every other error is transient: refused
// connections, timeouts, resets and server errors (5xx, SlowDown, a server
// still initialising) are what an object-store restart or overload looks
// like, and an error of unknown kind is retried rather than given up.
//
// Classification follows the error chain (errors.Is/As), so it sees
// through every layer that wraps with %w, including the scrubbed S3
// errors below.

// IsPermanent reports whether err is a store error that retrying cannot
// cure. A nil error is not permanent.
func IsPermanent(err error) bool {
	if err == nil {
		return false
	}
	if errors.Is(err, fs.ErrNotExist) || errors.Is(err, ErrKey) || errors.Is(err, context.Canceled) {
		return true
	}
	var ne net.Error
	if errors.As(err, &ne) && ne.Timeout() {
		return false
	}
	var r minio.ErrorResponse
	if errors.As(err, &r) {
		return permanentResponse(r)
	}
	if errors.Is(err, fs.ErrPermission) { // EACCES, EPERM
		return true
	}
	var errno syscall.Errno
	if errors.As(err, &errno) {
		switch errno {
		case syscall.ENOSPC, syscall.EDQUOT, syscall.EROFS, syscall.EFBIG,
			syscall.ENOTDIR, syscall.EISDIR, syscall.ENAMETOOLONG:
			return true
		}
	}
	return false
}

// IsRefused reports whether err is the store refusing work of every kind
// until someone changes something: access denied or wrong keys (S3 401/403,
// EACCES, EPERM), a missing bucket, a full, over-quota or read-only file
// system (507, ENOSPC, EDQUOT, EROFS). Every refusal is permanent. Other
// permanent errors (a missing or invalid key, a name too long, a value too
// large) concern one object, not the store. A service meeting a refusal
// stops with that one line rather than blaming the task at hand, which
// another process may yet complete.
func IsRefused(err error) bool {
	if err == nil {
		return false
	}
	var r minio.ErrorResponse
	if errors.As(err, &r) {
		switch r.Code {
		case "AccessDenied", "InvalidAccessKeyId", "SignatureDoesNotMatch", "NoSuchBucket",
			"AllAccessDisabled", "AccountProblem", "XMinioStorageFull":
			return true
		}
		return r.StatusCode == http.StatusUnauthorized || r.StatusCode == http.StatusForbidden ||
			r.StatusCode == http.StatusInsufficientStorage
	}
	if errors.Is(err, fs.ErrPermission) {
		return true
	}
	var errno syscall.Errno
	if errors.As(err, &errno) {
		switch errno {
		case syscall.ENOSPC, syscall.EDQUOT, syscall.EROFS:
			return true
		}
	}
	return false
}

// IsTransient reports whether err is a store error that a retry may cure:
// every non-nil error that is not permanent.
func IsTransient(err error) bool { return err != nil && !IsPermanent(err) }

// permanentResponse classifies an S3 error reply: 4xx (refused requests:
// AccessDenied, InvalidAccessKeyId, SignatureDoesNotMatch, NoSuchBucket …)
// is permanent, 5xx (InternalError, SlowDown, a server not initialised) is
// transient, except where the code says otherwise.
func permanentResponse(r minio.ErrorResponse) bool {
	switch r.Code {
	case "SlowDown", "SlowDownRead", "SlowDownWrite", "RequestTimeout", "InternalError",
		"ServiceUnavailable", "XMinioServerNotInitialized", "OperationAborted":
		return false
	case "XMinioStorageFull", "NotImplemented":
		return true
	}
	switch s := r.StatusCode; {
	case s == http.StatusRequestTimeout, s == http.StatusConflict, s == http.StatusTooManyRequests:
		return false
	case s == http.StatusInsufficientStorage, s == http.StatusNotImplemented:
		return true
	case s >= 500:
		return false
	case s >= 400:
		return true
	}
	// A reply without a status is an error the client made up before
	// sending (an invalid argument): no retry changes it.
	return r.StatusCode == 0 && r.Code != ""
}

// scrubbedError is an error of the S3 client whose text has the
// credentials and URL signatures removed. Unwrap returns the client's own
// error, so classification (IsPermanent, errors.As to a net.Error or
// minio.ErrorResponse) still works; only code that unwraps and prints the
// inner error by hand could show what Error hides.
type scrubbedError struct {
	msg string
	err error
}

func (e *scrubbedError) Error() string { return e.msg }
func (e *scrubbedError) Unwrap() error { return e.err }

// scrubErr wraps err so that its text shows no credential of c.
func (c Credentials) scrubErr(err error) error {
	if err == nil {
		return nil
	}
	return &scrubbedError{msg: c.scrub(err.Error()), err: err}
}
