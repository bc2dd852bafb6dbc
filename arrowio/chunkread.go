package arrowio

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math/bits"
	"sync"

	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/file"

	"github.com/lakescale/lakescale/internal/invariants"
)

// Reading a column chunk the way Arrow Go v17's RowGroupReader.Column does
// allocates, per chunk, a read buffer of the stream buffer size and a page
// reader whose buffer for compressed bytes grows from nothing, and per
// page a buffer for the uncompressed bytes; every page is also copied twice,
// from the file into the read buffer and from there into the compressed
// buffer. For a full run on the benchmark lake that was 4.5 of its 8.6 GB
// of allocations. A Reader therefore opens the chunks it reads itself
// (scans and rewrites, never the record reader) with parts (chunkParts)
// that it takes from a pool and gives back on Close, so that they serve
// file after file:
//
//   - a chunkStream, which reads page headers through a small buffer and
//     page bodies straight into the page reader's buffer;
//   - one page reader, Reset for each chunk, so its compressed-bytes buffer
//     stays grown;
//   - a pageArena, the page reader's allocator, which hands page buffers
//     out again once nothing reads them (see there);
//   - the buffers scans and rewrites decode values into.
//
// Only one such chunk is open at a time per Reader (Readers are not safe
// for concurrent use anyway); a second one, and a chunk Arrow's own path
// must read (encrypted columns, files of writers with PARQUET-816, objects
// read a whole chunk per request), goes through RowGroupReader.Column.

// peekBytes is the least a chunkStream reads to refill its buffer: enough
// for a page header and the start of its body.
const peekBytes = 32 << 10

// chunkStream is the parquet.BufferedReader of one column chunk, the bytes
// [off, end) of src as read so far. Peek and small reads go through buf;
// a read of at least peekBytes with nothing buffered goes straight from
// src into the caller's slice. Reads are sequential, so a hashing src sees
// the chunk in order.
type chunkStream struct {
	src      io.ReaderAt
	off, end int64 // file offset of the first byte not in buf; end of the chunk
	buf      []byte
	r, w     int // buf[r:w] is buffered and not yet consumed
}

func (s *chunkStream) reset(src io.ReaderAt, off, end int64) {
	s.src, s.off, s.end, s.r, s.w = src, off, end, 0, 0
}

// Peek returns the next n bytes without consuming them; fewer, with
// io.EOF, at the end of the chunk.
func (s *chunkStream) Peek(n int) ([]byte, error) {
	if n < 0 {
		return nil, bufio.ErrNegativeCount
	}
	if s.w-s.r < n {
		if err := s.fill(n); err != nil {
			return s.buf[s.r:s.w], err
		}
		if s.w-s.r < n {
			return s.buf[s.r:s.w], io.EOF
		}
	}
	return s.buf[s.r : s.r+n], nil
}

// fill reads into buf until n bytes, and up to peekBytes, are buffered,
// or the chunk ends. It does not read further ahead, nor grow buf beyond
// what the chunk has left, after a large Peek either.
func (s *chunkStream) fill(n int) error {
	copy(s.buf, s.buf[s.r:s.w])
	s.w -= s.r
	s.r = 0
	size := int(min(int64(max(n, peekBytes)), int64(s.w)+s.end-s.off))
	if cap(s.buf) < size {
		buf := make([]byte, size)
		copy(buf, s.buf[:s.w])
		s.buf = buf
	}
	s.buf = s.buf[:cap(s.buf)]
	k := size - s.w
	if k <= 0 {
		return nil
	}
	m, err := readFull(s.src, s.buf[s.w:s.w+k], s.off)
	s.w += m
	s.off += int64(m)
	return err
}

// Discard consumes the next n bytes.
func (s *chunkStream) Discard(n int) (int, error) {
	if n < 0 {
		return 0, bufio.ErrNegativeCount
	}
	if b := s.w - s.r; n <= b {
		s.r += n
		return n, nil
	}
	skip := int64(n - (s.w - s.r))
	s.r, s.w = 0, 0
	if rest := s.end - s.off; skip > rest {
		s.off = s.end
		return n - int(skip-rest), io.EOF
	}
	s.off += skip
	return n, nil
}

