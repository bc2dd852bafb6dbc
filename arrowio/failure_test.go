package arrowio

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

var errInjected = errors.New("injected failure")

// faultFile fails its failWrite-th Write or its Sync.
type faultFile struct {
	*os.File
	failWrite int // 1-based; 0 never
	failSync  bool
	writes    *int
}

func (f *faultFile) Write(p []byte) (int, error) {
	*f.writes++
	if *f.writes == f.failWrite {
		// Half the bytes land, as with a full disk.
		n, _ := f.File.Write(p[:len(p)/2])
		return n, &os.PathError{Op: "write", Path: f.Name(), Err: errInjected}
	}
	return f.File.Write(p)
}

func (f *faultFile) Sync() error {
	if f.failSync {
		return &os.PathError{Op: "sync", Path: f.Name(), Err: errInjected}
	}
	return f.File.Sync()
}

// fault describes one injected failure.
type fault struct {
	create, sync, rename, syncDir bool
	write                         int
}

// inject swaps the package seams for ones that fail as f says and counts
// writes into *writes; the originals come back at the end of the test.
func inject(t *testing.T, f fault, writes *int) {
	t.Helper()
	oldCreate, oldRename, oldSyncDir := createTemp, rename, syncDir
	t.Cleanup(func() { createTemp, rename, syncDir = oldCreate, oldRename, oldSyncDir })
	createTemp = func(dir, pattern string) (tempFile, error) {
		if f.create {
			return nil, &os.PathError{Op: "open", Path: filepath.Join(dir, pattern), Err: errInjected}
		}
		osf, err := os.CreateTemp(dir, pattern)
		if err != nil {
			return nil, err
		}
		return &faultFile{File: osf, failWrite: f.write, failSync: f.sync, writes: writes}, nil
	}
	rename = func(from, to string) error {
		if f.rename {
			return &os.LinkError{Op: "rename", Old: from, New: to, Err: errInjected}
		}
		return os.Rename(from, to)
	}
	syncDir = func(dir string) error {
		if f.syncDir {
			return errInjected
		}
		return fsyncDir(dir)
	}
}

// assertNothingLeft checks that dir holds neither the final file nor any
// temporary file.
func assertNothingLeft(t *testing.T, dir string) {
	t.Helper()
	if names := listDir(t, dir); len(names) != 0 {
		t.Fatalf("files left in %s after a failed write: %v", dir, names)
	}
}

// bigFloatSchema is the one-column schema of fillBigFloat.
var bigFloatSchema = arrow.NewSchema([]arrow.Field{{Name: "v", Type: arrow.PrimitiveTypes.Float64}}, nil)

// fillBigFloat writes 400,000 float64 values in four batches.
func fillBigFloat(mem memory.Allocator) func(fw *pqarrow.FileWriter) error {
	return func(fw *pqarrow.FileWriter) error {
		b := array.NewFloat64Builder(mem)
		defer b.Release()
		for batch := 0; batch < 4; batch++ {
			for i := 0; i < 100_000; i++ {
				b.Append(float64(batch*100_000+i) * 1.000001)
			}
			arr := b.NewArray()
			rec := array.NewRecord(bigFloatSchema, []arrow.Array{arr}, int64(arr.Len()))
			arr.Release()
			err := fw.Write(rec)
			rec.Release()
			if err != nil {
				return err
			}
		}
		return nil
	}
}

// bigFloatWrite writes enough float64 data for many writes to reach the
// file, so failures land inside the Parquet writer's page flushes and
// inside its footer.
func bigFloatWrite(ctx context.Context, mem memory.Allocator, path string) (Written, error) {
	opts := WriteOptions{Compression: None, RowGroupRows: 100_000, Mem: mem, Metadata: map[string]string{"k": strings.Repeat("m", 5000)}}
	return WriteParquetAtomic(ctx, path, bigFloatSchema, opts, fillBigFloat(mem))
}

