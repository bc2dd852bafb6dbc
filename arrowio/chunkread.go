package arrowio

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math/bits"

	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/metadata"

	"github.com/lakescale/lakescale/internal/invariants"
)

// Reading a column chunk the way Arrow Go v17's RowGroupReader.Column does
// allocates, per chunk, a read buffer of the stream buffer size and a page
// reader whose buffer for compressed bytes grows from nothing, and per
// page a buffer for the uncompressed bytes; every page is also copied twice,
// from the file into the read buffer and from there into the compressed
// buffer. For a full run on the benchmark lake that was 4.5 of its 8.6 GB
// of allocations. A Reader therefore opens the chunks it reads itself
// (scans and rewrites, never the record reader) with parts it keeps:
//
//   - a chunkStream, which reads page headers through a small buffer and
//     page bodies straight into the page reader's buffer;
//   - one page reader, Reset for each chunk, so its compressed-bytes buffer
//     stays grown;
//   - a pageArena, the page reader's allocator, which hands the buffers of
//     a finished chunk's pages out again.
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

// fill reads into buf until n bytes are buffered or the chunk ends,
// reading at least peekBytes when the chunk has them.
func (s *chunkStream) fill(n int) error {
	copy(s.buf, s.buf[s.r:s.w])
	s.w -= s.r
	s.r = 0
	if size := max(n, peekBytes); cap(s.buf) < size {
		buf := make([]byte, size)
		copy(buf, s.buf[:s.w])
		s.buf = buf
	}
	s.buf = s.buf[:cap(s.buf)]
	k := int(min(int64(len(s.buf)-s.w), s.end-s.off))
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
// frees it when it reads the next page, while values decoded from it (a
// byte-array dictionary, byte arrays a writer's statistics still hold) may
// point into it until the chunk is done. The arena keeps freed buffers
// aside until recycle, called when nothing read from the chunk is in use
// any more, then hands them out again. Buffers come in power-of-two sizes
// from minArenaClass; free ones are kept up to arenaKeepBytes. Not safe for
// concurrent use.
type pageArena struct {
	free    [arenaClasses][][]byte
	pending [][]byte
	kept    int // bytes in free
}

const (
	minArenaShift  = 12 // 4 KiB
	arenaClasses   = 13 // up to 16 MiB; larger buffers are not kept
	arenaKeepBytes = 64 << 20
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
			return b[:size]
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
	if cap(b) >= 1<<minArenaShift && bits.OnesCount(uint(cap(b))) == 1 {
		a.pending = append(a.pending, b[:cap(b)])
	}
}

// recycle makes the buffers freed so far available again.
func (a *pageArena) recycle() {
	for i, b := range a.pending {
		a.pending[i] = nil
		c := arenaClass(cap(b))
		if c >= arenaClasses || a.kept+cap(b) > arenaKeepBytes {
			continue
		}
		if poisonRecycled {
			for j := range b {
				b[j] = 0xa5
			}
		}
		a.free[c] = append(a.free[c], b)
		a.kept += cap(b)
	}
	a.pending = a.pending[:0]
}

// poisonRecycled makes recycle overwrite the buffers it recycles, so that
// whatever still reads one sees garbage: on in invariants builds and in
// the tests that look for such reads.
var poisonRecycled = invariants.Enabled

// chunkParts are what a Reader keeps to open column chunks (see above).
type chunkParts struct {
	busy   bool
	stream chunkStream
	pager  file.PageReader
	arena  pageArena
}

// columnReader opens the reader of leaf column c of row group rg. Call
// done when neither the reader nor anything read from it is used any more
// (for a copied column: after its output column chunk is closed).
func (r *Reader) columnReader(rg, c int) (cr file.ColumnChunkReader, done func(), err error) {
	done = func() {}
	p := &r.chunks
	if p.busy || r.wholeChunks || r.pr.WriterVersion().LessThan(metadata.Parquet816FixedVersion) {
		err = decoding(func() (err error) { cr, err = r.pr.RowGroup(rg).Column(c); return err })
		return cr, done, err
	}
	err = decoding(func() error {
		col, err := r.pr.MetaData().RowGroup(rg).ColumnChunk(c)
		if err != nil {
			return err
		}
		if col.CryptoMetadata() != nil {
			cr, err = r.pr.RowGroup(rg).Column(c)
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
		if p.pager == nil {
			if p.pager, err = file.NewPageReader(&p.stream, col.NumValues(), col.Compression(), &p.arena, nil); err != nil {
				return err
			}
		} else {
			p.pager.Reset(&p.stream, col.NumValues(), col.Compression(), nil)
		}
		cr = file.NewColumnReader(r.pr.MetaData().Schema.Column(c), p.pager, r.mem, r.pr.BufferPool())
		p.busy = true
		done = func() {
			p.busy = false
			p.arena.recycle()
		}
		return nil
	})
	return cr, done, err
}
