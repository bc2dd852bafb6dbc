package arrowio

import (
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/aws/aws-sdk-go-v2/aws"
	awshttp "github.com/aws/aws-sdk-go-v2/aws/transport/http"
	"github.com/aws/aws-sdk-go-v2/service/s3"
)

// s3Object reads an S3 object with ranged GETs (Range: bytes=a-b, RFC 9110
// section 14). A read that the window of the last fetch does not hold
// fetches at least s3ReadAhead bytes from its offset on, so sequential
// small reads cost one request per s3ReadAhead bytes.
type s3Object struct {
	st   *s3Bucket
	ctx  context.Context
	key  string
	size int64
	etag *string // If-Match of every GET; nil if HeadObject gave none
	// readAhead is the least a fetch asks for: s3ReadAhead, or less for
	// an object opened for its footer only (footerOnly).
	readAhead int64

	mu     sync.Mutex
	win    []byte // the bytes at winOff, from the last small fetch
	winOff int64
	closed bool
}

func (o *s3Object) Size() int64 { return o.size }

func (o *s3Object) Version() string { return aws.ToString(o.etag) }

// preferWholeChunks marks a remote object: the Parquet reader then reads
// each column chunk in one ReadAt, that is one request.
func (o *s3Object) preferWholeChunks() {}

// footerOnly shrinks the read-ahead to footerReadAhead, for an object of
// which only the Parquet footer will be read (ReadFooter): one request of
// a few KiB instead of a whole window.
func (o *s3Object) footerOnly() { o.readAhead = footerReadAhead }

// footerReadAhead holds the footer of most Parquet files, whose metadata
// grows with columns × row groups.
const footerReadAhead = 64 << 10

// Close drops the read-ahead window; later reads fail.
func (o *s3Object) Close() error {
	o.mu.Lock()
	defer o.mu.Unlock()
	o.win, o.closed = nil, true
	return nil
}

// ReadAt reads len(p) bytes at off, or up to the end of the object with
// io.EOF. It is safe for concurrent use; requests run outside the lock.
func (o *s3Object) ReadAt(p []byte, off int64) (int, error) {
	switch {
	case off < 0:
		return 0, o.st.pathErr("read", o.key, errors.New("negative offset"))
	case len(p) == 0:
		return 0, nil
	case off >= o.size:
		return 0, io.EOF
	}
	want := p
	if rest := o.size - off; int64(len(want)) > rest {
		want = want[:rest]
	}

	o.mu.Lock()
	if o.closed {
		o.mu.Unlock()
		return 0, o.st.pathErr("read", o.key, fs.ErrClosed)
	}
	if off >= o.winOff && off+int64(len(want)) <= o.winOff+int64(len(o.win)) {
		copy(want, o.win[off-o.winOff:])
		o.mu.Unlock()
		return eofIfShort(len(want), len(p))
	}
	o.mu.Unlock()

	if int64(len(want)) >= o.readAhead {
		// Large reads (whole column chunks) go straight into p.
		if err := o.fetch(want, off); err != nil {
			return 0, err
		}
		return eofIfShort(len(want), len(p))
	}
	// The window starts at off, or earlier when that would run past the
	// end: a Parquet reader's first reads are the footer's, at the end,
	// and a window ending at the end then holds the last column chunks
	// too (for a file smaller than the window, all of it).
	start := max(0, min(off, o.size-o.readAhead))
	buf := make([]byte, min(o.readAhead, o.size-start))
	if err := o.fetch(buf, start); err != nil {
		return 0, err
	}
	copy(want, buf[off-start:])
	o.mu.Lock()
	if !o.closed {
		o.win, o.winOff = buf, start
	}
	o.mu.Unlock()
	return eofIfShort(len(want), len(p))
}

func eofIfShort(n, asked int) (int, error) {
	if n < asked {
		return n, io.EOF
	}
	return n, nil
}

// fetch fills p with the object's bytes at off. The SDK retries failed
// requests but not a body that breaks off midway (a reset connection);
// fetch then asks again for the rest, s3BodyAttempts times at most.
func (o *s3Object) fetch(p []byte, off int64) error {
	backoff := s3BodyBackoff
	for attempt := 1; ; attempt++ {
		n, final, err := o.get(p, off)
		if err == nil {
			return nil
		}
		if final {
			return err
		}
		if attempt >= s3BodyAttempts || o.ctx.Err() != nil {
			return o.st.pathErr("read", o.key, err)
		}
		p, off = p[n:], off+int64(n)
		select {
		case <-time.After(backoff):
		case <-o.ctx.Done():
			return o.st.pathErr("read", o.key, context.Cause(o.ctx))
		}
		backoff *= 2
	}
}

// get sends one ranged GET for len(p) bytes at off and reads its body into
// p. It returns how many bytes it read and, on failure, whether the
// failure is final: a failed request (which the SDK has retried already),
// returned as an *fs.PathError, is; a broken body is not.
func (o *s3Object) get(p []byte, off int64) (n int, final bool, err error) {
	end := off + int64(len(p)) - 1
	out, err := o.st.client.GetObject(o.ctx, &s3.GetObjectInput{
		Bucket:  &o.st.bucket,
		Key:     &o.key,
		Range:   aws.String(fmt.Sprintf("bytes=%d-%d", off, end)),
		IfMatch: o.etag,
	})
	if err != nil {
		var re *awshttp.ResponseError
		if errors.As(err, &re) && re.HTTPStatusCode() == http.StatusPreconditionFailed {
			err = errors.New("object changed since it was opened")
		}
		return 0, true, o.st.pathErr("read", o.key, err)
	}
	defer func() { _ = out.Body.Close() }() // a read-only body; its read errors are reported
	// A server that ignores Range sends the whole object from byte 0.
	cr := out.ContentRange
	if start, ok := rangeStart(aws.ToString(cr)); (!ok || start != off) && (cr != nil || off != 0) {
		return 0, true, o.st.pathErr("read", o.key, fmt.Errorf("asked for bytes %d-%d, got Content-Range %q", off, end, aws.ToString(cr)))
	}
	n, err = io.ReadFull(out.Body, p)
	if err == io.EOF {
		err = io.ErrUnexpectedEOF
	}
	return n, false, err
}

// rangeStart returns the first byte position of a Content-Range header
// "bytes first-last/size" (RFC 9110 section 14.4).
func rangeStart(cr string) (int64, bool) {
	rest, ok := strings.CutPrefix(cr, "bytes ")
	if !ok {
		return 0, false
	}
	first, _, ok := strings.Cut(rest, "-")
	if !ok {
		return 0, false
	}
	n, err := strconv.ParseInt(first, 10, 64)
	return n, err == nil
}
