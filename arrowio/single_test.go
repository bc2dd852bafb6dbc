package arrowio

import (
	"os"
	"path/filepath"
	"testing"
)

func TestDiscoverInput(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "k=v", "part-0.parquet")
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, []byte("PAR1"), 0o644); err != nil {
		t.Fatal(err)
	}
	one, err := DiscoverInput(path)
	if err != nil || len(one) != 1 || one[0].Rel != "part-0.parquet" || one[0].Size != 4 || one[0].Partition != nil {
		t.Fatalf("file: %+v, %v", one, err)
	}
	all, err := DiscoverInput(dir)
	if err != nil || len(all) != 1 || all[0].Rel != "k=v/part-0.parquet" {
		t.Fatalf("folder: %+v, %v", all, err)
	}
	if _, err := DiscoverInput(filepath.Join(dir, "missing")); err == nil {
		t.Fatal("missing path: no error")
	}
}
