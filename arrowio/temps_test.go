package arrowio

import (
	"io"
	"os"
	"path/filepath"
	"slices"
	"testing"
)

// TestRemoveTemps leaves a temporary file the way a crashed writer would
// (created through the same seam and pattern) and checks that RemoveTemps
// deletes exactly those names.
func TestRemoveTemps(t *testing.T) {
	root := t.TempDir()
	keep := []string{"site=a/p.parquet", "site=a/.hidden", "manifest.json", "x.tmp-1", ".tmp-2"}
	makeTree(t, root, keep...)
	var leftovers []string
	for _, p := range []string{"site=a/p.parquet", "manifest.json", "site=b/day=1/q.parquet"} {
		path := filepath.Join(root, filepath.FromSlash(p))
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			t.Fatal(err)
		}
		f, err := createTemp(filepath.Dir(path), tempPattern(filepath.Base(path)))
		if err != nil {
			t.Fatal(err)
		}
		io.WriteString(f, "partial")
		f.Close()
		leftovers = append(leftovers, f.Name())
	}
	n, err := RemoveTemps(root)
	if err != nil || n != len(leftovers) {
		t.Fatalf("RemoveTemps = %d, %v; want %d", n, err, len(leftovers))
	}
	for _, p := range leftovers {
		if _, err := os.Stat(p); !os.IsNotExist(err) {
			t.Errorf("%s still there (%v)", p, err)
		}
	}
	for _, p := range keep {
		if _, err := os.Stat(filepath.Join(root, filepath.FromSlash(p))); err != nil {
			t.Errorf("%s was removed: %v", p, err)
		}
	}
	if n, err := RemoveTemps(filepath.Join(root, "missing")); n != 0 || err != nil {
		t.Errorf("missing root: %d, %v", n, err)
	}
	if !slices.Equal(listDir(t, filepath.Join(root, "site=b", "day=1")), nil) {
		t.Error("site=b/day=1 not empty")
	}
}
