package arrowio

import (
	"errors"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
)

// makeTree creates empty files (and their folders) under root.
func makeTree(t *testing.T, root string, files ...string) {
	t.Helper()
	for _, f := range files {
		p := filepath.Join(root, filepath.FromSlash(f))
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, []byte(f), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// TestDiscover walks a tree with flat files, Hive folders two deep, a
// plain folder, ignored '_' and '.' names and non-Parquet files. The
// expected list is written out by hand.
func TestDiscover(t *testing.T) {
	root := t.TempDir()
	makeTree(t, root,
		"part-1.parquet",
		"part-0.parquet",
		"site=b/day=2/part-0.parquet",
		"site=a/day=10/part-0.parquet",
		"site=a/day=2/part-1.parquet",
		"site=a/day=2/part-0.parquet",
		"site=a%2Fx/day=1/p.parquet", // escaped '/' in a value
		"raw/site=c/p.parquet",       // plain folder above a partition
		"a-b.parquet",                // sorts before "a/..." in byte order
		"a/x.parquet",
		"_SUCCESS",
		"_tmp/site=z/p.parquet",
		".hidden/p.parquet",
		"site=a/day=2/.p.parquet.tmp-123",
		"site=a/day=2/_p.parquet",
		"site=a/notes.txt",
		"site=a/day=2/p.parquet.crc",
		"site=a/day=2/P.PARQUET",
	)
	if err := os.Mkdir(filepath.Join(root, "empty.parquet"), 0o755); err != nil { // a folder, not a file
		t.Fatal(err)
	}
	files, err := Discover(root)
	if err != nil {
		t.Fatal(err)
	}
	type want struct {
		rel  string
		part []KV
	}
	wants := []want{
		{"a-b.parquet", nil},
		{"a/x.parquet", nil},
		{"part-0.parquet", nil},
		{"part-1.parquet", nil},
		{"raw/site=c/p.parquet", []KV{{"site", "c"}}},
		{"site=a%2Fx/day=1/p.parquet", []KV{{"site", "a/x"}, {"day", "1"}}},
		{"site=a/day=10/part-0.parquet", []KV{{"site", "a"}, {"day", "10"}}},
		{"site=a/day=2/part-0.parquet", []KV{{"site", "a"}, {"day", "2"}}},
		{"site=a/day=2/part-1.parquet", []KV{{"site", "a"}, {"day", "2"}}},
		{"site=b/day=2/part-0.parquet", []KV{{"site", "b"}, {"day", "2"}}},
	}
	var got []string
	for _, f := range files {
		got = append(got, f.Rel)
	}
	var wantRel []string
	for _, w := range wants {
		wantRel = append(wantRel, w.rel)
	}
	if !slices.Equal(got, wantRel) {
		t.Fatalf("Rel list:\n got %q\nwant %q", got, wantRel)
	}
	for i, f := range files {
		if !slices.Equal(f.Partition, wants[i].part) {
			t.Errorf("%s: partition %v, want %v", f.Rel, f.Partition, wants[i].part)
		}
		if wantAbs := filepath.Join(root, filepath.FromSlash(f.Rel)); f.Abs != wantAbs || !filepath.IsAbs(f.Abs) {
			t.Errorf("%s: Abs %s, want %s", f.Rel, f.Abs, wantAbs)
		}
		if f.Size != int64(len(f.Rel)) || f.ModTime.IsZero() {
			t.Errorf("%s: size %d mod %v", f.Rel, f.Size, f.ModTime)
		}
	}
}

// TestDiscoverSymlinks checks that a symlinked root is walked but links
// below it are not followed.
func TestDiscoverSymlinks(t *testing.T) {
	real := t.TempDir()
	outside := t.TempDir()
	makeTree(t, real, "site=a/p.parquet")
	makeTree(t, outside, "site=x/q.parquet", "lone.parquet")
	if err := os.Symlink(outside, filepath.Join(real, "linked")); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink(filepath.Join(outside, "lone.parquet"), filepath.Join(real, "lone.parquet")); err != nil {
		t.Fatal(err)
	}
	root := filepath.Join(t.TempDir(), "root")
	if err := os.Symlink(real, root); err != nil {
		t.Fatal(err)
	}
	files, err := Discover(root)
	if err != nil {
		t.Fatal(err)
	}
	if len(files) != 1 || files[0].Rel != "site=a/p.parquet" || files[0].Abs != filepath.Join(root, "site=a", "p.parquet") {
		t.Fatalf("files = %+v, want only site=a/p.parquet under the link", files)
	}
}

// TestDiscoverErrors checks the error cases and their wording.
func TestDiscoverErrors(t *testing.T) {
	dir := t.TempDir()
	missing := filepath.Join(dir, "nope")
	if _, err := Discover(missing); !errors.Is(err, fs.ErrNotExist) || !strings.Contains(err.Error(), missing) {
		t.Errorf("missing root: %v", err)
	}
	file := filepath.Join(dir, "f.parquet")
	makeTree(t, dir, "f.parquet")
	if _, err := Discover(file); err == nil || err.Error() != "discover "+file+": not a directory" {
		t.Errorf("file root: %v", err)
	}
	empty := filepath.Join(dir, "empty")
	makeTree(t, empty, "_ignored/p.parquet", "notes.txt")
	if _, err := Discover(empty); !errors.Is(err, ErrNoInputs) || err.Error() != "discover "+empty+": no parquet files found" {
		t.Errorf("empty root: %v", err)
	}
	bad := filepath.Join(dir, "bad")
	makeTree(t, bad, "site=a/=2/p.parquet")
	_, err := Discover(bad)
	if !errors.Is(err, ErrBadPartition) || !strings.HasPrefix(err.Error(), "discover "+filepath.Join(bad, "site=a", "=2", "p.parquet")+": ") {
		t.Errorf("empty key: %v", err)
	}
}

// TestParsePartition covers splitting and Hive unescaping, including
// malformed escapes, which stand for themselves.
func TestParsePartition(t *testing.T) {
	cases := []struct {
		rel  string
		want []KV
	}{
		{"p.parquet", nil},
		{"site=a/p.parquet", []KV{{"site", "a"}}},
		{"x/site=a/y/day=2/p.parquet", []KV{{"site", "a"}, {"day", "2"}}},
		{"k=/p.parquet", []KV{{"k", ""}}},
		{"k=a=b/p.parquet", []KV{{"k", "a=b"}}},
		{"k%3Dx=v%3d1/p.parquet", []KV{{"k=x", "v=1"}}},
		{"k=100%/p.parquet", []KV{{"k", "100%"}}},
		{"k=%zz%4/p.parquet", []KV{{"k", "%zz%4"}}},
		{"k=%41%42%43/p.parquet", []KV{{"k", "ABC"}}},
		{"site=a/day=2.parquet", []KV{{"site", "a"}}}, // the file name is not a partition
		{"site=a/site=b/p.parquet", []KV{{"site", "a"}, {"site", "b"}}},
	}
	for _, c := range cases {
		got, err := ParsePartition(c.rel)
		if err != nil || !slices.Equal(got, c.want) {
			t.Errorf("ParsePartition(%q) = %v, %v; want %v", c.rel, got, err, c.want)
		}
	}
	for _, rel := range []string{"=a/p.parquet", "site=a/=/p.parquet", "%3D=x/=y/p"} {
		_, err := ParsePartition(rel)
		if !errors.Is(err, ErrBadPartition) || !strings.HasPrefix(err.Error(), "parse partition "+rel+": ") {
			t.Errorf("ParsePartition(%q) err = %v", rel, err)
		}
	}
	if s := FormatPartition([]KV{{"site", "a/b"}, {"day", "1=2%"}}); s != "site=a%2Fb/day=1%3D2%25" {
		t.Errorf("FormatPartition = %q", s)
	}
}

// FuzzParsePartition checks that ParsePartition never panics, that every
// key it returns is non-empty, and the round trip FormatPartition then
// ParsePartition gives the same segments back.
func FuzzParsePartition(f *testing.F) {
	for _, s := range []string{"site=a/day=2/p.parquet", "k%3D=v%2F/p", "=x/p", "a/b/c", "%", "k=%4", "x=%ff/y=\x00/p"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, rel string) {
		kvs, err := ParsePartition(rel)
		if err != nil {
			if !errors.Is(err, ErrBadPartition) {
				t.Fatalf("error %v does not wrap ErrBadPartition", err)
			}
			return
		}
		for _, kv := range kvs {
			if kv.Key == "" {
				t.Fatalf("empty key from %q", rel)
			}
		}
		if len(kvs) == 0 {
			return
		}
		formatted := FormatPartition(kvs)
		back, err := ParsePartition(formatted + "/f.parquet")
		if err != nil || !slices.Equal(back, kvs) {
			t.Fatalf("round trip of %q via %q: %v, %v", rel, formatted, back, err)
		}
		if strings.Count(formatted, "/") != len(kvs)-1 {
			t.Fatalf("FormatPartition(%v) = %q splits wrongly", kvs, formatted)
		}
	})
}