// TestWriteParquetFailures fails each file write in turn, then the sync,
// the rename and the folder sync, and checks that every failure is
// reported, names the final path and leaves no file and no temporary.
func TestWriteParquetFailures(t *testing.T) {
	var total int
	inject(t, fault{}, &total)
	okDir := t.TempDir()
	w, err := bigFloatWrite(context.Background(), memory.DefaultAllocator, filepath.Join(okDir, "v.parquet"))
	if err != nil {
		t.Fatal(err)
	}
	if total < 5 {
		t.Fatalf("only %d writes reached the file (%d bytes); the test needs several", total, w.Bytes)
	}

	faults := []fault{{create: true}, {sync: true}, {rename: true}, {syncDir: true}}
	for n := 1; n <= total; n++ {
		faults = append(faults, fault{write: n})
	}
	for _, f := range faults {
		t.Run(fmt.Sprintf("%+v", f), func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			var writes int
			inject(t, f, &writes)
			dir := t.TempDir()
			path := filepath.Join(dir, "v.parquet")
			_, err := bigFloatWrite(context.Background(), mem, path)
			if !errors.Is(err, errInjected) {
				t.Fatalf("err = %v, want the injected failure", err)
			}
			if !strings.Contains(err.Error(), path) || strings.Contains(err.Error(), ".tmp-") {
				t.Errorf("error %q should name %s and not the temporary file", err, path)
			}
			assertNothingLeft(t, dir)
		})
	}
}

// TestWriteFileAtomicFailures does the same for WriteFileAtomic, and checks
// that an existing file at path survives a failed replacement.
func TestWriteFileAtomicFailures(t *testing.T) {
	payload := strings.Repeat("0123456789abcdef", 64<<10) // 1 MiB: several buffer flushes
	write := func(w io.Writer) error {
		for i := 0; i < len(payload); i += 1000 {
			if _, err := io.WriteString(w, payload[i:min(i+1000, len(payload))]); err != nil {
				return err
			}
		}
		return nil
	}
	var total int
	inject(t, fault{}, &total)
	if err := WriteFileAtomic(filepath.Join(t.TempDir(), "m.json"), write); err != nil {
		t.Fatal(err)
	}
	if total < 2 {
		t.Fatalf("only %d writes reached the file", total)
	}
	faults := []fault{{create: true}, {sync: true}, {rename: true}}
	for n := 1; n <= total; n++ {
		faults = append(faults, fault{write: n})
	}
	for _, f := range faults {
		t.Run(fmt.Sprintf("%+v", f), func(t *testing.T) {
			var writes int
			inject(t, f, &writes)
			dir := t.TempDir()
			path := filepath.Join(dir, "m.json")
			if err := os.WriteFile(path, []byte("old"), 0o644); err != nil {
				t.Fatal(err)
			}
			err := WriteFileAtomic(path, write)
			if !errors.Is(err, errInjected) || !strings.Contains(err.Error(), path) {
				t.Fatalf("err = %v, want the injected failure naming %s", err, path)
			}
			if names := listDir(t, dir); !slices.Equal(names, []string{"m.json"}) {
				t.Fatalf("files in %s: %v, want only the old m.json", dir, names)
			}
			if b, _ := os.ReadFile(path); string(b) != "old" {
				t.Fatalf("old file changed to %d bytes", len(b))
			}
		})
	}
}

// TestWriteFileAtomicCallbackError checks that the callback's error is
// returned with the path and that nothing is left behind.
func TestWriteFileAtomicCallbackError(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "sub", "m.json")
	boom := errors.New("boom")
	err := WriteFileAtomic(path, func(w io.Writer) error {
		io.WriteString(w, "partial")
		return boom
	})
	if !errors.Is(err, boom) || err.Error() != "write "+path+": boom" {
		t.Fatalf("err = %v, want %q", err, "write "+path+": boom")
	}
	assertNothingLeft(t, filepath.Join(dir, "sub"))
}

// TestWriteFileAtomicContent checks the committed bytes against what was
// written (compared with os.ReadFile) and the 0644 mode.
func TestWriteFileAtomicContent(t *testing.T) {
	path := filepath.Join(t.TempDir(), "a", "b", "m.json")
	want := "{\n  \"k\": 1\n}\n"
	if err := WriteFileAtomic(path, func(w io.Writer) error { _, err := io.WriteString(w, want); return err }); err != nil {
		t.Fatal(err)
	}
	got, err := os.ReadFile(path)
	if err != nil || string(got) != want {
		t.Fatalf("read back %q, %v; want %q", got, err, want)
	}
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	if st.Mode().Perm() != outputMode {
		t.Errorf("mode = %v, want %v", st.Mode().Perm(), outputMode)
	}
	if names := listDir(t, filepath.Dir(path)); !slices.Equal(names, []string{"m.json"}) {
		t.Errorf("files: %v", names)
	}
}

