package volio

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
)

// Sentinel errors. Every error returned by this package for a file or key is
// a *FileError whose Unwrap gives one of these (or an fs error such as
// fs.ErrNotExist), so callers can test with errors.Is.
var (
	// ErrTruncated: the input ends before the data its header promises.
	ErrTruncated = errors.New("volio: truncated input")
	// ErrFormat: the input is not in a format this package reads, or its
	// header or metadata contradict themselves.
	ErrFormat = errors.New("volio: bad format")
	// ErrTooLarge: the volume or slab exceeds the voxel limit.
	ErrTooLarge = errors.New("volio: volume too large")
)

// FileError is a one-line error naming a file (or store key) and the problem:
//
//	volio: scan.raw: truncated raw volume: got 1048576 of 2097152 bytes
type FileError struct {
	Path string // file, directory or store key
	Msg  string // what is wrong, without the path
	Err  error  // sentinel or underlying error (Unwrap)
}

func (e *FileError) Error() string { return "volio: " + e.Path + ": " + e.Msg }

// Unwrap returns the sentinel or underlying error.
func (e *FileError) Unwrap() error { return e.Err }

func fileErr(path string, kind error, format string, args ...any) error {
	return &FileError{Path: path, Msg: fmt.Sprintf(format, args...), Err: kind}
}

// osErr turns an error from package os into a FileError that names path once
// and still unwraps to fs.ErrNotExist and friends.
func osErr(path string, err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return &FileError{Path: path, Msg: pe.Op + ": " + pe.Err.Error(), Err: err}
	}
	var le *os.LinkError
	if errors.As(err, &le) {
		return &FileError{Path: path, Msg: le.Op + ": " + le.Err.Error(), Err: err}
	}
	return &FileError{Path: path, Msg: err.Error(), Err: err}
}
