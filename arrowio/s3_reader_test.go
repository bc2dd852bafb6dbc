package arrowio

import (
	"context"
	"errors"
	"io"
	"strings"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/arrow/memory"
)

// A Parquet file written to and read from an s3:// location through the
// package's own functions (the S3 store behind Locate): its bytes are the
// local writer's, reading every column of every row group and hashing the
// file costs a handful of requests, and the checksum is the SHA-256 of the
// stored object.
func TestS3ParquetThroughLocations(t *testing.T) {
	_, fake := newTestS3(t)
	setTunable(t, &s3ReadAhead, 8<<20) // the default window
	SetS3Options(S3Options{Endpoint: fake.url, PathStyle: true, Region: "us-east-1"})
	t.Cleanup(func() { SetS3Options(S3Options{}) })

	rows := mixedRows(20000)
	local := tempPath(t, "x.parquet")
	want := writeRows(t, memory.DefaultAllocator, local, rows, 3000, WriteOptions{RowGroupRows: 5000})
	loc := "s3://" + testBucket + "/lake/day=1/x.parquet"
	got := writeRows(t, memory.DefaultAllocator, loc, rows, 3000, WriteOptions{RowGroupRows: 5000})
	if got != want {
		t.Fatalf("S3 output %+v, local %+v: want the same bytes", got, want)
	}

	files, err := Discover("s3://" + testBucket + "/lake")
	if err != nil || len(files) != 1 || files[0].Rel != "day=1/x.parquet" || files[0].Abs != loc || files[0].Size != want.Bytes {
		t.Fatalf("Discover: %+v, %v", files, err)
	}
	if n, _, _, err := ReadFooter(loc); err != nil || n != int64(len(rows)) {
		t.Fatalf("ReadFooter: %d rows, %v", n, err)
	}

	st, _, err := Locate(loc)
	if err != nil {
		t.Fatal(err)
	}
	bucket := st.(*s3Bucket)
	before := bucket.requests.Load()
	r, err := Open(loc, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	var read int64
	for rg := range r.NumRowGroups() {
		rr, err := r.Records(context.Background(), rg, nil, 0)
		if err != nil {
			t.Fatal(err)
		}
		for {
			rec, err := rr.Read()
			if err == io.EOF {
				break
			}
			if err != nil {
				t.Fatal(err)
			}
			read += rec.NumRows()
		}
		rr.Release()
	}
	size, sum, err := r.Checksum()
	if err != nil || size != want.Bytes || sum != want.SHA256 {
		t.Fatalf("Checksum: %d %s %v; want %d %s", size, sum, err, want.Bytes, want.SHA256)
	}
	if read != int64(len(rows)) {
		t.Fatalf("read %d rows, want %d", read, len(rows))
	}
	// A HEAD at open and one GET of a window that ends at the end of the
	// file and, the file being smaller than the window, holds all of it.
	if n := bucket.requests.Load() - before; n != 2 {
		t.Errorf("reading and hashing a %d-byte file in %d row groups took %d requests, want 2", size, r.NumRowGroups(), n)
	}
}

// ReadFooter of an S3 object costs a HEAD and one small GET, not a
// read-ahead window.
func TestS3ReadFooterIsSmall(t *testing.T) {
	st, fake := newTestS3(t)
	setTunable(t, &s3ReadAhead, 8<<20)
	SetS3Options(S3Options{Endpoint: fake.url, PathStyle: true, Region: "us-east-1"})
	t.Cleanup(func() { SetS3Options(S3Options{}) })
	loc := "s3://" + testBucket + "/f/x.parquet"
	w := writeRows(t, memory.DefaultAllocator, loc, mixedRows(200000), 50000, WriteOptions{})
	if w.Bytes < 2*footerReadAhead {
		t.Fatalf("test file of %d bytes is too small to tell", w.Bytes)
	}
	located, _, err := Locate(loc)
	if err != nil {
		t.Fatal(err)
	}
	bucket := located.(*s3Bucket)
	before := bucket.requests.Load()
	if n, _, _, err := ReadFooter(loc); err != nil || n != 200000 {
		t.Fatalf("ReadFooter: %d, %v", n, err)
	}
	if n := bucket.requests.Load() - before; n != 2 {
		t.Errorf("ReadFooter took %d requests, want 2 (HEAD, one GET)", n)
	}
	// What that GET fetched: the footer's window, not a read-ahead one.
	obj, err := st.Open(context.Background(), "f/x.parquet")
	if err != nil {
		t.Fatal(err)
	}
	o := obj.(*s3Object)
	o.footerOnly()
	r, err := newReader(loc, o, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if got := len(o.win); got == 0 || got > footerReadAhead {
		t.Errorf("footer read fetched a window of %d bytes, want at most %d", got, footerReadAhead)
	}
}

// The output lock on S3: taken with If-None-Match, refused while held,
// renewed, taken over once its lease ended, and released.
func TestS3Lock(t *testing.T) {
	_, fake := newTestS3(t)
	SetS3Options(S3Options{Endpoint: fake.url, PathStyle: true, Region: "us-east-1"})
	t.Cleanup(func() { SetS3Options(S3Options{}) })
	loc := "s3://" + testBucket + "/out/_lock"
	l, stale, err := AcquireLock(loc, lockTime, false)
	if err != nil || stale != nil {
		t.Fatalf("acquire: %v, stale %v", err, stale)
	}
	if _, _, err := AcquireLock(loc, lockTime, false); !errors.Is(err, ErrLocked) || !strings.Contains(err.Error(), loc) {
		t.Fatalf("second acquire: %v, want ErrLocked naming %s", err, loc)
	}
	if err := l.Renew(lockTime.Add(time.Minute)); err != nil {
		t.Fatal(err)
	}
	if h, err := HeldLock(loc, lockTime.Add(5*time.Minute)); err != nil || h == nil {
		t.Fatalf("HeldLock while the lease runs: %v, %v", h, err)
	}
	// A run on another machine, after the lease ran out.
	later := lockTime.Add(time.Minute + LockLease + time.Second)
	l2, stale, err := AcquireLock(loc, later, false)
	if err != nil || stale == nil {
		t.Fatalf("take-over after the lease: %v, stale %v", err, stale)
	}
	if err := l.Renew(later); !errors.Is(err, ErrLockLost) {
		t.Fatalf("renew after take-over: %v, want ErrLockLost", err)
	}
	// Within its own lease the old holder still sees that the object is
	// no longer its lock.
	if err := l.Check(lockTime.Add(2 * time.Minute)); !errors.Is(err, ErrLockLost) || strings.Contains(err.Error(), "lease ended") {
		t.Fatalf("check of a lock object rewritten by another run: %v, want ErrLockLost for its content", err)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
	if h, _ := HeldLock(loc, later); h == nil {
		t.Fatal("the old holder's release removed the new holder's lock")
	}
	if err := l2.Release(); err != nil {
		t.Fatal(err)
	}
	if ok, err := Exists(loc); ok || err != nil {
		t.Fatalf("lock still there after release: %v %v", ok, err)
	}
}

// --skip-commit-check on stores without conditional creates: one that
// ignores If-None-Match fails the start-up probe, and the unchecked create
// still refuses an existing object (it looks first); one that rejects it
// (501) is told apart (ErrNoConditionalCreate) and written plainly.
func TestS3UncheckedCreates(t *testing.T) {
	_, fake := newTestS3(t)
	SetS3Options(S3Options{Endpoint: fake.url, PathStyle: true, Region: "us-east-1"})
	t.Cleanup(func() { SetS3Options(S3Options{}) })
	write := func(s string) func(io.Writer) error {
		return func(w io.Writer) error { _, err := io.WriteString(w, s); return err }
	}
	for _, mode := range []string{"ignores", "rejects"} {
		t.Run(mode, func(t *testing.T) {
			fake.ignoreConditions.Store(mode == "ignores")
			fake.rejectConditions.Store(mode == "rejects")
			defer fake.ignoreConditions.Store(false)
			defer fake.rejectConditions.Store(false)
			dir := "s3://" + testBucket + "/" + mode
			if err := CheckConditionalCreate(dir); !errors.Is(err, ErrNoConditionalCreate) {
				t.Fatalf("probe: %v, want ErrNoConditionalCreate", err)
			}
			loc := dir + "/_manifest.json"
			if err := CreateFileUnchecked(loc, write("first")); err != nil {
				t.Fatal(err)
			}
			if err := CreateFileUnchecked(loc, write("second")); !errors.Is(err, ErrExist) {
				t.Fatalf("second unchecked create: %v, want ErrExist", err)
			}
			if b, err := ReadFile(loc); err != nil || string(b) != "first" {
				t.Fatalf("object holds %q (%v), want %q", b, err, "first")
			}
		})
	}
}

// A listed key that Join would clean into another object's name is an
// error, not a silent read of the wrong object.
func TestS3DiscoverOddKey(t *testing.T) {
	st, fake := newTestS3(t)
	SetS3Options(S3Options{Endpoint: fake.url, PathStyle: true, Region: "us-east-1"})
	t.Cleanup(func() { SetS3Options(S3Options{}) })
	put(t, st, "odd/a//b.parquet", []byte("x"))
	_, err := Discover("s3://" + testBucket + "/odd")
	if err == nil || !strings.Contains(err.Error(), `"a//b.parquet"`) {
		t.Fatalf("Discover: %v, want an error naming the key", err)
	}
}
