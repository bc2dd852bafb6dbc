package arrowio

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
	"github.com/aws/aws-sdk-go-v2/aws"
	"github.com/aws/aws-sdk-go-v2/service/s3"
	"github.com/johannesboyne/gofakes3"
	"github.com/johannesboyne/gofakes3/backend/s3mem"
)

const testBucket = "bkt"

// fakeS3 is a gofakes3 server (in-memory backend, real HTTP listener on
// 127.0.0.1) with fault injection in front of it.
type fakeS3 struct {
	h   http.Handler
	url string // the server's endpoint

	fail      atomic.Int64 // answer this many requests with 503 SlowDown
	forbid    atomic.Bool  // answer every request with 403 AccessDenied
	cutBodies atomic.Int64 // break off this many ranged GET bodies midway
	// loseResponses: carry out this many requests but answer them with
	// 503, as when a response is lost on the way back.
	loseResponses atomic.Int64
	// stallGets: ranged GETs get no answer until the client gives up.
	stallGets atomic.Bool
	// ignoreConditions strips If-None-Match, as a store that does not
	// honour it would; rejectConditions answers it with 501.
	ignoreConditions, rejectConditions atomic.Bool

	creates atomic.Int64 // CreateMultipartUpload requests seen
}

func (f *fakeS3) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	if f.forbid.Load() {
		s3ErrorResponse(w, http.StatusForbidden, "AccessDenied", "Access Denied")
		return
	}
	if f.fail.Add(-1) >= 0 {
		s3ErrorResponse(w, http.StatusServiceUnavailable, "SlowDown", "Please reduce your request rate.")
		return
	}
	f.fail.Store(0)
	if f.loseResponses.Add(-1) >= 0 {
		f.h.ServeHTTP(httptest.NewRecorder(), r)
		s3ErrorResponse(w, http.StatusServiceUnavailable, "SlowDown", "Please reduce your request rate.")
		return
	}
	f.loseResponses.Store(0)
	if r.Header.Get("If-None-Match") != "" && r.Method == http.MethodPut {
		if f.rejectConditions.Load() {
			s3ErrorResponse(w, http.StatusNotImplemented, "NotImplemented", "A header you provided implies functionality that is not implemented.")
			return
		}
		if f.ignoreConditions.Load() {
			r.Header.Del("If-None-Match")
		}
	}
	if f.stallGets.Load() && r.Method == http.MethodGet && r.Header.Get("Range") != "" {
		<-r.Context().Done()
		return
	}
	if r.Method == http.MethodPost && r.URL.Query().Has("uploads") {
		f.creates.Add(1)
	}
	if r.Method == http.MethodGet && r.Header.Get("Range") != "" && f.cutBodies.Add(-1) >= 0 {
		w = &cutWriter{ResponseWriter: w, left: 1000}
	} else {
		f.cutBodies.Store(0)
	}
	f.h.ServeHTTP(w, r)
}

func s3ErrorResponse(w http.ResponseWriter, status int, code, msg string) {
	w.Header().Set("Content-Type", "application/xml")
	w.WriteHeader(status)
	fmt.Fprintf(w, `<?xml version="1.0" encoding="UTF-8"?><Error><Code>%s</Code><Message>%s</Message></Error>`, code, msg)
}

// cutWriter passes on the first left bytes of a body and then drops the
// connection, as a reset in the middle of a download does.
type cutWriter struct {
	http.ResponseWriter
	left int
}

func (c *cutWriter) Write(p []byte) (int, error) {
	if len(p) > c.left {
		c.ResponseWriter.Write(p[:c.left])
		c.ResponseWriter.(http.Flusher).Flush()
		panic(http.ErrAbortHandler)
	}
	c.left -= len(p)
	return c.ResponseWriter.Write(p)
}

