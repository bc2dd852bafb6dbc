package arrowio

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

// TestWriteReadBackIndependent writes several row groups of int64,
// float64 (nulls, NaN, ±Inf, -0), string and int32 columns and reads them
// back with github.com/xitongsys/parquet-go, value by value.
func TestWriteReadBackIndependent(t *testing.T) {
	for _, c := range []Compression{Zstd, Snappy, None} {
		t.Run(string(c), func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			rows := mixedRows(2500)
			path := tempPath(t, "out.parquet")
			w := writeRows(t, mem, path, rows, 333, WriteOptions{Compression: c, RowGroupRows: 1000})
			if w.Rows != int64(len(rows)) {
				t.Errorf("Written.Rows = %d, want %d", w.Rows, len(rows))
			}
			n, cols := independentReadAll(t, path)
			if n != int64(len(rows)) {
				t.Fatalf("independent reader: %d rows, want %d", n, len(rows))
			}
			checkMixed(t, cols, rows)

			r, err := Open(path, mem)
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			if r.NumRowGroups() != 3 {
				t.Errorf("row groups = %d, want 3 (2500 rows, at most 1000 per group)", r.NumRowGroups())
			}
			if !r.Schema().Equal(mixedSchema) {
				t.Errorf("schema read back:\n%v\nwant\n%v", r.Schema(), mixedSchema)
			}
		})
	}
}

func independentReadAll(t *testing.T, path string) (int64, [][]any) {
	n, _, cols := independentRead(t, path)
	return n, cols
}

// TestWriteDeterministic writes the same data twice: the files must be
// byte-identical, and Written.SHA256 must equal both HashFile and
// crypto/sha256 over the bytes on disk.
func TestWriteDeterministic(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rows := mixedRows(3000)
	opts := WriteOptions{RowGroupRows: 1024, Metadata: map[string]string{"z": "last", "a": "first", "m": "middle"}}
	p1, p2 := tempPath(t, "one.parquet"), tempPath(t, "two.parquet")
	w1 := writeRows(t, mem, p1, rows, 500, opts)
	w2 := writeRows(t, mem, p2, rows, 500, opts)
	b1, err := os.ReadFile(p1)
	if err != nil {
		t.Fatal(err)
	}
	b2, err := os.ReadFile(p2)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(b1, b2) {
		t.Fatalf("two writes of the same data differ (%d and %d bytes)", len(b1), len(b2))
	}
	if w1 != w2 {
		t.Errorf("Written differs: %+v and %+v", w1, w2)
	}
	sum := sha256.Sum256(b1) // crypto/sha256, independent of the tee writer
	if want := hex.EncodeToString(sum[:]); w1.SHA256 != want {
		t.Errorf("Written.SHA256 = %s, crypto/sha256 of file = %s", w1.SHA256, want)
	}
	if w1.Bytes != int64(len(b1)) {
		t.Errorf("Written.Bytes = %d, file has %d", w1.Bytes, len(b1))
	}
	n, h, err := HashFile(p1)
	if err != nil {
		t.Fatal(err)
	}
	if n != w1.Bytes || h != w1.SHA256 {
		t.Errorf("HashFile = %d %s, Written = %d %s", n, h, w1.Bytes, w1.SHA256)
	}
	if bytes.Contains(b1, []byte("parquet-go version")) {
		t.Error("footer carries the library's created_by, which changes with its version")
	}
}

// TestWriteEmpty checks that a fill that writes nothing commits a valid
// Parquet file with no rows, as github.com/xitongsys/parquet-go reads it.
func TestWriteEmpty(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	path := tempPath(t, "empty.parquet")
	w, err := WriteParquetAtomic(context.Background(), path, mixedSchema, WriteOptions{Mem: mem}, func(*pqarrow.FileWriter) error { return nil })
	if err != nil || w.Rows != 0 {
		t.Fatalf("Written %+v, %v", w, err)
	}
	pr := openIndependent(t, path)
	if pr.GetNumRows() != 0 || len(pr.SchemaHandler.ValueColumns) != 4 {
		t.Errorf("independent reader: %d rows, %d columns; want 0, 4", pr.GetNumRows(), len(pr.SchemaHandler.ValueColumns))
	}
	rows, schema, _, err := ReadFooter(path)
	if err != nil || rows != 0 || !schema.Equal(mixedSchema) {
		t.Errorf("ReadFooter: %d rows, %v, %v", rows, schema, err)
	}
}

