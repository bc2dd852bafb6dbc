package arrowio

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
)

// tempFile is the part of *os.File the atomic writer uses.
type tempFile interface {
	io.Writer
	Name() string
	Chmod(fs.FileMode) error
	Sync() error
	Close() error
}

// Seams overridden by tests to inject failures.
var (
	createTemp = func(dir, pattern string) (tempFile, error) { return os.CreateTemp(dir, pattern) }
	rename     = os.Rename
	link       = os.Link
	syncDir    = fsyncDir
)

// tempPattern is the os.CreateTemp pattern for a temporary sibling of a file
// called name; RemoveTemps recognises the names it produces.
func tempPattern(name string) string { return "." + name + ".tmp-*" }

// IsTempName reports whether a base name is one of the temporary names
// this package writes (and RemoveTemps removes): a file being written
// (tempPattern), or a start-up probe (CheckConditionalCreate).
func IsTempName(name string) bool {
	ok, _ := filepath.Match(".?*.tmp-*", name)
	return ok
}

// outputMode is the permission of committed files (os.CreateTemp uses 0600).
const outputMode fs.FileMode = 0o644

// writeBufferSize batches the many small writes of callers (and page
// headers of the Parquet writer) into fewer system calls.
const writeBufferSize = 256 << 10

// WriteFileAtomic writes a file at path atomically through write: the
// bytes go to a temporary file ".<name>.tmp-*" in the same folder, which is
// synced, closed and renamed over path, after which the folder is synced
// (on an object store, one upload that appears whole or not at all).
// Missing parent folders are created. On any error nothing new appears at
// path and an existing file there is left as it was, with one exception
// on local disk: when the folder cannot be synced after the rename, the
// new file is removed again, so that a caller treating it as a commit
// point does not find it, and the old one is gone too. Errors from write
// are returned annotated with "write path".
func WriteFileAtomic(path string, write func(io.Writer) error) error {
	return writeFile(path, modeReplace, write)
}

// CreateFile is WriteFileAtomic that succeeds only if nothing exists at
// path: of two writers of the same path at most one succeeds, and the
// other gets an error wrapping fs.ErrExist. A dataset commits by creating
// its manifest this way. On local disk the temporary file is hard-linked
// to path (link(2) fails when path exists); on S3 the upload carries
// If-None-Match: *.
func CreateFile(path string, write func(io.Writer) error) error {
	return writeFile(path, modeCreate, write)
}

// CreateFileUnchecked is CreateFile on a store that may not carry out
// create-only-if-absent writes (the user opted out of the start-up check):
// it first checks that nothing exists at path (a store that ignores the
// condition would otherwise replace what is there), then creates it
// conditionally, and where the store cannot do that (ErrNoConditionalCreate:
// a store that rejects If-None-Match, a file system without hard links)
// writes it with WriteFileAtomic, calling write a second time. Another
// writer could race the check.
func CreateFileUnchecked(path string, write func(io.Writer) error) error {
	return writeFile(path, modeCreateUnchecked, write)
}

// createUnchecked is Store.Write with ifAbsent, falling back as
// CreateFileUnchecked describes; loc names the object in errors.
func createUnchecked(st Store, key, loc string, write func(io.Writer) error) (int64, string, error) {
	if _, err := st.Stat(background, key); err == nil {
		return 0, "", pathError("create", loc, fs.ErrExist)
	} else if !errors.Is(err, fs.ErrNotExist) {
		return 0, "", err
	}
	n, sum, err := st.Write(background, key, true, write)
	if errors.Is(err, ErrNoConditionalCreate) {
		return st.Write(background, key, false, write)
	}
	return n, sum, err
}

// How writeFile writes: replacing, creating only if absent, or creating
// as CreateFileUnchecked does.
type writeMode int

const (
	modeReplace writeMode = iota
	modeCreate
	modeCreateUnchecked
)

func writeFile(path string, mode writeMode, write func(io.Writer) error) error {
	st, key, err := Locate(path)
	if err != nil {
		return err
	}
	named := func(w io.Writer) error {
		if err := write(w); err != nil {
			return pathError("write", path, err)
		}
		return nil
	}
	if mode == modeCreateUnchecked {
		_, _, err = createUnchecked(st, key, path, named)
	} else {
		_, _, err = st.Write(background, key, mode == modeCreate, named)
	}
	return err
}

// writeAtomic is the one atomic-write helper behind every local output. It
// returns the number of bytes written and their SHA-256, computed on the
// way to the file. write's errors are returned as they are, unless writing
// to the file failed, in which case that failure is returned. With
// ifAbsent the temporary file is hard-linked to path instead of renamed
// over it, which fails (wrapping fs.ErrExist) when path exists.
func writeAtomic(path string, ifAbsent bool, write func(io.Writer) error) (n int64, sum string, err error) {
	dir, name := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return 0, "", err
	}
	f, err := createTemp(dir, tempPattern(name))
	if err != nil {
		return 0, "", pathError("create", path, bareErr(err))
	}
	tmp := f.Name()
	closed, committed := false, false
	// Deferred so that a panic in write also removes the temporary file.
	defer func() {
		if committed {
			return
		}
		if !closed {
			_ = f.Close() // cleanup after an earlier error, which is the one returned
		}
		os.Remove(tmp)
	}()

	bw := bufio.NewWriterSize(f, writeBufferSize)
	tw := newTeeWriter(bw)
	err = write(tw)
	// A failed write to the file is the root cause of whatever write then
	// reports (the Parquet writer's own message does not say which file).
	if tw.err != nil {
		return 0, "", pathError("write", path, bareErr(tw.err))
	}
	if err != nil {
		return 0, "", err
	}
	if err := bw.Flush(); err != nil {
		return 0, "", pathError("write", path, bareErr(err))
	}
	if err := f.Chmod(outputMode); err != nil {
		return 0, "", pathError("chmod", path, bareErr(err))
	}
	if err := f.Sync(); err != nil {
		return 0, "", pathError("sync", path, bareErr(err))
	}
	closed = true
	if err := f.Close(); err != nil {
		return 0, "", pathError("close", path, bareErr(err))
	}
	if ifAbsent {
		if err := link(tmp, path); err != nil {
			err = bareErr(err)
			if linkUnsupported(err) {
				err = &classified{ErrNoConditionalCreate, fmt.Errorf("hard links not supported here: %w", err)}
			}
			return 0, "", pathError("create", path, err)
		}
		committed = true
		// The name is linked; the temporary one is now only a second name.
		os.Remove(tmp)
	} else {
		if err := rename(tmp, path); err != nil {
			return 0, "", pathError("rename", path, bareErr(err))
		}
		committed = true
	}
	// Without the folder sync the rename may not survive a crash. Keep the
	// promise that an error leaves nothing at path: a caller that treats
	// this file as a commit point must not find it after a failure.
	if err := syncDir(dir); err != nil {
		os.Remove(path)
		return 0, "", pathError("sync dir", path, err)
	}
	return tw.n, tw.sum(), nil
}

// bareErr strips the *fs.PathError or *os.LinkError wrapper that package os
// puts around errors on the temporary file, whose name means nothing to
// the caller; the final path is added instead.
func bareErr(err error) error {
	switch e := err.(type) {
	case *fs.PathError:
		if strings.Contains(filepath.Base(e.Path), ".tmp-") {
			return e.Err
		}
	case *os.LinkError:
		return e.Err
	}
	return err
}