// newTestS3 starts a fake S3 server with one bucket and returns the Store
// of that bucket, built by newS3Store with the real SDK client, and the
// server's fault injector. Tunables are shrunk so that tests stay fast.
func newTestS3(t *testing.T) (*s3Bucket, *fakeS3) {
	t.Helper()
	dir := t.TempDir()
	t.Setenv("AWS_ACCESS_KEY_ID", "test")
	t.Setenv("AWS_SECRET_ACCESS_KEY", "test")
	t.Setenv("AWS_SESSION_TOKEN", "")
	t.Setenv("AWS_EC2_METADATA_DISABLED", "true")
	t.Setenv("AWS_CONFIG_FILE", filepath.Join(dir, "config"))
	t.Setenv("AWS_SHARED_CREDENTIALS_FILE", filepath.Join(dir, "credentials"))
	t.Setenv("AWS_PROFILE", "")
	t.Setenv("AWS_ENDPOINT_URL", "")
	t.Setenv("AWS_ENDPOINT_URL_S3", "")
	setTunable(t, &s3ReadAhead, 64<<10)
	setTunable(t, &s3PartSize, 256<<10)
	setTunable(t, &s3MaxBackoff, 5*time.Millisecond)
	setTunable(t, &s3BodyBackoff, time.Millisecond)

	backend := s3mem.New()
	if err := backend.CreateBucket(testBucket); err != nil {
		t.Fatal(err)
	}
	fake := &fakeS3{h: gofakes3.New(backend).Server()}
	srv := httptest.NewServer(fake)
	t.Cleanup(srv.Close)
	fake.url = srv.URL
	st, err := newS3Store(context.Background(), testBucket, S3Options{Endpoint: srv.URL, PathStyle: true, Region: "us-east-1"})
	if err != nil {
		t.Fatal(err)
	}
	return st.(*s3Bucket), fake
}

func setTunable[T any](t *testing.T, v *T, x T) {
	old := *v
	*v = x
	t.Cleanup(func() { *v = old })
}

// put writes data at key through the Store and checks the count and sum.
func put(t *testing.T, st Store, key string, data []byte) {
	t.Helper()
	n, sum, err := st.Write(context.Background(), key, false, func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	})
	if err != nil {
		t.Fatalf("write %s: %v", key, err)
	}
	if n != int64(len(data)) || sum != sha256Hex(data) {
		t.Fatalf("write %s: got %d bytes %s, want %d %s", key, n, sum, len(data), sha256Hex(data))
	}
}

// get reads the whole object at key.
func get(t *testing.T, st Store, key string) []byte {
	t.Helper()
	b, err := readAll(context.Background(), st, key)
	if err != nil {
		t.Fatalf("read %s: %v", key, err)
	}
	return b
}

func sha256Hex(b []byte) string {
	s := sha256.Sum256(b)
	return hex.EncodeToString(s[:])
}

func randomBytes(n int, seed uint64) []byte {
	r := rand.New(rand.NewPCG(seed, 1))
	b := make([]byte, n)
	for i := range b {
		b[i] = byte(r.Uint32())
	}
	return b
}

// pendingUploads lists the incomplete multipart uploads of the bucket.
func pendingUploads(t *testing.T, st *s3Bucket) []string {
	t.Helper()
	out, err := st.client.ListMultipartUploads(context.Background(), &s3.ListMultipartUploadsInput{Bucket: aws.String(testBucket)})
	if noSuchUpload(err) {
		return nil // gofakes3, before the bucket's first upload
	}
	if err != nil {
		t.Fatal(err)
	}
	var keys []string
	for _, u := range out.Uploads {
		keys = append(keys, aws.ToString(u.Key))
	}
	return keys
}

func TestS3Missing(t *testing.T) {
	st, fake := newTestS3(t)
	ctx := context.Background()
	_, err := st.Stat(ctx, "no/such.parquet")
	if !errors.Is(err, fs.ErrNotExist) || err.Error() != "stat s3://bkt/no/such.parquet: file does not exist" {
		t.Errorf("Stat: %v", err)
	}
	var pe *fs.PathError
	if !errors.As(err, &pe) || pe.Path != "s3://bkt/no/such.parquet" {
		t.Errorf("Stat: %#v is no *fs.PathError naming the object", err)
	}
	if _, err := st.Open(ctx, "no/such.parquet"); !errors.Is(err, fs.ErrNotExist) || !strings.HasPrefix(err.Error(), "open s3://bkt/no/such.parquet: ") {
		t.Errorf("Open: %v", err)
	}
	if err := st.Delete(ctx, "no/such.parquet"); err != nil {
		t.Errorf("Delete of a missing object: %v", err)
	}

	other, err := newS3Store(ctx, "nobucket", S3Options{Endpoint: fake.url, PathStyle: true})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := other.Stat(ctx, "k"); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("Stat in a missing bucket: %v", err)
	}
	if _, err := other.List(ctx, "d"); err == nil || !strings.Contains(err.Error(), "s3://nobucket/d") {
		t.Errorf("List in a missing bucket: %v", err)
	}
}

