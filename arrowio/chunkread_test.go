package arrowio

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
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

// countingReaderAt counts the bytes read through it.
type countingReaderAt struct {
	io.ReaderAt
	n int64
}

func (c *countingReaderAt) ReadAt(p []byte, off int64) (int, error) {
	m, err := c.ReaderAt.ReadAt(p, off)
	c.n += int64(m)
	return m, err
}

// TestChunkStreamReadsAhead: after a large Peek the stream goes back to
// reading ahead at most peekBytes, and a Peek larger than what is left of
// the chunk (Arrow's page reader doubles its header peek up to 4 MiB when
// a header does not decode) does not grow the buffer beyond it.
func TestChunkStreamReadsAhead(t *testing.T) {
	src := &countingReaderAt{ReaderAt: bytes.NewReader(make([]byte, 4<<20))}
	var s chunkStream
	s.reset(src, 0, 3<<20)
	if b, err := s.Peek(1 << 20); len(b) != 1<<20 || err != nil {
		t.Fatalf("Peek(1 MiB): %d bytes, %v", len(b), err)
	}
	if _, err := s.Discard(1 << 20); err != nil {
		t.Fatal(err)
	}
	before := src.n
	if _, err := s.Peek(10); err != nil {
		t.Fatal(err)
	}
	if got := src.n - before; got != peekBytes {
		t.Errorf("a small Peek after a large one read %d bytes, want %d", got, peekBytes)
	}
	s.reset(src, 0, 100)
	s.buf = nil
	if b, err := s.Peek(4 << 20); len(b) != 100 || !errors.Is(err, io.EOF) || cap(s.buf) > 100 {
		t.Errorf("Peek(4 MiB) of a 100-byte chunk: %d bytes, %v, buffer of %d", len(b), err, cap(s.buf))
	}
}

// TestPageArena: a data page's buffer comes back after the next page is
// asked for, not before; a dictionary page's after the chunk is done; a
// byte-array chunk's never; buffers above the largest class are not kept,
// nor more than arenaKeepBytes.
func TestPageArena(t *testing.T) {
	var a pageArena
	same := func(x, y []byte) bool { return &x[:1][0] == &y[:1][0] }
	b := a.Allocate(5000)
	if len(b) != 5000 || cap(b) != 8192 {
		t.Fatalf("Allocate(5000): len %d cap %d, want 5000 and 8192", len(b), cap(b))
	}
	b = a.Reallocate(7000, b)
	if len(b) != 7000 || cap(b) != 8192 {
		t.Fatalf("Reallocate(7000): len %d cap %d, want 7000 and 8192", len(b), cap(b))
	}
	for i := range b {
		b[i] = 7
	}
	a.Free(b) // as the page reader does before the page is decoded
	a.pageRead(false)
	if c := a.Allocate(6000); same(c, b) {
		t.Fatal("a data page's buffer came back while its page was being read")
	}
	a.pageNext()
	if c := a.Allocate(4097); !same(c, b) {
		t.Fatal("a data page's buffer did not come back once the next page was asked for")
	} else if !bytes.Equal(c, make([]byte, len(c))) {
		t.Fatal("a recycled buffer came back with its old bytes, not zeroed as Go's allocator's are")
	}

	d := a.Allocate(5000)
	a.Free(d)
	a.pageRead(true)
	a.pageNext()
	if c := a.Allocate(5000); same(c, d) {
		t.Fatal("a dictionary page's buffer came back before the chunk was done")
	}
	a.chunkDone()
	if c := a.Allocate(5000); !same(c, d) {
		t.Fatal("a dictionary page's buffer did not come back after the chunk")
	}

	a.drop = true
	e := a.Allocate(5000)
	a.Free(e)
	a.pageNext()
	a.chunkDone()
	if c := a.Allocate(5000); same(c, e) {
		t.Fatal("a byte-array chunk's buffer came back")
	}

	a.Free(make([]byte, 1<<(minArenaShift+arenaClasses)))
	a.chunkDone()
	if a.kept != 0 {
		t.Errorf("%d bytes kept after freeing a buffer above the largest class", a.kept)
	}
	for range arenaKeepBytes/(1<<20) + 4 {
		a.Free(make([]byte, 1<<20))
	}
	a.chunkDone()
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

// TestRewriteSmallPagesWithRecycling: a copy of a file of many small
// pages (a dictionary-encoded float column, a plain string column, 1 KiB
// pages), while recycled page buffers are overwritten, has the input's
// values, as the independent reader github.com/xitongsys/parquet-go reads
// both files, and the string column's footer statistics match its values
// (unsigned byte order, Apache Parquet format specification, ColumnOrder).
func TestRewriteSmallPagesWithRecycling(t *testing.T) {
	old := poisonRecycled
	poisonRecycled = true
	t.Cleanup(func() { poisonRecycled = old })

	mem := memory.DefaultAllocator
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "level", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
		{Name: "tag", Type: arrow.BinaryTypes.String, Nullable: true},
	}, nil)
	b := array.NewRecordBuilder(mem, sc)
	defer b.Release()
	const n = 30_000
	lo, hi := "", ""
	for i := range n {
		b.Field(0).(*array.Float64Builder).Append(float64(i%50) * 0.25)
		tag := fmt.Sprintf("turbine-%05d", (i*7919)%n)
		b.Field(1).(*array.StringBuilder).Append(tag)
		if i == 0 || tag < lo {
			lo = tag
		}
		if tag > hi {
			hi = tag
		}
	}
	rec := b.NewRecord()
	defer rec.Release()
	in := tempPath(t, "in.parquet")
	writeWithProps(t, in, rec, parquet.NewWriterProperties(parquet.WithDictionaryDefault(true), parquet.WithDictionaryFor("tag", false),
		parquet.WithDataPageSize(1<<10), parquet.WithCompression(compress.Codecs.Zstd)))

	r := openT(t, in)
	out := tempPath(t, "out.parquet")
	if _, err := RewriteParquetAtomic(context.Background(), out, r, r.Schema(), make([]ValueMap, 2), WriteOptions{BatchRows: 700}); err != nil {
		t.Fatal(err)
	}
	sameIndependentValues(t, in, out)
	pr := openIndependent(t, out)
	st := pr.Footer.RowGroups[0].Columns[1].MetaData.Statistics
	if st == nil || string(st.MinValue) != lo || string(st.MaxValue) != hi {
		t.Errorf("tag statistics %+v, want min %q max %q", st, lo, hi)
	}
}
