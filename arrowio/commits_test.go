package arrowio

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/arrow/memory"
)

// gatedFile is a temporary file whose Sync waits for gate to close and
// records how many Syncs run at once.
type gatedFile struct {
	*os.File
	gate          <-chan struct{}
	running, peak *atomic.Int32
}

func (f *gatedFile) Sync() error {
	n := f.running.Add(1)
	defer f.running.Add(-1)
	for {
		p := f.peak.Load()
		if n <= p || f.peak.CompareAndSwap(p, n) {
			break
		}
	}
	<-f.gate
	return f.File.Sync()
}

// gateSyncs makes every temporary file's Sync wait for gate.
func gateSyncs(t *testing.T, gate <-chan struct{}, running, peak *atomic.Int32) {
	t.Helper()
	old := createTemp
	t.Cleanup(func() { createTemp = old })
	createTemp = func(dir, pattern string) (tempFile, error) {
		f, err := os.CreateTemp(dir, pattern)
		if err != nil {
			return nil, err
		}
		return &gatedFile{File: f, gate: gate, running: running, peak: peak}, nil
	}
}

// TestCommitsDeferPlacement: a write handed to Commits returns before its
// file is in place, and Wait returns once it is, with the size and SHA-256
// the write reported.
func TestCommitsDeferPlacement(t *testing.T) {
	gate := make(chan struct{})
	var running, peak atomic.Int32
	gateSyncs(t, gate, &running, &peak)
	dir := t.TempDir()
	path := filepath.Join(dir, "v.parquet")
	c, _ := NewCommits(context.Background(), 1)
	w, err := WriteParquetAtomic(context.Background(), path, bigFloatSchema, WriteOptions{Commits: c}, fillBigFloat(memory.DefaultAllocator))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(path); !errors.Is(err, os.ErrNotExist) {
		t.Fatalf("file in place before its sync ran: %v", err)
	}
	close(gate)
	if err := c.Wait(); err != nil {
		t.Fatal(err)
	}
	raw, sum := fileSHA256(t, path)
	if int64(len(raw)) != w.Bytes || sum != w.SHA256 {
		t.Fatalf("committed file: %d bytes, SHA-256 %s; the write reported %d, %s", len(raw), sum, w.Bytes, w.SHA256)
	}
	if rows, _, _, err := ReadFooter(path); err != nil || rows != w.Rows || rows != 400_000 {
		t.Fatalf("footer: %d rows (%v), want %d", rows, err, w.Rows)
	}
	if names := listDir(t, dir); len(names) != 1 {
		t.Fatalf("files left beside the output: %v", names)
	}
}

// TestCommitsLimit: limit commits run at a time and no more, and every
// file is in place after Wait.
func TestCommitsLimit(t *testing.T) {
	for _, limit := range []int{1, 2} {
		t.Run(fmt.Sprint(limit), func(t *testing.T) {
			gate := make(chan struct{})
			var running, peak atomic.Int32
			gateSyncs(t, gate, &running, &peak)
			dir := t.TempDir()
			c, _ := NewCommits(context.Background(), limit)
			var wg sync.WaitGroup
			errs := make([]error, 6)
			for i := range errs {
				wg.Go(func() {
					path := filepath.Join(dir, fmt.Sprintf("f%d", i))
					_, _, errs[i] = writeDeferred(path, c, func(w io.Writer) error {
						_, err := io.WriteString(w, strings.Repeat("x", i+1))
						return err
					}, nil)
				})
			}
			// Six files are waiting to be committed; limit of them may
			// sync at once, and no more even given time to.
			deadline := time.Now().Add(10 * time.Second)
			for running.Load() < int32(limit) && time.Now().Before(deadline) {
				time.Sleep(time.Millisecond)
			}
			time.Sleep(20 * time.Millisecond)
			close(gate)
			wg.Wait()
			if err := c.Wait(); err != nil {
				t.Fatal(err)
			}
			if err := errors.Join(errs...); err != nil {
				t.Fatal(err)
			}
			if p := peak.Load(); p != int32(limit) {
				t.Fatalf("%d syncs ran at once, limit %d", p, limit)
			}
			for i := range errs {
				b, err := os.ReadFile(filepath.Join(dir, fmt.Sprintf("f%d", i)))
				if err != nil || len(b) != i+1 {
					t.Fatalf("f%d: %d bytes (%v), want %d", i, len(b), err, i+1)
				}
			}
		})
	}
}

// TestCommitsFailures: a commit that fails (sync, rename, folder sync)
// is reported by Wait, names the final path, and leaves nothing behind.
func TestCommitsFailures(t *testing.T) {
	for _, f := range []fault{{sync: true}, {rename: true}, {syncDir: true}} {
		t.Run(fmt.Sprintf("%+v", f), func(t *testing.T) {
			var writes int
			inject(t, f, &writes)
			dir := t.TempDir()
			path := filepath.Join(dir, "v.parquet")
			c, ctx := NewCommits(context.Background(), 2)
			if _, err := WriteParquetAtomic(context.Background(), path, bigFloatSchema, WriteOptions{Commits: c}, fillBigFloat(memory.DefaultAllocator)); err != nil {
				t.Fatalf("write: %v; the failure belongs to the commit", err)
			}
			err := c.Wait()
			if !errors.Is(err, errInjected) || !strings.Contains(err.Error(), path) || strings.Contains(err.Error(), ".tmp-") {
				t.Fatalf("Wait: %v, want the injected failure naming %s", err, path)
			}
			if cause := context.Cause(ctx); cause != err {
				t.Fatalf("the writers' context ended with %v, want the commit's failure", cause)
			}
			assertNothingLeft(t, dir)
		})
	}
}

// TestCommitsStopped: a file whose commit finds the context done before
// the rename (a lost lock, an interrupt) is not put in place.
func TestCommitsStopped(t *testing.T) {
	gate := make(chan struct{})
	var running, peak atomic.Int32
	gateSyncs(t, gate, &running, &peak)
	parent, cancel := context.WithCancelCause(context.Background())
	stop := errors.New("test stops the run")
	dir := t.TempDir()
	path := filepath.Join(dir, "v.parquet")
	c, _ := NewCommits(parent, 1)
	if _, err := WriteParquetAtomic(context.Background(), path, bigFloatSchema, WriteOptions{Commits: c}, fillBigFloat(memory.DefaultAllocator)); err != nil {
		t.Fatal(err)
	}
	cancel(stop) // while the commit waits in its sync
	close(gate)
	if err := c.Wait(); !errors.Is(err, stop) {
		t.Fatalf("Wait: %v, want the stop's cause", err)
	}
	assertNothingLeft(t, dir)
}
