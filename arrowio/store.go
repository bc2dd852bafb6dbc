package arrowio

import (
	"context"
	"errors"
	"fmt"
	"io"
	"path"
	"path/filepath"
	"strings"
	"sync"
	"time"
)

// Store is the storage one lakescale location lives on: a local disk or an
// S3-compatible object store. Keys are what the backend names objects by:
// operating-system paths on local disk, object keys (slash-separated,
// without the bucket) on S3. The package-level functions (Open, Discover,
// WriteFileAtomic, ...) take locations and pick the Store and key with
// Locate. A Store's errors name the object the way a user would write it
// (a path, or s3://bucket/key) in the form "op object: err", and keep
// fs.ErrNotExist and fs.ErrExist matchable with errors.Is.
//
// A Store is safe for concurrent use.
type Store interface {
	// Stat describes the object at key; a missing object gives an error
	// wrapping fs.ErrNotExist.
	Stat(ctx context.Context, key string) (ObjectInfo, error)

	// List returns every object below the folder dir (recursively), with
	// Key relative to dir and slash-separated, sorted by Key in byte
	// order. A folder that does not exist or holds nothing gives an empty
	// list and no error.
	List(ctx context.Context, dir string) ([]ObjectInfo, error)

	// Open opens the object at key for ranged reads.
	Open(ctx context.Context, key string) (Object, error)

	// Write stores what write produces as the object at key, whole or
	// not at all: readers see the old object (or none) until Write
	// returns nil. It returns the byte count and SHA-256 (lowercase hex)
	// of what was stored. With ifAbsent the object is created only if key
	// does not exist; otherwise Write fails with an error wrapping
	// fs.ErrExist and the existing object is left as it was. On any error
	// nothing new is left at key (on local disk, a folder that cannot be
	// synced after the rename also loses the old file; see
	// WriteFileAtomic). A store that cannot create conditionally at all
	// says so with an error wrapping ErrNoConditionalCreate.
	Write(ctx context.Context, key string, ifAbsent bool, write func(io.Writer) error) (n int64, sum string, err error)

	// Delete removes the object at key; a missing object is not an error.
	Delete(ctx context.Context, key string) error
}

// ObjectInfo describes one stored object.
type ObjectInfo struct {
	Key     string // as the method documents: full for Stat, relative for List
	Size    int64
	ModTime time.Time
}

// Object is an open object. ReadAt may be called concurrently.
type Object interface {
	io.ReaderAt
	io.Closer
	Size() int64
	// Version identifies the version opened, for noticing that an object
	// was replaced between two reads: the ETag on S3, the modification
	// time in nanoseconds on local disk.
	Version() string
}

// wholeChunkReader is implemented by objects that are cheaper to read in a
// few large ranges than in many small ones (remote objects); Open then
// reads each Parquet column chunk in one request.
type wholeChunkReader interface{ preferWholeChunks() }

// Scheme prefixes of locations.
const (
	schemeFile = "file://"
	schemeS3   = "s3://"
)

// IsRemote reports whether a location names an object store (s3://).
func IsRemote(loc string) bool { return strings.HasPrefix(loc, schemeS3) }

// S3Options configure the S3 backend. Set them (SetS3Options) before the
// first s3:// location is used.
type S3Options struct {
	// Endpoint is the URL of an S3-compatible service; empty means the
	// SDK's default (AWS, or AWS_ENDPOINT_URL from the environment).
	Endpoint string
	// PathStyle addresses buckets as ENDPOINT/bucket/key instead of
	// bucket.ENDPOINT/key, as most S3-compatible stores require.
	PathStyle bool
	// Region overrides the SDK's region chain when not empty.
	Region string
}

var (
	s3mu      sync.Mutex
	s3opts    S3Options
	s3buckets = map[string]Store{}
	// newS3Store builds the Store of one bucket; set by s3.go.
	newS3Store func(ctx context.Context, bucket string, opts S3Options) (Store, error)
)

// SetS3Options sets the options of every S3 store created afterwards and
// forgets stores created before.
func SetS3Options(o S3Options) {
	s3mu.Lock()
	defer s3mu.Unlock()
	s3opts = o
	s3buckets = map[string]Store{}
}

// Locate returns the Store of a location and the key within it:
//
//	s3://bucket/prefix/key  the S3 backend for bucket, key "prefix/key"
//	file:///abs/path        the local disk, key "/abs/path"
//	anything else           the local disk, the location itself as key
func Locate(loc string) (Store, string, error) {
	if err := CheckLocation(loc); err != nil {
		return nil, "", err
	}
	switch {
	case strings.HasPrefix(loc, schemeS3):
		bucket, key, _ := strings.Cut(strings.TrimPrefix(loc, schemeS3), "/")
		st, err := bucketStore(bucket)
		if err != nil {
			return nil, "", fmt.Errorf("%s: %w", loc, err)
		}
		return st, strings.TrimSuffix(key, "/"), nil
	case strings.HasPrefix(loc, schemeFile):
		return Local, filepath.FromSlash(strings.TrimPrefix(loc, schemeFile)), nil
	}
	return Local, loc, nil
}

