package arrowio

import (
	"context"
	"errors"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
)

// Local is the Store of the local disk (and network file systems mounted
// on it). Keys are operating-system paths. Writes go to a temporary
// sibling ".<name>.tmp-*" that is synced and then renamed over the key, or,
// for a create-if-absent write, hard-linked to it: link(2) fails when the
// name exists, which makes the create atomic on every POSIX file system
// (NFS included, where O_EXCL historically was not).
var Local Store = localStore{}

type localStore struct{}

func (localStore) Stat(_ context.Context, key string) (ObjectInfo, error) {
	st, err := os.Stat(key)
	if err != nil {
		return ObjectInfo{}, pathError("stat", key, unwrapPath(err))
	}
	return ObjectInfo{Key: key, Size: st.Size(), ModTime: st.ModTime()}, nil
}

// List walks dir without following symbolic links below it (dir itself may
// be one) and returns its regular files.
func (localStore) List(_ context.Context, dir string) ([]ObjectInfo, error) {
	if _, err := os.Stat(dir); errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	walkRoot, err := filepath.EvalSymlinks(dir)
	if err != nil {
		return nil, pathError("list", dir, unwrapPath(err))
	}
	var out []ObjectInfo
	err = filepath.WalkDir(walkRoot, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if !d.Type().IsRegular() {
			return nil
		}
		rel, err := filepath.Rel(walkRoot, p)
		if err != nil {
			return err
		}
		info, err := d.Info()
		if err != nil {
			return err
		}
		out = append(out, ObjectInfo{Key: filepath.ToSlash(rel), Size: info.Size(), ModTime: info.ModTime()})
		return nil
	})
	if err != nil {
		return nil, pathError("list", dir, unwrapPath(err))
	}
	slices.SortFunc(out, func(a, b ObjectInfo) int { return strings.Compare(a.Key, b.Key) })
	return out, nil
}

func (localStore) Open(_ context.Context, key string) (Object, error) {
	f, err := os.Open(key)
	if err != nil {
		return nil, err // *fs.PathError: "open key: ..."
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, pathError("open", key, unwrapPath(err))
	}
	if st.IsDir() {
		f.Close()
		return nil, pathError("open", key, errors.New("is a directory"))
	}
	return &localObject{File: f, size: st.Size(), mtime: st.ModTime().UnixNano()}, nil
}

type localObject struct {
	*os.File
	size  int64
	mtime int64
}

func (o *localObject) Size() int64 { return o.size }

func (o *localObject) Version() string { return strconv.FormatInt(o.mtime, 10) }

func (localStore) Write(_ context.Context, key string, ifAbsent bool, write func(io.Writer) error) (int64, string, error) {
	return writeAtomic(key, ifAbsent, write)
}

func (localStore) Delete(_ context.Context, key string) error {
	if err := os.Remove(key); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return pathError("remove", key, unwrapPath(err))
	}
	return nil
}

// isDir reports whether a local path is a folder (following links).
func isDir(p string) bool {
	st, err := os.Stat(p)
	return err == nil && st.IsDir()
}
