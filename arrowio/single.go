package arrowio

import (
	"errors"
	"io/fs"
	"path"
	"path/filepath"
	"strings"
)

// DiscoverInput is Discover for a folder, and for a single Parquet file
// the one File whose Rel is its base name (without partition segments).
// On an object store a location is a single file when an object exists at
// exactly that key and its name ends in ".parquet".
func DiscoverInput(loc string) ([]File, error) {
	st, key, err := Locate(loc)
	if err != nil {
		return nil, err
	}
	if st != Local {
		if strings.HasSuffix(key, ".parquet") {
			info, err := st.Stat(background, key)
			if err == nil {
				return []File{{Rel: path.Base(key), Abs: loc, Size: info.Size, ModTime: info.ModTime}}, nil
			}
			if !errors.Is(err, fs.ErrNotExist) {
				return nil, err
			}
		}
		return Discover(loc)
	}
	info, err := Local.Stat(background, key)
	if err != nil {
		return nil, err
	}
	if isDir(key) {
		return Discover(loc)
	}
	abs, err := filepath.Abs(key)
	if err != nil {
		return nil, pathError("discover", loc, err)
	}
	return []File{{Rel: filepath.Base(key), Abs: abs, Size: info.Size, ModTime: info.ModTime}}, nil
}
