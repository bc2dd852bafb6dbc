package arrowio

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"

	"golang.org/x/sync/errgroup"
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
	p, n, sum, err := writeTemp(path, write)
	if err != nil {
		return 0, "", err
	}
	if err := p.commit(background, ifAbsent); err != nil {
		return 0, "", err
	}
	return n, sum, nil
}

// writeDeferred is writeAtomic (replacing, not ifAbsent) that leaves
// putting the file in place to c; then, if not nil, runs with the byte
// count after it is.
func writeDeferred(path string, c *Commits, write func(io.Writer) error, then func(n int64)) (int64, string, error) {
	p, n, sum, err := writeTemp(path, write)
	if err != nil {
		return 0, "", err
	}
	var placed func()
	if then != nil {
		placed = func() { then(n) }
	}
	c.add(p, placed)
	return n, sum, nil
}

// pending is a temporary file, written, flushed and given its final
// permissions, that is not yet in place.
type pending struct {
	f         tempFile
	tmp, path string
	dir       string
}

// writeTemp writes the temporary file of path: everything of an atomic
// write but the commit. On error (or a panic in write) the temporary
// file is removed.
func writeTemp(path string, write func(io.Writer) error) (*pending, int64, string, error) {
	dir, name := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, 0, "", err
	}
	f, err := createTemp(dir, tempPattern(name))
	if err != nil {
		return nil, 0, "", pathError("create", path, bareErr(err))
	}
	p := &pending{f: f, tmp: f.Name(), path: path, dir: dir}
	done := false
	// Deferred so that a panic in write also removes the temporary file.
	defer func() {
		if !done {
			p.abandon()
		}
	}()

	bw := bufio.NewWriterSize(f, writeBufferSize)
	tw := newTeeWriter(bw)
	err = write(tw)
	// A failed write to the file is the root cause of whatever write then
	// reports (the Parquet writer's own message does not say which file).
	if tw.err != nil {
		return nil, 0, "", pathError("write", path, bareErr(tw.err))
	}
	if err != nil {
		return nil, 0, "", err
	}
	if err := bw.Flush(); err != nil {
		return nil, 0, "", pathError("write", path, bareErr(err))
	}
	if err := f.Chmod(outputMode); err != nil {
		return nil, 0, "", pathError("chmod", path, bareErr(err))
	}
	done = true
	return p, tw.n, tw.sum(), nil
}

// abandon closes and removes the temporary file, after an earlier error,
// which is the one returned.
func (p *pending) abandon() {
	_ = p.f.Close()
	os.Remove(p.tmp)
}

// commit syncs and closes the temporary file, puts it in place (rename,
// or with ifAbsent a hard link) and syncs the folder. On error nothing new
// is at path (see WriteFileAtomic for the one exception). When stop is
// done before the rename, the file is abandoned and commit returns
// context.Cause(stop).
func (p *pending) commit(stop context.Context, ifAbsent bool) (err error) {
	path := p.path
	placed := false
	// A panic (in a test seam) must not leave the temporary file behind.
	defer func() {
		if r := recover(); r != nil {
			if !placed {
				p.abandon()
			}
			panic(r)
		}
	}()
	if err := p.f.Sync(); err != nil {
		p.abandon()
		return pathError("sync", path, bareErr(err))
	}
	if err := p.f.Close(); err != nil {
		os.Remove(p.tmp)
		return pathError("close", path, bareErr(err))
	}
	if stop.Err() != nil {
		os.Remove(p.tmp)
		return context.Cause(stop)
	}
	if ifAbsent {
		if err := link(p.tmp, path); err != nil {
			os.Remove(p.tmp)
			err = bareErr(err)
			if linkUnsupported(err) {
				err = &classified{ErrNoConditionalCreate, fmt.Errorf("hard links not supported here: %w", err)}
			}
			return pathError("create", path, err)
		}
		placed = true
		// The name is linked; the temporary one is now only a second name.
		os.Remove(p.tmp)
	} else {
		if err := rename(p.tmp, path); err != nil {
			os.Remove(p.tmp)
			return pathError("rename", path, bareErr(err))
		}
		placed = true
	}
	// Without the folder sync the rename may not survive a crash. Keep the
	// promise that an error leaves nothing at path: a caller that treats
	// this file as a commit point must not find it after a failure.
	if err := syncDir(p.dir); err != nil {
		os.Remove(path)
		return pathError("sync dir", path, err)
	}
	return nil
}

// Commits lets local atomic writes return before their files are in
// place. A write given a Commits (WriteOptions.Commits) writes, flushes
// and hashes its temporary file as usual; the fsync, rename and folder
// sync that put the file in place then run on another goroutine, so the
// caller can go on with its next file instead of waiting for the disk.
// At most limit commits run at a time; a write that would start one more
// waits for a slot, holding its temporary file open. Writes to an object
// store are not deferred: their upload is their commit.
//
// A deferred file is in place, whole, only once Wait has returned nil;
// until then it may be missing, and a failed commit leaves nothing at its
// path, as a failed atomic write does. Call Wait exactly once, after the
// last write, on error paths too, so that no commit runs on after the
// caller returns.
type Commits struct {
	g      errgroup.Group
	ctx    context.Context
	cancel context.CancelCauseFunc
}

// NewCommits returns a Commits running at most limit commits at a time
// (at least 1), and a context derived from ctx that is cancelled, with
// the failure as its cause, when a commit fails: give it to the work that
// writes the files, so that it stops. A file whose commit finds that
// context done before its rename is not put in place: its temporary file
// is removed, and the commit fails with the context's cause.
func NewCommits(ctx context.Context, limit int) (*Commits, context.Context) {
	ctx, cancel := context.WithCancelCause(ctx)
	c := &Commits{ctx: ctx, cancel: cancel}
	c.g.SetLimit(max(limit, 1))
	return c, ctx
}

func (c *Commits) add(p *pending, then func()) {
	c.g.Go(func() error {
		if err := p.commit(c.ctx, false); err != nil {
			c.cancel(err)
			return err
		}
		if then != nil {
			then()
		}
		return nil
	})
}

// Wait waits for every commit handed over and returns the first error.
func (c *Commits) Wait() error {
	err := c.g.Wait()
	c.cancel(context.Canceled)
	return err
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