// Read consumes up to len(p) bytes.
func (s *chunkStream) Read(p []byte) (int, error) {
	if len(p) == 0 {
		return 0, nil
	}
	if s.r == s.w {
		rest := s.end - s.off
		if rest <= 0 {
			return 0, io.EOF
		}
		if len(p) >= peekBytes {
			m, err := readFull(s.src, p[:min(int64(len(p)), rest)], s.off)
			s.off += int64(m)
			return m, err
		}
		if err := s.fill(1); err != nil && s.r == s.w {
			return 0, err
		}
	}
	n := copy(p, s.buf[s.r:s.w])
	s.r += n
	return n, nil
}

// readFull reads len(p) bytes at off; a short read is an error
// (io.ErrUnexpectedEOF when src has no more).
func readFull(src io.ReaderAt, p []byte, off int64) (int, error) {
	m, err := src.ReadAt(p, off)
	if m == len(p) {
		return m, nil // io.ReaderAt may report io.EOF with the last bytes
	}
	if err == nil || errors.Is(err, io.EOF) {
		err = io.ErrUnexpectedEOF
	}
	return m, err
}

// pageArena is the memory.Allocator of a Reader's page reader. Arrow's
// page reader allocates a buffer for each page's uncompressed bytes and
// frees it at the end of the call that read the page, while the page is
// still to be decoded; what is decoded from a page may point into it for
// longer. The arena therefore hands a freed buffer out again only once
// nothing can read it any more:
//
//   - a data page's buffer of a column of fixed-width values, when the
//     next page is read (the previous one is decoded by then; see
//     arenaPager);
//   - a dictionary page's buffer (its values are decoded lazily, for the
//     whole chunk), when the chunk is done;
//   - never a buffer of a byte-array column, whose values point into the
//     page (a writer's statistics keep them until its column chunk is
//     closed); those are left to the garbage collector.
//
// Buffers come in power-of-two sizes from 1 << minArenaShift; free ones are
// kept up to arenaKeepBytes. Not safe for concurrent use.
type pageArena struct {
	free    [arenaClasses][][]byte
	kept    int      // bytes in free
	pending [][]byte // freed since the last page was read
	held    [][]byte // freed, kept until the chunk is done
	drop    bool     // freed buffers go to the garbage collector
}

const (
	minArenaShift  = 12 // 4 KiB
	arenaClasses   = 13 // up to 16 MiB; larger buffers are not kept
	arenaKeepBytes = 16 << 20
)

var _ memory.Allocator = (*pageArena)(nil)

// arenaClass returns the class of a buffer of n bytes: its capacity is
// 1 << (minArenaShift+class).
func arenaClass(n int) int {
	if n <= 1<<minArenaShift {
		return 0
	}
	return bits.Len(uint(n-1)) - minArenaShift
}

func (a *pageArena) Allocate(size int) []byte {
	c := arenaClass(size)
	if c < arenaClasses {
		if l := a.free[c]; len(l) > 0 {
			b := l[len(l)-1]
			a.free[c] = l[:len(l)-1]
			a.kept -= cap(b)
			// Arrow's page reader can leave part of a page buffer unwritten
			// for a corrupt page header; Go's allocator gives zeros there.
			b = b[:size]
			clear(b)
			return b
		}
		return make([]byte, size, 1<<(minArenaShift+c))
	}
	return make([]byte, size)
}

func (a *pageArena) Reallocate(size int, b []byte) []byte {
	if size <= cap(b) {
		return b[:size]
	}
	nb := a.Allocate(size)
	copy(nb, b)
	a.Free(b)
	return nb
}

func (a *pageArena) Free(b []byte) {
	if !a.drop && arenaClass(cap(b)) < arenaClasses && cap(b) >= 1<<minArenaShift && bits.OnesCount(uint(cap(b))) == 1 {
		a.pending = append(a.pending, b[:cap(b)])
	}
}

// pageRead is told that the page reader has read a page. When it is a
// dictionary page, the buffers freed while reading it (its own, and those
// of pages of kinds Arrow skips, in no set order) are held until the chunk
// is done.
func (a *pageArena) pageRead(dictionary bool) {
	if dictionary {
		a.held = append(a.held, a.pending...)
		clear(a.pending)
		a.pending = a.pending[:0]
	}
}

// pageNext is told that the page reader is about to read the next page:
// the buffers freed so far (but held ones) can be handed out again.
func (a *pageArena) pageNext() { a.pending = a.recycle(a.pending) }

// chunkDone is told that nothing read from the chunk is in use any more.
func (a *pageArena) chunkDone() {
	a.pending = a.recycle(a.pending)
	a.held = a.recycle(a.held)
	a.drop = false
}