func TestS3DefaultRegion(t *testing.T) {
	_, fake := newTestS3(t)
	t.Setenv("AWS_REGION", "")
	t.Setenv("AWS_DEFAULT_REGION", "")
	other, err := newS3Store(context.Background(), testBucket, S3Options{Endpoint: fake.url, PathStyle: true})
	if err != nil {
		t.Fatal(err)
	}
	if r := other.(*s3Bucket).client.Options().Region; r != "us-east-1" {
		t.Errorf("region %q, want us-east-1", r)
	}
	put(t, other, "k", []byte("works without a region"))
	t.Setenv("AWS_REGION", "eu-west-3")
	other, _ = newS3Store(context.Background(), testBucket, S3Options{})
	if r := other.(*s3Bucket).client.Options().Region; r != "eu-west-3" {
		t.Errorf("region %q, want eu-west-3 from AWS_REGION", r)
	}
	other, _ = newS3Store(context.Background(), testBucket, S3Options{Region: "ap-south-1"})
	if r := other.(*s3Bucket).client.Options().Region; r != "ap-south-1" {
		t.Errorf("region %q, want the override ap-south-1", r)
	}
}

func TestS3WriteStatList(t *testing.T) {
	st, _ := newTestS3(t)
	ctx := context.Background()
	keys := []string{"d/b.parquet", "d/a/y=2/x", "d/a/y=10/x", "d/Z", "d2/other", "top", "dd"}
	for i, k := range keys {
		put(t, st, k, bytes.Repeat([]byte{'x'}, i))
	}
	// A "folder" object as the S3 console makes them.
	if _, err := st.client.PutObject(ctx, &s3.PutObjectInput{Bucket: aws.String(testBucket), Key: aws.String("d/a/"), Body: strings.NewReader("")}); err != nil {
		t.Fatal(err)
	}

	info, err := st.Stat(ctx, "d/b.parquet")
	if err != nil || info.Key != "d/b.parquet" || info.Size != 0 || info.ModTime.IsZero() {
		t.Errorf("Stat: %+v, %v", info, err)
	}
	if info, _ := st.Stat(ctx, "d/Z"); info.Size != 3 {
		t.Errorf("Stat d/Z: size %d, want 3", info.Size)
	}

	for _, tc := range []struct {
		dir  string
		want []string
	}{
		{"d", []string{"Z", "a/y=10/x", "a/y=2/x", "b.parquet"}},
		{"d/", []string{"Z", "a/y=10/x", "a/y=2/x", "b.parquet"}},
		{"d/a", []string{"y=10/x", "y=2/x"}},
		{"", []string{"d/Z", "d/a/y=10/x", "d/a/y=2/x", "d/b.parquet", "d2/other", "dd", "top"}},
		{"nothing", nil},
		{"d/b.parquet", nil},
	} {
		list, err := st.List(ctx, tc.dir)
		if err != nil {
			t.Fatalf("List(%q): %v", tc.dir, err)
		}
		var got []string
		for _, o := range list {
			got = append(got, o.Key)
			if o.ModTime.IsZero() {
				t.Errorf("List(%q): %s has no ModTime", tc.dir, o.Key)
			}
		}
		if fmt.Sprint(got) != fmt.Sprint(tc.want) {
			t.Errorf("List(%q) = %q, want %q", tc.dir, got, tc.want)
		}
		if tc.dir == "d" && list[0].Size != 3 {
			t.Errorf("List(d): Z has size %d, want 3", list[0].Size)
		}
	}

	if err := st.Delete(ctx, "d/Z"); err != nil {
		t.Fatal(err)
	}
	if _, err := st.Stat(ctx, "d/Z"); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("Stat after Delete: %v", err)
	}
}

