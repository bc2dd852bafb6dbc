package arrowio

import (
	"errors"
	"fmt"
	"io/fs"
	"path/filepath"
)

// ResolvePath returns the absolute path of p with symbolic links resolved.
// For a path that does not exist yet, the nearest existing ancestor is
// resolved and the missing tail joined back on, so that an output about to
// be created can be compared with an input.
//
// An s3:// location is returned cleaned ("s3://b/x/../y" is "s3://b/y"),
// and a file:// location resolves as its path.
func ResolvePath(loc string) (string, error) {
	if IsRemote(loc) {
		return Join(loc), nil
	}
	_, p, err := Locate(loc)
	if err != nil {
		return "", err
	}
	abs, err := filepath.Abs(p)
	if err != nil {
		return "", fmt.Errorf("resolve %s: %w", p, err)
	}
	tail := ""
	for dir := abs; ; dir = filepath.Dir(dir) {
		real, err := filepath.EvalSymlinks(dir)
		if err == nil {
			return filepath.Join(real, tail), nil
		}
		if !errors.Is(err, fs.ErrNotExist) {
			return "", fmt.Errorf("resolve %s: %w", p, unwrapPath(err))
		}
		if parent := filepath.Dir(dir); parent == dir {
			return abs, nil
		}
		tail = filepath.Join(filepath.Base(dir), tail)
	}
}
