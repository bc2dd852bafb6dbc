package arrowio

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"os"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/arrow/memory"
)

// Reader.Checksum, hashed from the reads Records makes plus the gaps, is
// the SHA-256 of the whole file (crypto/sha256 over os.ReadFile), whatever
// columns and row groups were read, with buffered or whole-chunk reads.
func TestReaderChecksum(t *testing.T) {
	// Column chunks of several MiB (beyond the 1 MiB stream buffer) in
	// three row groups, so that buffered reads interleave columns.
	path := tempPath(t, "x.parquet")
	writeRows(t, memory.DefaultAllocator, path, mixedRows(1200000), 100000, WriteOptions{RowGroupRows: 400000, Compression: None})
	raw, want := fileSHA256(t, path)

	for _, buffered := range []bool{true, false} {
		for name, read := range map[string]struct {
			cols []int
			rgs  []int
		}{
			"nothing":            {nil, nil},
			"all columns":        {nil, []int{0, 1, 2}},
			"one column":         {[]int{2}, []int{0, 1, 2}},
			"last column":        {[]int{3}, []int{0, 2}},
			"backwards":          {[]int{0, 3}, []int{2, 1}},
			"first row group":    {[]int{1}, []int{0}},
			"two columns, twice": {[]int{1, 3}, []int{0, 1, 1, 0, 2}},
		} {
			t.Run(fmt.Sprintf("%s/buffered=%v", name, buffered), func(t *testing.T) {
				r := openStreams(t, path, buffered)
				for _, rg := range read.rgs {
					rr, err := r.Records(context.Background(), rg, read.cols, 0)
					if err != nil {
						t.Fatal(err)
					}
					for rr.Next() {
					}
					if err := rr.Err(); err != nil {
						t.Fatal(err)
					}
					rr.Release()
				}
				size, sum, err := r.Checksum()
				if err != nil {
					t.Fatal(err)
				}
				if size != int64(len(raw)) || sum != want {
					t.Errorf("Checksum = %d %s; want %d %s", size, sum, len(raw), want)
				}
				// Reading every column of every row group in whole chunks
				// leaves only the leading magic and the footer to read
				// again.
				if name == "all columns" && !buffered && r.hasher.gaps > int64(len(raw))/10 {
					t.Errorf("read %d of %d bytes a second time to hash them", r.hasher.gaps, len(raw))
				}
			})
		}
	}
}

// fileSHA256 returns a file's bytes and their SHA-256 (lowercase hex), by
// crypto/sha256 over os.ReadFile.
func fileSHA256(t *testing.T, path string) ([]byte, string) {
	t.Helper()
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	s := sha256.Sum256(raw)
	return raw, hex.EncodeToString(s[:])
}

// openStreams opens path with buffered stream reads on or off (whole
// chunks) until the test ends; the Reader is closed then too.
func openStreams(t *testing.T, path string, buffered bool) *Reader {
	t.Helper()
	old := bufferedStreams
	bufferedStreams = buffered
	t.Cleanup(func() { bufferedStreams = old })
	r, err := Open(path, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { r.Close() })
	return r
}

// stallingObject is an object of 1 KiB whose reads return nothing and no
// error, as a broken store might.
type stallingObject struct{}

func (stallingObject) ReadAt(p []byte, off int64) (int, error) { return 0, nil }
func (stallingObject) Close() error                            { return nil }
func (stallingObject) Size() int64                             { return 1 << 10 }
func (stallingObject) Version() string                         { return "1" }

// TestSeqHasherShortReadWithoutError: a read that returns fewer bytes and
// no error ends the hash with io.ErrUnexpectedEOF instead of retrying for
// ever.
func TestSeqHasherShortReadWithoutError(t *testing.T) {
	s := newSeqHasher(stallingObject{})
	s.start()
	done := make(chan error, 1)
	go func() {
		_, _, err := s.Sum()
		done <- err
	}()
	select {
	case err := <-done:
		if !errors.Is(err, io.ErrUnexpectedEOF) {
			t.Fatalf("Sum: %v, want io.ErrUnexpectedEOF", err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("Sum still reading after 10 s")
	}
}