func TestS3ListPages(t *testing.T) {
	st, _ := newTestS3(t)
	// gofakes3 pages ListObjectsV2 at 1000 keys.
	for i := range 1003 {
		if _, err := st.client.PutObject(context.Background(), &s3.PutObjectInput{Bucket: aws.String(testBucket), Key: aws.String(fmt.Sprintf("p/%04d", 1002-i)), Body: strings.NewReader("")}); err != nil {
			t.Fatal(err)
		}
	}
	list, err := st.List(context.Background(), "p")
	if err != nil {
		t.Fatal(err)
	}
	if len(list) != 1003 || list[0].Key != "0000" || list[1002].Key != "1002" {
		t.Errorf("List: %d keys, from %v", len(list), list[0])
	}
}

func TestS3ReadAt(t *testing.T) {
	st, _ := newTestS3(t)
	ra := int(s3ReadAhead)
	data := randomBytes(5*ra+123, 1)
	put(t, st, "obj", data)
	obj, err := st.Open(context.Background(), "obj")
	if err != nil {
		t.Fatal(err)
	}
	defer obj.Close()
	if obj.Size() != int64(len(data)) {
		t.Fatalf("Size %d, want %d", obj.Size(), len(data))
	}
	if _, ok := obj.(wholeChunkReader); !ok {
		t.Error("an S3 object should prefer whole column chunks")
	}
	size := len(data)
	for _, tc := range []struct{ off, n, want int }{
		{0, 10, 10},
		{100, 1000, 1000},
		{ra - 10, 100, 100},      // across the window's end
		{ra + 5, 3 * ra, 3 * ra}, // larger than the window
		{1, 2*ra + 1, 2*ra + 1},
		{size - 5, 10, 5}, // at the end
		{size - 10, 10, 10},
		{size, 10, 0},
		{size + 7, 1, 0},
		{3, 0, 0},
	} {
		p := make([]byte, tc.n)
		n, err := obj.ReadAt(p, int64(tc.off))
		if n != tc.want || !bytes.Equal(p[:n], data[min(tc.off, size):min(tc.off, size)+n]) {
			t.Errorf("ReadAt(%d bytes at %d) = %d bytes, want %d (or different bytes)", tc.n, tc.off, n, tc.want)
		}
		if wantEOF := tc.want < tc.n; (err == io.EOF) != wantEOF || (err != nil && err != io.EOF) {
			t.Errorf("ReadAt(%d bytes at %d): err %v, want EOF %v", tc.n, tc.off, err, wantEOF)
		}
	}

	var wg sync.WaitGroup
	for g := range 8 {
		wg.Go(func() {
			r := rand.New(rand.NewPCG(uint64(g), 2))
			for range 20 {
				off, n := r.IntN(size), r.IntN(2*ra)
				p := make([]byte, n)
				got, err := obj.ReadAt(p, int64(off))
				if want := min(n, size-off); got != want || !bytes.Equal(p[:got], data[off:off+got]) || (err != nil && err != io.EOF) {
					t.Errorf("concurrent ReadAt(%d at %d) = %d, %v", n, off, got, err)
					return
				}
			}
		})
	}
	wg.Wait()

	obj.Close()
	if _, err := obj.ReadAt(make([]byte, 1), 0); !errors.Is(err, fs.ErrClosed) {
		t.Errorf("ReadAt after Close: %v", err)
	}
}

func TestS3EmptyObject(t *testing.T) {
	st, _ := newTestS3(t)
	put(t, st, "empty", nil)
	if b := get(t, st, "empty"); len(b) != 0 {
		t.Errorf("read %d bytes of an empty object", len(b))
	}
	obj, err := st.Open(context.Background(), "empty")
	if err != nil {
		t.Fatal(err)
	}
	if n, err := obj.ReadAt(make([]byte, 4), 0); n != 0 || err != io.EOF {
		t.Errorf("ReadAt of an empty object: %d, %v", n, err)
	}
}

