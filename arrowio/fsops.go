package arrowio

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"strings"
)

// ReadFile reads a small whole file (job files, manifests, statistics).
func ReadFile(loc string) ([]byte, error) {
	st, key, err := Locate(loc)
	if err != nil {
		return nil, err
	}
	if st == Local {
		b, err := os.ReadFile(key)
		if err != nil {
			return nil, fmt.Errorf("read %s: %w", loc, unwrapPath(err))
		}
		return b, nil
	}
	return readAll(background, st, key)
}

// ListDir returns the names directly inside a folder (files and folders),
// and false when it does not exist. On an object store a folder exists
// when some object's key lies below it.
func ListDir(loc string) ([]string, bool, error) {
	st, key, err := Locate(loc)
	if err != nil {
		return nil, false, err
	}
	if st != Local {
		objs, err := st.List(background, key)
		if err != nil {
			return nil, false, err
		}
		var names []string
		for _, o := range objs {
			first, _, _ := strings.Cut(o.Key, "/")
			if len(names) == 0 || names[len(names)-1] != first {
				names = append(names, first)
			}
		}
		return names, len(objs) > 0, nil
	}
	entries, err := os.ReadDir(key)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, false, nil
	}
	if err != nil {
		return nil, false, fmt.Errorf("list %s: %w", loc, unwrapPath(err))
	}
	names := make([]string, len(entries))
	for i, e := range entries {
		names[i] = e.Name()
	}
	return names, true, nil
}

// MkdirAll creates a folder and its parents. Object stores have no
// folders; there it does nothing.
func MkdirAll(loc string) error {
	st, key, err := Locate(loc)
	if err != nil || st != Local {
		return err
	}
	if err := os.MkdirAll(key, 0o755); err != nil {
		return fmt.Errorf("create directory %s: %w", loc, unwrapPath(err))
	}
	return nil
}

// Remove deletes one file; a file that is already gone is not an error.
func Remove(loc string) error {
	st, key, err := Locate(loc)
	if err != nil {
		return err
	}
	return st.Delete(background, key)
}

// Exists reports whether a file exists (on local disk: any path).
func Exists(loc string) (bool, error) {
	st, key, err := Locate(loc)
	if err != nil {
		return false, err
	}
	_, err = st.Stat(background, key)
	switch {
	case err == nil:
		return true, nil
	case errors.Is(err, fs.ErrNotExist):
		return false, nil
	default:
		return false, err
	}
}

// unwrapPath drops the *fs.PathError layer so that the path is not
// repeated: our errors already say "op path: ".
func unwrapPath(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}
