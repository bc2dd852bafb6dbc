package arrowio

import (
	"crypto/sha256"
	"encoding/hex"
	"hash"
	"io"
	"sync"
)

// seqHasher computes the SHA-256 of a whole object from the reads a
// Parquet reader makes anyway, so that an input is not read a second time
// just to be hashed (on an object store: not downloaded twice).
//
// SHA-256 must see the bytes in order. Bytes [0, next) are hashed. A read
// that reaches past next hashes its new bytes; a read that starts past
// next first hashes the gap [next, off), reading it in gapBufferSize
// pieces; a read behind next changes nothing. Whole-chunk reads (remote
// objects) go forward through a file, so there the gaps are only the
// columns not selected and every byte is fetched once. Buffered reads
// (local disk) take each column in 1 MiB pieces, in turn, so the first
// piece of the next column makes the hash read ahead through the rest of
// the current one; those bytes are read twice, the second time from the
// page cache, as a separate hashing pass would. Sum hashes what is left. Reads
// made before start (the footer, when the file is opened) are not
// hashed here; Sum reads the footer's bytes again in order.
type seqHasher struct {
	Object
	mu      sync.Mutex
	started bool
	next    int64
	h       hash.Hash
	buf     []byte
	err     error // first failed gap read; Sum returns it
	gaps    int64 // bytes read only to be hashed, for tests
}

// gapBufferSize is the piece in which gaps are read and hashed.
const gapBufferSize = 1 << 20

func newSeqHasher(obj Object) *seqHasher { return &seqHasher{Object: obj, h: sha256.New()} }

// start begins hashing with the reads that follow.
func (s *seqHasher) start() {
	s.mu.Lock()
	s.started = true
	s.mu.Unlock()
}

// wantsWholeChunks reports whether the wrapped object is a wholeChunkReader.
func (s *seqHasher) wantsWholeChunks() bool {
	_, ok := s.Object.(wholeChunkReader)
	return ok
}

func (s *seqHasher) ReadAt(p []byte, off int64) (int, error) {
	n, err := s.Object.ReadAt(p, off)
	s.mu.Lock()
	defer s.mu.Unlock()
	if !s.started || s.err != nil {
		return n, err
	}
	if off > s.next {
		s.fill(off)
	}
	if end := off + int64(n); s.err == nil && off <= s.next && end > s.next {
		s.h.Write(p[s.next-off : n])
		s.next = end
	}
	return n, err
}

// fill hashes [next, to) by reading it; s.mu is held. The buffer grows to
// the largest gap, up to gapBufferSize: a small file's gaps are small, and
// a buffer of 1 MiB for each of them cost more than reading the file.
func (s *seqHasher) fill(to int64) {
	if want := int(min(gapBufferSize, to-s.next)); len(s.buf) < want {
		s.buf = make([]byte, want)
	}
	for s.next < to && s.err == nil {
		k := min(int64(len(s.buf)), to-s.next)
		m, err := s.Object.ReadAt(s.buf[:k], s.next)
		s.h.Write(s.buf[:m])
		s.next += int64(m)
		s.gaps += int64(m)
		if int64(m) < k {
			if err == nil {
				err = io.ErrUnexpectedEOF // a short read without a reason
			}
			s.err = err
		}
	}
}

// Sum hashes the rest of the object and returns its size and SHA-256
// (lowercase hex).
func (s *seqHasher) Sum() (int64, string, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.fill(s.Size())
	if s.err != nil {
		return 0, "", s.err
	}
	return s.next, hex.EncodeToString(s.h.Sum(nil)), nil
}