// TestHashFileErrors checks that HashFile names the path it failed on.
func TestHashFileErrors(t *testing.T) {
	dir := t.TempDir()
	missing := filepath.Join(dir, "missing")
	if _, _, err := HashFile(missing); !errors.Is(err, fs.ErrNotExist) || !strings.Contains(err.Error(), missing) {
		t.Errorf("missing: %v", err)
	}
	if _, _, err := HashFile(dir); err == nil || !strings.HasPrefix(err.Error(), "open "+dir+": ") {
		t.Errorf("folder: %v", err)
	}
	empty := filepath.Join(dir, "e")
	if err := os.WriteFile(empty, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	// SHA-256 of the empty string, FIPS 180-4 test vector (from memory).
	if n, sum, err := HashFile(empty); err != nil || n != 0 || sum != "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855" {
		t.Errorf("empty: %d %s %v", n, sum, err)
	}
}

// TestCreateFile checks that a create-only-if-absent write refuses an
// existing file and leaves it unchanged, and that the local store passes
// the start-up probe.
func TestCreateFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "sub", "m.json")
	put := func(s string) error {
		return CreateFile(path, func(w io.Writer) error { _, err := io.WriteString(w, s); return err })
	}
	if err := put("one"); err != nil {
		t.Fatal(err)
	}
	if err := put("two"); !errors.Is(err, fs.ErrExist) || !strings.Contains(err.Error(), path) {
		t.Fatalf("second create: %v; want fs.ErrExist naming %s", err, path)
	}
	if b, _ := os.ReadFile(path); string(b) != "one" {
		t.Errorf("content %q after a refused create; want %q", b, "one")
	}
	entries, _ := os.ReadDir(filepath.Dir(path))
	if len(entries) != 1 {
		t.Errorf("folder holds %d entries after a refused create; want only the file", len(entries))
	}
	if err := CheckConditionalCreate(dir); err != nil {
		t.Fatal(err)
	}
	if names, _, _ := ListDir(dir); len(names) != 1 {
		t.Errorf("probe left behind: %v", names)
	}
}

// TestCheckConditionalCreateRefusesLinklessFS checks that a store whose
// create-if-absent fails for another reason (here: link(2) not permitted,
// as on file systems without hard links) fails the start-up probe.
func TestCheckConditionalCreateRefusesLinklessFS(t *testing.T) {
	defer func(old func(string, string) error) { link = old }(link)
	link = func(string, string) error { return &os.LinkError{Op: "link", Err: syscall.EPERM} }
	dir := t.TempDir()
	if err := CheckConditionalCreate(dir); !errors.Is(err, ErrNoConditionalCreate) || !strings.Contains(err.Error(), dir) {
		t.Fatalf("err = %v; want ErrNoConditionalCreate naming %s", err, dir)
	}
	if names, _, _ := ListDir(dir); len(names) != 0 {
		t.Errorf("left behind: %v", names)
	}
}

// Where link(2) is not permitted, CreateFile fails, and
// CreateFileUnchecked (and an unchecked lock) fall back to an existence
// check and a plain atomic write, still refusing an existing file.
func TestCreateFileUncheckedWithoutLinks(t *testing.T) {
	defer func(old func(string, string) error) { link = old }(link)
	link = func(string, string) error { return &os.LinkError{Op: "link", Err: syscall.EPERM} }
	dir := t.TempDir()
	path := filepath.Join(dir, "m.json")
	put := func(create func(string, func(io.Writer) error) error, s string) error {
		return create(path, func(w io.Writer) error { _, err := io.WriteString(w, s); return err })
	}
	if err := put(CreateFile, "one"); err == nil || errors.Is(err, fs.ErrExist) {
		t.Fatalf("CreateFile without links: %v; want the link failure", err)
	}
	if err := put(CreateFileUnchecked, "one"); err != nil {
		t.Fatal(err)
	}
	if err := put(CreateFileUnchecked, "two"); err == nil {
		t.Fatal("second unchecked create succeeded")
	}
	if b, _ := os.ReadFile(path); string(b) != "one" {
		t.Errorf("content %q, want %q", b, "one")
	}
	if names, _, _ := ListDir(dir); len(names) != 1 {
		t.Errorf("left behind: %v", names)
	}
	lockPath := filepath.Join(dir, "_lock")
	if _, _, err := AcquireLock(lockPath, time.Now(), false); err == nil {
		t.Fatal("checked lock without links succeeded")
	}
	l, _, err := AcquireLock(lockPath, time.Now(), true)
	if err != nil {
		t.Fatal(err)
	}
	if _, _, err := AcquireLock(lockPath, time.Now(), true); !errors.Is(err, ErrLocked) {
		t.Fatalf("second unchecked lock: %v, want ErrLocked", err)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
}