// recycle makes the buffers of l available again and returns l emptied.
func (a *pageArena) recycle(l [][]byte) [][]byte {
	for i, b := range l {
		l[i] = nil
		if a.kept+cap(b) > arenaKeepBytes {
			continue
		}
		if poisonRecycled {
			for j := range b {
				b[j] = 0xa5
			}
		}
		c := arenaClass(cap(b))
		a.free[c] = append(a.free[c], b)
		a.kept += cap(b)
	}
	return l[:0]
}

// poisonRecycled makes recycle overwrite the buffers it recycles, so that
// whatever still reads one sees garbage: on in invariants builds and in
// the tests that look for such reads.
var poisonRecycled = invariants.Enabled

// arenaPager is the page reader a Reader's column readers use: Arrow's,
// telling the arena where pages begin and end. The column reader asks for
// the next page only when it has decoded every value of the current one.
type arenaPager struct {
	file.PageReader
	arena *pageArena
}

func (p *arenaPager) Next() bool {
	p.arena.pageNext()
	ok := p.PageReader.Next()
	if ok {
		_, dict := p.Page().(*file.DictionaryPage)
		p.arena.pageRead(dict)
	}
	return ok
}

// chunkParts are what a Reader keeps to open column chunks (see above),
// with the buffers its scans and rewrites decode into. Readers take them
// from partsPool and give them back on Close, so that they outlive a file.
type chunkParts struct {
	busy   bool
	stream chunkStream
	pager  arenaPager
	arena  pageArena
	scan   scanBuffers
}

var partsPool = sync.Pool{New: func() any { return new(chunkParts) }}

// columnReader opens the reader of leaf column c of row group rg. Call
// done when neither the reader nor anything read from it is used any more
// (for a copied column: after its output column chunk is closed).
func (r *Reader) columnReader(rg, c int) (cr file.ColumnChunkReader, done func(), err error) {
	pages, done, err := r.columnPages(rg, c)
	if err != nil {
		return nil, done, err
	}
	return file.NewColumnReader(r.pr.MetaData().Schema.Column(c), pages, r.mem, r.pr.BufferPool()), done, nil
}

// columnPages opens the page reader of leaf column c of row group rg, with
// the Reader's own chunk parts when it may, else with Arrow's. Call done as
// for columnReader.
func (r *Reader) columnPages(rg, c int) (pages file.PageReader, done func(), err error) {
	done = func() {}
	p := r.parts
	if p.busy || !r.ownChunks {
		err = decoding(func() (err error) { pages, err = r.pr.RowGroup(rg).GetColumnPageReader(c); return err })
		return pages, done, err
	}
	err = decoding(func() error {
		col, err := r.pr.MetaData().RowGroup(rg).ColumnChunk(c)
		if err != nil {
			return err
		}
		if col.CryptoMetadata() != nil {
			pages, err = r.pr.RowGroup(rg).GetColumnPageReader(c)
			return err
		}
		start := col.DataPageOffset()
		if col.HasDictionaryPage() && col.DictionaryPageOffset() > 0 && start > col.DictionaryPageOffset() {
			start = col.DictionaryPageOffset()
		}
		length := col.TotalCompressedSize()
		if start < 0 || length < 0 || start > r.obj.Size()-length {
			return fmt.Errorf("%w: column chunk of %d bytes at offset %d does not fit a file of %d bytes",
				errCorruptData, length, start, r.obj.Size())
		}
		if _, err := compress.GetCodec(col.Compression()); err != nil {
			return err
		}
		p.stream.reset(r.obj, start, start+length)
		if p.pager.PageReader == nil {
			pr, err := file.NewPageReader(&p.stream, col.NumValues(), col.Compression(), &p.arena, nil)
			if err != nil {
				return err
			}
			p.pager = arenaPager{PageReader: pr, arena: &p.arena}
		} else {
			p.pager.Reset(&p.stream, col.NumValues(), col.Compression(), nil)
		}
		switch r.pr.MetaData().Schema.Column(c).PhysicalType() {
		case parquet.Types.ByteArray, parquet.Types.FixedLenByteArray:
			p.arena.drop = true
		}
		pages = &p.pager
		p.busy = true
		done = func() {
			p.busy = false
			p.arena.chunkDone()
		}
		return nil
	})
	return pages, done, err
}