// TestWriteParquetCancelled cancels the context between two batches of the
// fill: the cause comes back unchanged and nothing is left behind.
func TestWriteParquetCancelled(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	cause := errors.New("operator asked to stop")
	ctx, cancel := context.WithCancelCause(context.Background())
	defer cancel(nil)
	dir := t.TempDir()
	rows := mixedRows(1000)
	batches := 0
	_, err := WriteParquetAtomic(ctx, filepath.Join(dir, "c.parquet"), mixedSchema, WriteOptions{Mem: mem}, func(fw *pqarrow.FileWriter) error {
		for lo := 0; lo < len(rows); lo += 100 {
			if err := ctx.Err(); err != nil {
				return err
			}
			rec := buildRecord(mem, rows[lo:lo+100])
			err := fw.Write(rec)
			rec.Release()
			if err != nil {
				return err
			}
			if batches++; batches == 3 {
				cancel(cause)
			}
		}
		return nil
	})
	if err != cause {
		t.Fatalf("err = %v, want the cancellation cause itself", err)
	}
	if batches != 3 {
		t.Errorf("fill wrote %d batches, want 3", batches)
	}
	assertNothingLeft(t, dir)

	// A context cancelled before the call creates nothing at all.
	_, err = WriteParquetAtomic(ctx, filepath.Join(dir, "d.parquet"), mixedSchema, WriteOptions{Mem: mem}, func(*pqarrow.FileWriter) error {
		t.Error("fill ran under a cancelled context")
		return nil
	})
	if err != cause {
		t.Fatalf("err = %v, want the cancellation cause", err)
	}
	assertNothingLeft(t, dir)
}

// TestWriteParquetFillError checks that fill's error is returned once
// annotated with the path and nothing is left behind; a fill that panics
// also leaves nothing behind and the panic still propagates.
func TestWriteParquetFillError(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	dir := t.TempDir()
	path := filepath.Join(dir, "e.parquet")
	boom := errors.New("scale column x: boom")
	_, err := WriteParquetAtomic(context.Background(), path, mixedSchema, WriteOptions{Mem: mem}, func(fw *pqarrow.FileWriter) error {
		rec := buildRecord(mem, mixedRows(10))
		defer rec.Release()
		if err := fw.Write(rec); err != nil {
			return err
		}
		return boom
	})
	if !errors.Is(err, boom) || err.Error() != "write "+path+": scale column x: boom" {
		t.Fatalf("err = %v", err)
	}
	assertNothingLeft(t, dir)

	func() {
		defer func() {
			if p := recover(); p != "fill bug" {
				t.Errorf("recovered %v, want the fill's panic", p)
			}
		}()
		WriteParquetAtomic(context.Background(), path, mixedSchema, WriteOptions{Mem: mem}, func(*pqarrow.FileWriter) error {
			panic("fill bug")
		})
	}()
	assertNothingLeft(t, dir)
}

// TestWriteParquetBadOptions checks option validation.
func TestWriteParquetBadOptions(t *testing.T) {
	dir := t.TempDir()
	fill := func(*pqarrow.FileWriter) error { return nil }
	for _, opts := range []WriteOptions{
		{Compression: "lz77"},
		{Metadata: map[string]string{arrowSchemaKey: "x"}},
	} {
		_, err := WriteParquetAtomic(context.Background(), filepath.Join(dir, "o.parquet"), mixedSchema, opts, fill)
		if err == nil || !strings.HasPrefix(err.Error(), "write "+dir) {
			t.Errorf("%+v: err = %v, want a write error naming the path", opts, err)
		}
	}
	assertNothingLeft(t, dir)
}

// failAfter accepts n writes and then fails every one.
type failAfter struct{ n int }

func (f *failAfter) Write(p []byte) (int, error) {
	if f.n == 0 {
		return 0, errInjected
	}
	f.n--
	return len(p), nil
}

// TestWriteParquetSinkPanics drives the Parquet writer straight into a
// sink that fails at once (no buffer in between). pqarrow panics when it
// cannot write the magic bytes; that panic must come back as the sink's
// error, with the writer's memory released.
//
// Later failure points are covered through the real buffered path by
// TestWriteParquetFailures. Driving them unbuffered would trip a leak in
// pqarrow v17 itself: arrowColumnWriter.Write returns the error of
// NextColumn before it defers the release of its array builders, so the
// next column's arrays stay retained.
func TestWriteParquetSinkPanics(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	props, arrowProps, err := writerProps(mixedSchema, WriteOptions{}, mem)
	if err != nil {
		t.Fatal(err)
	}
	tw := newTeeWriter(&failAfter{n: 0})
	_, err = writeParquet(context.Background(), &stickyWriter{w: tw}, mixedSchema, props, arrowProps, nil, nil, func(*pqarrow.FileWriter) error {
		t.Error("fill ran although the writer could not start")
		return nil
	})
	if !errors.Is(err, errInjected) {
		t.Fatalf("err = %v; want the injected failure", err)
	}
}
