package arrowio

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"hash"
	"io"
)

// HashFile returns the size and SHA-256 (lowercase hex) of a file, reading
// it as a stream.
func HashFile(loc string) (size int64, sum string, err error) {
	return HashFileContext(background, loc)
}

// HashFileContext is HashFile whose reads from an object store stop when
// ctx is done; a local file is read to its end.
func HashFileContext(ctx context.Context, loc string) (size int64, sum string, err error) {
	st, key, err := Locate(loc)
	if err != nil {
		return 0, "", err
	}
	obj, err := st.Open(ctx, key)
	if err != nil {
		return 0, "", err
	}
	defer func() { _ = obj.Close() }() // read-only; a read error is reported
	h := sha256.New()
	n, err := io.Copy(h, io.NewSectionReader(obj, 0, obj.Size()))
	if err != nil {
		return 0, "", pathError("hash", loc, unwrapPath(err))
	}
	return n, hex.EncodeToString(h.Sum(nil)), nil
}

// teeWriter passes bytes on to w, hashing and counting what w accepted. It
// keeps the first error and returns it from every later Write, like
// bufio.Writer, because the Parquet writer does not report every failure
// it sees. It deliberately has no Close method: pqarrow's FileWriter.Close
// closes its sink when the sink is an io.Closer, and the file must stay
// open for Sync.
type teeWriter struct {
	w   io.Writer
	h   hash.Hash
	n   int64
	err error
}

func newTeeWriter(w io.Writer) *teeWriter { return &teeWriter{w: w, h: sha256.New()} }

func (t *teeWriter) Write(p []byte) (int, error) {
	if t.err != nil {
		return 0, t.err
	}
	n, err := t.w.Write(p)
	t.h.Write(p[:n])
	t.n += int64(n)
	if err == nil && n < len(p) {
		err = io.ErrShortWrite
	}
	t.err = err
	return n, err
}

func (t *teeWriter) sum() string { return hex.EncodeToString(t.h.Sum(nil)) }
