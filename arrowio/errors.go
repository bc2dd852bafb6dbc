package arrowio

import (
	"errors"
	"io/fs"
)

// Sentinels for errors.Is. Errors returned by this package wrap them and
// also name the operation and the path, in the form "op path: err".
var (
	// ErrNoInputs is returned by Discover when root holds no Parquet file.
	ErrNoInputs = errors.New("no parquet files found")

	// ErrNotParquet marks a file that is too short, lacks the Parquet magic
	// bytes or has a footer that cannot be decoded (for example a truncated
	// or foreign file). Operating-system read errors do not carry it.
	ErrNotParquet = errors.New("not a parquet file")

	// ErrBadPartition marks a Hive partition segment that cannot be parsed,
	// such as one with an empty key ("=b").
	ErrBadPartition = errors.New("bad partition segment")
)

// pathError returns err annotated with op and path as "op path: err". An
// error that already is an *fs.PathError for the same path (as returned by
// package os) is returned unchanged so the path is not repeated.
func pathError(op, path string, err error) error {
	if pe, ok := err.(*fs.PathError); ok && pe.Path == path {
		return err
	}
	return &fs.PathError{Op: op, Path: path, Err: err}
}

// classified keeps the text of err but also matches sentinel in errors.Is:
// the library's message stays readable ("parquet: ...") while callers can
// still test for the class.
type classified struct {
	sentinel error
	err      error
}

func (c *classified) Error() string   { return c.err.Error() }
func (c *classified) Unwrap() []error { return []error{c.sentinel, c.err} }

// ErrExist is what a refused create-only-if-absent write (CreateFile)
// wraps: fs.ErrExist, re-exported so that callers need not import io/fs.
var ErrExist = fs.ErrExist
