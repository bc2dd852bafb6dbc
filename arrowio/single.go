package arrowio

import (
	"os"
	"path/filepath"
)

// DiscoverInput is Discover for a folder, and for a single Parquet file
// the one File whose Rel is its base name (without partition segments).
func DiscoverInput(path string) ([]File, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, err
	}
	if st.IsDir() {
		return Discover(path)
	}
	abs, err := filepath.Abs(path)
	if err != nil {
		return nil, pathError("discover", path, err)
	}
	return []File{{Rel: filepath.Base(path), Abs: abs, Size: st.Size(), ModTime: st.ModTime()}}, nil
}
