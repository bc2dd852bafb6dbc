package arrowio

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"io"
	"math/rand/v2"
	"testing"
)

// TestChunkStream: a chunkStream over a section of a file gives the same
// bytes as bufio.Reader over an io.SectionReader of it (the standard
// library's buffered reader, whose Peek, Discard and Read it mirrors),
// for a random mix of peeks, discards, and small and large reads, and
// reports the end of the section as io.EOF.
func TestChunkStream(t *testing.T) {
	data := make([]byte, 3<<20)
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range data {
		data[i] = byte(rng.Uint32())
	}
	src := bytes.NewReader(data)
	for round := range 20 {
		off := int64(rng.IntN(1 << 20))
		end := off + int64(rng.IntN(2<<20))
		var s chunkStream
		s.reset(src, off, end)
		ref := bufio.NewReaderSize(io.NewSectionReader(src, off, end-off), 4<<20)
		pos := off
		for pos < end {
			switch n := rng.IntN(3 * peekBytes); rng.IntN(3) {
			case 0:
				got, err := s.Peek(n)
				want, _ := ref.Peek(n)
				if !bytes.Equal(got, want) || (len(want) < n) != errors.Is(err, io.EOF) {
					t.Fatalf("round %d at %d: Peek(%d) gave %d bytes, %v; want %d bytes", round, pos, n, len(got), err, len(want))
				}
			case 1:
				got, err := s.Discard(n)
				want, _ := ref.Discard(n)
				if got != want || (want < n) != errors.Is(err, io.EOF) {
					t.Fatalf("round %d at %d: Discard(%d) = %d, %v; want %d", round, pos, n, got, err, want)
				}
				pos += int64(got)
			default:
				if rng.IntN(2) == 0 {
					n *= 8 // large enough to go straight to the source
				}
				got := make([]byte, n)
				m, err := io.ReadFull(&s, got)
				want := make([]byte, n)
				k, _ := io.ReadFull(ref, want)
				if m != k || !bytes.Equal(got[:m], want[:k]) || (err != nil) != (k < n) {
					t.Fatalf("round %d at %d: reading %d gave %d bytes, %v; want %d", round, pos, n, m, err, k)
				}
				pos += int64(m)
			}
		}
		if n, err := s.Read(make([]byte, 10)); n != 0 || err != io.EOF {
			t.Fatalf("round %d: Read at the end = %d, %v; want 0, io.EOF", round, n, err)
		}
	}
}

// TestChunkStreamShortFile: a section reaching past the end of the file
// (a truncated file whose footer promises more) gives io.ErrUnexpectedEOF,
// not a short success.
func TestChunkStreamShortFile(t *testing.T) {
	src := bytes.NewReader(make([]byte, 100<<10))
	var s chunkStream
	s.reset(src, 50<<10, 150<<10)
	if _, err := io.ReadAll(&s); !errors.Is(err, io.ErrUnexpectedEOF) {
		t.Errorf("reading past the end of the file: %v, want io.ErrUnexpectedEOF", err)
	}
	s.reset(src, 99<<10, 150<<10)
	if _, err := s.Peek(4 << 10); !errors.Is(err, io.ErrUnexpectedEOF) {
		t.Errorf("peeking past the end of the file: %v, want io.ErrUnexpectedEOF", err)
	}
}

// TestPageArena: a freed buffer is not handed out again before recycle,
// is after it (for any size of its class), and large ones are not kept.
func TestPageArena(t *testing.T) {
	var a pageArena
	b := a.Allocate(5000)
	if len(b) != 5000 || cap(b) != 8192 {
		t.Fatalf("Allocate(5000): len %d cap %d, want 5000 and 8192", len(b), cap(b))
	}
	b = a.Reallocate(7000, b)
	if len(b) != 7000 || cap(b) != 8192 {
		t.Fatalf("Reallocate(7000): len %d cap %d, want 7000 and 8192", len(b), cap(b))
	}
	a.Free(b)
	if c := a.Allocate(6000); &c[:1][0] == &b[:1][0] {
		t.Fatal("a freed buffer came back before recycle")
	}
	a.recycle()
	if c := a.Allocate(4097); &c[:1][0] != &b[:1][0] {
		t.Fatal("a recycled buffer of the class was not handed out")
	}
	huge := a.Allocate(1 << (minArenaShift + arenaClasses))
	a.Free(huge)
	a.recycle()
	if a.kept != 0 {
		t.Errorf("%d bytes kept after recycling a buffer above the largest class", a.kept)
	}
	for range arenaKeepBytes/(1<<20) + 4 {
		a.Free(make([]byte, 1<<20))
	}
	a.recycle()
	if a.kept > arenaKeepBytes {
		t.Errorf("%d bytes kept, more than %d", a.kept, arenaKeepBytes)
	}
}

// TestRewriteStatisticsSurviveRecycling: the string column's statistics in
// a copy's footer, which Parquet's writer keeps as slices of the input's
// pages until the column chunk is closed, are right although the Reader
// recycles (and here overwrites) page buffers after every chunk. The
// footer is decoded by the independent reader github.com/xitongsys/parquet-go;
// the expected minimum and maximum come from the rows, compared as
// unsigned bytes (Apache Parquet format specification, ColumnOrder).
func TestRewriteStatisticsSurviveRecycling(t *testing.T) {
	old := poisonRecycled
	poisonRecycled = true
	t.Cleanup(func() { poisonRecycled = old })

	const groupRows = 7000
	in, rows := rewriteInput(t, 20000, groupRows)
	r := openT(t, in)
	out := tempPath(t, "out.parquet")
	if _, err := RewriteParquetAtomic(context.Background(), out, r, mixedSchema, make([]ValueMap, 4), WriteOptions{BatchRows: 1000}); err != nil {
		t.Fatal(err)
	}
	pr := openIndependent(t, out)
	const site = 2
	for rg, g := range pr.Footer.RowGroups {
		var lo, hi *string
		for _, row := range rows[rg*groupRows : min(len(rows), (rg+1)*groupRows)] {
			if s := row.site; s != nil {
				if lo == nil || *s < *lo {
					lo = s
				}
				if hi == nil || *s > *hi {
					hi = s
				}
			}
		}
		st := g.Columns[site].MetaData.Statistics
		if st == nil || lo == nil || string(st.MinValue) != *lo || string(st.MaxValue) != *hi {
			t.Errorf("row group %d: site statistics %+v, want min %q max %q", rg, st, *lo, *hi)
		}
	}
}