// ErrBadLocation marks a location Locate cannot use: an unknown scheme,
// an s3:// location without a bucket, a file:// URL without an absolute
// path.
var ErrBadLocation = errors.New("bad location")

// CheckLocation checks the form of a location without touching storage;
// errors wrap ErrBadLocation and name the location.
func CheckLocation(loc string) error {
	switch {
	case strings.HasPrefix(loc, schemeS3):
		bucket, key, _ := strings.Cut(strings.TrimPrefix(loc, schemeS3), "/")
		if bucket == "" {
			return fmt.Errorf("%s: %w: want s3://bucket/key", loc, ErrBadLocation)
		}
		// Object keys are names, not paths: "a/../b" is a key of its own,
		// which would escape the checks that compare cleaned locations.
		if key = strings.TrimSuffix(key, "/"); key != "" && !plainKey(key) {
			return fmt.Errorf("%s: %w: empty, \".\" or \"..\" segment in the key", loc, ErrBadLocation)
		}
	case strings.HasPrefix(loc, schemeFile):
		if p := strings.TrimPrefix(loc, schemeFile); !strings.HasPrefix(p, "/") {
			return fmt.Errorf("%s: %w: want file:///absolute/path", loc, ErrBadLocation)
		}
	case strings.Contains(loc, "://"):
		scheme, _, _ := strings.Cut(loc, "://")
		return fmt.Errorf("%s: %w: unsupported scheme %q (want a path, file:// or s3://)", loc, ErrBadLocation, scheme)
	}
	return nil
}

func bucketStore(bucket string) (Store, error) {
	s3mu.Lock()
	defer s3mu.Unlock()
	if st, ok := s3buckets[bucket]; ok {
		return st, nil
	}
	if newS3Store == nil {
		return nil, errors.New("S3 support is not built in")
	}
	st, err := newS3Store(context.Background(), bucket, s3opts)
	if err != nil {
		return nil, err
	}
	s3buckets[bucket] = st
	return st, nil
}

// Join joins a location and slash-separated path elements: with '/' for
// s3:// and file:// locations, with the operating system's separator for
// plain paths.
func Join(loc string, elem ...string) string {
	if rest, ok := strings.CutPrefix(loc, schemeS3); ok {
		// The bucket is the root: ".." stops there instead of naming
		// another bucket.
		bucket, key, _ := strings.Cut(rest, "/")
		joined := strings.TrimPrefix(path.Join(append([]string{"/" + key}, elem...)...), "/")
		if joined == "" {
			return schemeS3 + bucket
		}
		return schemeS3 + bucket + "/" + joined
	}
	for _, scheme := range []string{schemeFile} {
		if rest, ok := strings.CutPrefix(loc, scheme); ok {
			parts := append([]string{rest}, elem...)
			joined := path.Join(parts...)
			if scheme == schemeFile && !strings.HasPrefix(joined, "/") {
				joined = "/" + joined
			}
			return scheme + joined
		}
	}
	parts := append([]string{loc}, elem...)
	for i := range parts[1:] {
		parts[i+1] = filepath.FromSlash(parts[i+1])
	}
	return filepath.Join(parts...)
}

// Dir returns all but the last element of a location, as filepath.Dir
// does for paths.
func Dir(loc string) string {
	for _, scheme := range []string{schemeS3, schemeFile} {
		if rest, ok := strings.CutPrefix(loc, scheme); ok {
			trimmed := strings.TrimSuffix(rest, "/")
			d := path.Dir(trimmed)
			switch {
			case trimmed == "": // file:/// is the root
				return loc
			case d == ".": // a bucket has no parent
				d = trimmed
			}
			return scheme + d
		}
	}
	return filepath.Dir(loc)
}

// background is the context of storage calls made by functions that take
// none: small reads and writes of metadata files. The SDK bounds each
// request with its own retries and timeouts.
var background = context.Background()

// readAll reads a whole object through a Store.
func readAll(ctx context.Context, st Store, key string) ([]byte, error) {
	obj, err := st.Open(ctx, key)
	if err != nil {
		return nil, err
	}
	b := make([]byte, obj.Size())
	_, err = obj.ReadAt(b, 0)
	if errors.Is(err, io.EOF) && len(b) == 0 {
		err = nil
	}
	if cerr := obj.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return nil, err
	}
	return b, nil
}

// HasScheme reports whether loc is a URI (file:// or s3://, or an
// unsupported scheme that Locate will refuse) rather than a plain path.
func HasScheme(loc string) bool { return strings.Contains(loc, "://") }

// plainKey reports whether a slash-separated key has no empty, "." or
// ".." segment, so that it names the same object before and after
// Join's cleaning.
func plainKey(key string) bool {
	for seg := range strings.SplitSeq(key, "/") {
		if seg == "" || seg == "." || seg == ".." {
			return false
		}
	}
	return true
}
