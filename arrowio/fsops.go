package arrowio

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
)

// ReadFile reads a small whole file (job files, manifests, statistics).
func ReadFile(path string) ([]byte, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("read %s: %w", path, unwrapPath(err))
	}
	return b, nil
}

// ListDir returns the names in a directory, and false when it does not
// exist.
func ListDir(path string) ([]string, bool, error) {
	entries, err := os.ReadDir(path)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, false, nil
	}
	if err != nil {
		return nil, false, fmt.Errorf("list %s: %w", path, unwrapPath(err))
	}
	names := make([]string, len(entries))
	for i, e := range entries {
		names[i] = e.Name()
	}
	return names, true, nil
}

// MkdirAll creates a directory and its parents.
func MkdirAll(path string) error {
	if err := os.MkdirAll(path, 0o755); err != nil {
		return fmt.Errorf("create directory %s: %w", path, unwrapPath(err))
	}
	return nil
}

// Remove deletes one file; a file that is already gone is not an error.
func Remove(path string) error {
	if err := os.Remove(path); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return fmt.Errorf("remove %s: %w", path, unwrapPath(err))
	}
	return nil
}

// Exists reports whether a path exists.
func Exists(path string) (bool, error) {
	_, err := os.Stat(path)
	switch {
	case err == nil:
		return true, nil
	case errors.Is(err, fs.ErrNotExist):
		return false, nil
	default:
		return false, fmt.Errorf("stat %s: %w", path, unwrapPath(err))
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