// Hashing streams the object through io.Copy's 32 KiB reads; the
// read-ahead window must make that one request per window, not per read.
func TestS3HashRequests(t *testing.T) {
	st, _ := newTestS3(t)
	data := randomBytes(3<<20+17, 3)
	put(t, st, "big", data)
	before := st.requests.Load()
	obj, err := st.Open(context.Background(), "big")
	if err != nil {
		t.Fatal(err)
	}
	h := sha256.New()
	n, err := io.Copy(h, io.NewSectionReader(obj, 0, obj.Size()))
	obj.Close()
	if err != nil || n != int64(len(data)) || hex.EncodeToString(h.Sum(nil)) != sha256Hex(data) {
		t.Fatalf("hash: %d bytes, %v", n, err)
	}
	got, limit := st.requests.Load()-before, int64(len(data))/s3ReadAhead+2
	if got > limit {
		t.Errorf("hashing %d bytes took %d requests, want at most %d", len(data), got, limit)
	}
	t.Logf("%d requests for %d bytes with a %d-byte window", got, len(data), s3ReadAhead)
}

func TestS3Multipart(t *testing.T) {
	st, fake := newTestS3(t)
	data := randomBytes(4*int(s3PartSize)+1234, 4)
	n, sum, err := st.Write(context.Background(), "mp/obj", false, func(w io.Writer) error {
		for b := data; len(b) > 0; {
			k := min(len(b), 10000)
			if _, err := w.Write(b[:k]); err != nil {
				return err
			}
			b = b[k:]
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n != int64(len(data)) || sum != sha256Hex(data) {
		t.Errorf("Write: %d bytes %s, want %d %s", n, sum, len(data), sha256Hex(data))
	}
	if c := fake.creates.Load(); c != 1 {
		t.Errorf("%d CreateMultipartUpload requests, want 1", c)
	}
	if !bytes.Equal(get(t, st, "mp/obj"), data) {
		t.Error("multipart object reads back different bytes")
	}
	if info, _ := st.Stat(context.Background(), "mp/obj"); info.Size != int64(len(data)) {
		t.Errorf("Stat: size %d", info.Size)
	}

	// Below the part size: one PutObject.
	put(t, st, "small", data[:s3PartSize-1])
	if c := fake.creates.Load(); c != 1 {
		t.Errorf("a small write started a multipart upload")
	}
	if up := pendingUploads(t, st); len(up) != 0 {
		t.Errorf("uploads left: %q", up)
	}
}

func TestS3WriteFailureAborts(t *testing.T) {
	st, fake := newTestS3(t)
	ctx := context.Background()
	errBoom := errors.New("boom")
	put(t, st, "kept", []byte("old content"))
	for _, tc := range []struct {
		name      string
		size      int
		panics    bool
		multipart bool
	}{
		{"small error", 100, false, false},
		{"multipart error", 3*int(s3PartSize) + 5, false, true},
		{"small panic", 100, true, false},
		{"multipart panic", 3*int(s3PartSize) + 5, true, true},
	} {
		for _, key := range []string{"fail/" + tc.name, "kept"} {
			creates := fake.creates.Load()
			var err error
			func() {
				defer func() {
					if p := recover(); p != nil {
						if !tc.panics || p != "write panicked" {
							panic(p)
						}
						err = errBoom
					} else if tc.panics {
						t.Errorf("%s: the panic did not go on up", tc.name)
					}
				}()
				_, _, err = st.Write(ctx, key, false, func(w io.Writer) error {
					if _, err := w.Write(randomBytes(tc.size, 5)); err != nil {
						return err
					}
					if tc.panics {
						panic("write panicked")
					}
					return errBoom
				})
			}()
			if err != errBoom {
				t.Errorf("%s: got %v, want write's own error", tc.name, err)
			}
			if started := fake.creates.Load() > creates; started != tc.multipart {
				t.Errorf("%s: multipart upload started: %v", tc.name, started)
			}
			if key == "kept" {
				if b := get(t, st, key); string(b) != "old content" {
					t.Errorf("%s: a failed write replaced the object", tc.name)
				}
			} else if _, err := st.Stat(ctx, key); !errors.Is(err, fs.ErrNotExist) {
				t.Errorf("%s: a failed write left an object: %v", tc.name, err)
			}
		}
		if up := pendingUploads(t, st); len(up) != 0 {
			t.Errorf("%s: uploads left: %q", tc.name, up)
		}
	}
}

func TestS3CreateIfAbsent(t *testing.T) {
	st, _ := newTestS3(t)
	ctx := context.Background()
	create := func(s string) (int64, string, error) {
		return st.Write(ctx, "m/manifest.json", true, func(w io.Writer) error {
			_, err := io.WriteString(w, s)
			return err
		})
	}
	n, sum, err := create("first")
	if err != nil || n != 5 || sum != sha256Hex([]byte("first")) {
		t.Fatalf("first create: %d %s %v", n, sum, err)
	}
	_, _, err = create("second")
	if !errors.Is(err, fs.ErrExist) || !strings.HasPrefix(err.Error(), "create s3://bkt/m/manifest.json: ") {
		t.Errorf("second create: %v, want fs.ErrExist naming the object", err)
	}
	if b := get(t, st, "m/manifest.json"); string(b) != "first" {
		t.Errorf("after a refused create the object holds %q", b)
	}
	// An error of write itself comes back as it is, and nothing is sent.
	errBoom := errors.New("boom")
	if _, _, err := st.Write(ctx, "m/other", true, func(io.Writer) error { return errBoom }); err != errBoom {
		t.Errorf("failed create: %v", err)
	}
	if _, err := st.Stat(ctx, "m/other"); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("failed create left an object: %v", err)
	}
	put(t, st, "m/manifest.json", []byte("overwritten"))
	if b := get(t, st, "m/manifest.json"); string(b) != "overwritten" {
		t.Errorf("plain write over an object: %q", b)
	}
}

// A create that was stored but whose response was lost is retried by the
// SDK and refused by the store; it is still this writer's create, and
// reported as done. Another writer's object is still refused.
func TestS3CreateRetriedAfterLostResponse(t *testing.T) {
	st, fake := newTestS3(t)
	ctx := context.Background()
	create := func(key, s string) error {
		_, _, err := st.Write(ctx, key, true, func(w io.Writer) error {
			_, err := io.WriteString(w, s)
			return err
		})
		return err
	}
	fake.loseResponses.Store(1)
	if err := create("m/_manifest.json", "mine"); err != nil {
		t.Fatalf("create whose first response was lost: %v", err)
	}
	if b := get(t, st, "m/_manifest.json"); string(b) != "mine" {
		t.Fatalf("object holds %q", b)
	}
	if err := create("m/_manifest.json", "theirs"); !errors.Is(err, fs.ErrExist) {
		t.Fatalf("create over another writer's object: %v, want fs.ErrExist", err)
	}
}

func TestS3Retry(t *testing.T) {
	st, fake := newTestS3(t)
	ctx := context.Background()

	fake.fail.Store(3)
	put(t, st, "r/obj", []byte("retried"))
	fake.fail.Store(3)
	if b := get(t, st, "r/obj"); string(b) != "retried" {
		t.Errorf("read %q", b)
	}
	fake.fail.Store(2)
	if list, err := st.List(ctx, "r"); err != nil || len(list) != 1 {
		t.Errorf("List after 503s: %v, %v", list, err)
	}
	fake.fail.Store(2)
	data := randomBytes(2*int(s3PartSize)+1, 6)
	put(t, st, "r/multi", data)
	if !bytes.Equal(get(t, st, "r/multi"), data) {
		t.Error("multipart write with 503s reads back different bytes")
	}

	// Throttling that does not end fails after s3MaxAttempts.
	fake.fail.Store(1000)
	before := st.requests.Load()
	_, err := st.Stat(ctx, "r/obj")
	if err == nil || !strings.HasPrefix(err.Error(), "stat s3://bkt/r/obj: ") {
		t.Errorf("Stat under endless 503s: %v", err)
	}
	if n := st.requests.Load() - before; n != int64(s3MaxAttempts) {
		t.Errorf("%d attempts, want %d", n, s3MaxAttempts)
	}
	fake.fail.Store(0)

	// A refusal is final.
	fake.forbid.Store(true)
	before = st.requests.Load()
	_, err = st.Stat(ctx, "r/obj")
	if err == nil || errors.Is(err, fs.ErrNotExist) || !strings.HasPrefix(err.Error(), "stat s3://bkt/r/obj: ") || !strings.Contains(err.Error(), "403") {
		t.Errorf("Stat under 403: %v", err)
	}
	if n := st.requests.Load() - before; n != 1 {
		t.Errorf("a 403 was sent %d times", n)
	}
	_, _, err = st.Write(ctx, "r/new", false, func(w io.Writer) error {
		_, err := w.Write([]byte("x"))
		return err
	})
	if err == nil || !strings.HasPrefix(err.Error(), "write s3://bkt/r/new: ") {
		t.Errorf("Write under 403: %v", err)
	}
	// A large write that the store refuses must not hang on the pipe.
	_, _, err = st.Write(ctx, "r/new", false, func(w io.Writer) error {
		for range 100 {
			if _, err := w.Write(make([]byte, s3PartSize)); err != nil {
				return fmt.Errorf("the writer's own wrapping: %w", err)
			}
		}
		return nil
	})
	if err == nil || !strings.HasPrefix(err.Error(), "write s3://bkt/r/new: ") {
		t.Errorf("large Write under 403: %v", err)
	}
}

func TestS3BodyRetry(t *testing.T) {
	st, fake := newTestS3(t)
	data := randomBytes(3*int(s3ReadAhead), 7)
	put(t, st, "b/obj", data)
	obj, err := st.Open(context.Background(), "b/obj")
	if err != nil {
		t.Fatal(err)
	}
	defer obj.Close()

	fake.cutBodies.Store(2)
	before := st.requests.Load()
	p := make([]byte, 2*s3ReadAhead)
	if n, err := obj.ReadAt(p, 100); err != nil || n != len(p) || !bytes.Equal(p, data[100:100+len(p)]) {
		t.Fatalf("ReadAt with broken bodies: %d, %v", n, err)
	}
	if n := st.requests.Load() - before; n != 3 {
		t.Errorf("%d requests, want 3 (two broken, one for the rest)", n)
	}

	fake.cutBodies.Store(int64(s3BodyAttempts))
	if _, err := obj.ReadAt(make([]byte, 10), 0); err == nil || !strings.HasPrefix(err.Error(), "read s3://bkt/b/obj: ") {
		t.Errorf("ReadAt with every body broken: %v", err)
	}
}

func TestS3AbortUploads(t *testing.T) {
	st, _ := newTestS3(t)
	ctx := context.Background()
	for _, k := range []string{"out/a.parquet", "out/sub/b.parquet", "output/c.parquet"} {
		if _, err := st.client.CreateMultipartUpload(ctx, &s3.CreateMultipartUploadInput{Bucket: aws.String(testBucket), Key: aws.String(k)}); err != nil {
			t.Fatal(err)
		}
	}
	n, err := st.abortUploads(ctx, "out")
	if err != nil || n != 2 {
		t.Errorf("abortUploads(out) = %d, %v; want 2", n, err)
	}
	if up := pendingUploads(t, st); fmt.Sprint(up) != "[output/c.parquet]" {
		t.Errorf("uploads left: %q", up)
	}
	if n, err := st.abortUploads(ctx, ""); err != nil || n != 1 {
		t.Errorf("abortUploads(\"\") = %d, %v; want 1", n, err)
	}
}

// A Parquet file read back through ranged reads of an S3 object.
func TestS3Parquet(t *testing.T) {
	st, _ := newTestS3(t)
	mem := memory.NewCheckedAllocator(memory.DefaultAllocator)
	defer mem.AssertSize(t, 0)
	schema := arrow.NewSchema([]arrow.Field{
		{Name: "id", Type: arrow.PrimitiveTypes.Int64},
		{Name: "s", Type: arrow.BinaryTypes.String},
	}, nil)
	const rows = 50000
	b := array.NewRecordBuilder(mem, schema)
	for i := range rows {
		b.Field(0).(*array.Int64Builder).Append(int64(i) * 7)
		b.Field(1).(*array.StringBuilder).Append(fmt.Sprintf("row %d", i))
	}
	rec := b.NewRecord()
	b.Release()
	tbl := array.NewTableFromRecords(schema, []arrow.Record{rec})
	rec.Release()
	var buf bytes.Buffer
	props := parquet.NewWriterProperties(parquet.WithMaxRowGroupLength(rows/4), parquet.WithAllocator(mem))
	err := pqarrow.WriteTable(tbl, &buf, rows, props, pqarrow.NewArrowWriterProperties(pqarrow.WithAllocator(mem)))
	tbl.Release()
	if err != nil {
		t.Fatal(err)
	}
	put(t, st, "pq/part-0.parquet", buf.Bytes())

	obj, err := st.Open(context.Background(), "pq/part-0.parquet")
	if err != nil {
		t.Fatal(err)
	}
	defer obj.Close()
	pf, err := file.NewParquetReader(io.NewSectionReader(obj, 0, obj.Size()), file.WithReadProps(parquet.NewReaderProperties(mem)))
	if err != nil {
		t.Fatal(err)
	}
	defer pf.Close()
	if pf.NumRowGroups() != 4 {
		t.Errorf("%d row groups, want 4", pf.NumRowGroups())
	}
	fr, err := pqarrow.NewFileReader(pf, pqarrow.ArrowReadProperties{BatchSize: 4096}, mem)
	if err != nil {
		t.Fatal(err)
	}
	got, err := fr.ReadTable(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	defer got.Release()
	if got.NumRows() != rows {
		t.Fatalf("%d rows, want %d", got.NumRows(), rows)
	}
	i := 0
	ids, ss := got.Column(0).Data().Chunks(), got.Column(1).Data().Chunks()
	for c := range ids {
		idc, sc := ids[c].(*array.Int64), ss[c].(*array.String)
		for j := range idc.Len() {
			if idc.Value(j) != int64(i)*7 || sc.Value(j) != fmt.Sprintf("row %d", i) {
				t.Fatalf("row %d: %d %q", i, idc.Value(j), sc.Value(j))
			}
			i++
		}
	}
}

// A read in flight is cancelled with the context the object was opened
// with, instead of waiting for a server that does not answer.
func TestS3ReadCancelled(t *testing.T) {
	st, fake := newTestS3(t)
	put(t, st, "x.bin", randomBytes(1000, 1))
	ctx, cancel := context.WithCancel(context.Background())
	obj, err := st.Open(ctx, "x.bin")
	if err != nil {
		t.Fatal(err)
	}
	defer obj.Close()
	fake.stallGets.Store(true)
	time.AfterFunc(50*time.Millisecond, cancel)
	start := time.Now()
	_, err = obj.ReadAt(make([]byte, 10), 0)
	if !errors.Is(err, context.Canceled) || !strings.Contains(err.Error(), "s3://bkt/x.bin") {
		t.Fatalf("read after cancel: %v; want context.Canceled naming the object", err)
	}
	if d := time.Since(start); d > 5*time.Second {
		t.Errorf("cancelled read returned after %s", d)
	}
}

// TestObjectVersion: an object's Version changes when it is replaced, on
// S3 (the ETag; here the same size, other bytes) and on local disk (the
// modification time), and stays the same when it is only opened again.
func TestObjectVersion(t *testing.T) {
	s3st, _ := newTestS3(t)
	local := t.TempDir()
	for name, c := range map[string]struct {
		st  Store
		key string
	}{"s3": {s3st, "v/obj"}, "local": {localStore{}, filepath.Join(local, "obj")}} {
		version := func() string {
			o, err := c.st.Open(context.Background(), c.key)
			if err != nil {
				t.Fatal(err)
			}
			defer o.Close()
			return o.Version()
		}
		put(t, c.st, c.key, []byte("version one"))
		a, again := version(), version()
		time.Sleep(20 * time.Millisecond) // past the file system's timestamp granularity
		put(t, c.st, c.key, []byte("version two"))
		b := version()
		if a == "" || a != again || a == b {
			t.Errorf("%s: versions %q, %q after reopening, %q after replacing", name, a, again, b)
		}
	}
}
