package arrowio

import (
	"context"
	"errors"
	"io/fs"
	"os"
	"path"
	"path/filepath"
)

// RemoveTemps deletes leftover temporary files of earlier runs under root
// (regular files named like ".<name>.tmp-<random>", the names the atomic
// writers use) and reports how many it removed. Symbolic links below
// root are not followed. A missing root holds no temporary files and is not an error.
//
// On an object store, where writes leave no temporary objects, it removes
// objects with such names (a start-up probe of a killed run) and aborts
// the incomplete multipart uploads below root, where the store can list
// them.
func RemoveTemps(loc string) (int, error) {
	st, root, err := Locate(loc)
	if err != nil {
		return 0, err
	}
	if st != Local {
		return removeRemoteTemps(st, root)
	}
	if _, err := os.Lstat(root); errors.Is(err, fs.ErrNotExist) {
		return 0, nil
	}
	// filepath.WalkDir does not enter a root that is a symbolic link.
	walkRoot, err := filepath.EvalSymlinks(root)
	if err != nil {
		return 0, err
	}
	n := 0
	err = filepath.WalkDir(walkRoot, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if !d.Type().IsRegular() || !IsTempName(d.Name()) {
			return nil
		}
		if err := os.Remove(p); err != nil && !errors.Is(err, fs.ErrNotExist) {
			return err
		}
		n++
		return nil
	})
	return n, err
}

// uploadAborter is implemented by stores whose interrupted uploads leave
// state behind (S3 multipart uploads).
type uploadAborter interface {
	abortUploads(ctx context.Context, prefix string) (int, error)
}

// RemoveEmptyDirs removes the empty folders below a local root (deepest
// first; root itself stays), which an uncommitted run's removed outputs
// leave behind. Object stores have no folders; there it does nothing.
func RemoveEmptyDirs(loc string) error {
	st, root, err := Locate(loc)
	if err != nil || st != Local {
		return err
	}
	walkRoot, err := filepath.EvalSymlinks(root)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return pathError("clean", loc, unwrapPath(err))
	}
	var dirs []string
	err = filepath.WalkDir(walkRoot, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() && p != walkRoot {
			dirs = append(dirs, p)
		}
		return nil
	})
	if err != nil {
		return pathError("clean", loc, unwrapPath(err))
	}
	// WalkDir visits parents before children; remove in reverse.
	for i := len(dirs) - 1; i >= 0; i-- {
		entries, err := os.ReadDir(dirs[i])
		if err == nil && len(entries) == 0 {
			if err := os.Remove(dirs[i]); err != nil && !errors.Is(err, fs.ErrNotExist) {
				return pathError("clean", dirs[i], unwrapPath(err))
			}
		}
	}
	return nil
}

// removeRemoteTemps is RemoveTemps on an object store.
func removeRemoteTemps(st Store, root string) (int, error) {
	objs, err := st.List(background, root)
	if err != nil {
		return 0, err
	}
	n := 0
	for _, o := range objs {
		if IsTempName(path.Base(o.Key)) {
			key := o.Key
			if root != "" {
				key = root + "/" + o.Key
			}
			if err := st.Delete(background, key); err != nil {
				return n, err
			}
			n++
		}
	}
	if a, ok := st.(uploadAborter); ok {
		m, err := a.abortUploads(background, root)
		return n + m, err
	}
	return n, nil
}
