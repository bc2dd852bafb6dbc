package arrowio

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"net/http"
	"slices"
	"strings"
	"sync/atomic"
	"time"

	"github.com/aws/aws-sdk-go-v2/aws"
	"github.com/aws/aws-sdk-go-v2/aws/ratelimit"
	"github.com/aws/aws-sdk-go-v2/aws/retry"
	awshttp "github.com/aws/aws-sdk-go-v2/aws/transport/http"
	"github.com/aws/aws-sdk-go-v2/config"
	"github.com/aws/aws-sdk-go-v2/feature/s3/transfermanager"
	"github.com/aws/aws-sdk-go-v2/service/s3"
	"github.com/aws/smithy-go"
)

func init() { newS3Store = openS3Store }

// Tunables of the S3 backend; package variables so that tests can shrink
// them.
var (
	// s3ReadAhead is the least number of bytes one ranged GET fetches:
	// small sequential reads (hashing, Parquet page reads) are served from
	// that window instead of costing a request each.
	s3ReadAhead int64 = 8 << 20

	// s3PartSize is both the size at which Write switches from a single
	// PutObject to a multipart upload and the size of each part. S3 allows
	// at most 10,000 parts (Amazon S3 API reference: UploadPart), so one
	// object can hold at most 10,000 × s3PartSize bytes.
	s3PartSize int64 = 16 << 20

	// s3UploadConcurrency is the number of parts of one Write in flight;
	// a Write buffers up to s3UploadConcurrency+2 parts in memory.
	s3UploadConcurrency = 3

	// s3MaxAttempts and s3MaxBackoff bound the SDK's retries of transient
	// failures (throttling, 5xx, broken connections) of one request.
	s3MaxAttempts = 6
	s3MaxBackoff  = 5 * time.Second

	// s3BodyAttempts bounds the attempts at reading the body of one ranged
	// GET, which the SDK does not retry; s3BodyBackoff is the pause before
	// the second attempt, doubled before each further one.
	s3BodyAttempts = 4
	s3BodyBackoff  = 200 * time.Millisecond

	// s3RequestTimeout bounds one whole request, body included, so that a
	// server that stops sending in the middle of a body does not hang the
	// run; the request is then retried (reads) or the write fails. It is
	// far longer than one read-ahead window or upload part takes.
	s3RequestTimeout = 10 * time.Minute

	// s3ResponseTimeout bounds the wait for the headers of a response, so
	// that a request to a hung server fails (and is retried) instead of
	// hanging the run.
	s3ResponseTimeout = 2 * time.Minute
)

// defaultS3Region is used when neither S3Options.Region nor the SDK's
// chain (AWS_REGION, the shared config file, ...) names a region, so that
// S3-compatible stores, which mostly ignore the region, work without one.
const defaultS3Region = "us-east-1"

// s3Bucket is the Store of one S3 bucket. Keys are object keys without the
// bucket; errors name objects as s3://bucket/key.
type s3Bucket struct {
	bucket string
	client *s3.Client
	tm     *transfermanager.Client

	// requests counts the HTTP requests sent, retries included.
	requests atomic.Int64
}

// openS3Store builds the Store of bucket with the credentials, region and
// settings of the SDK's default chain (config.LoadDefaultConfig: the
// environment, the shared config and credentials files, SSO, web identity,
// the container and instance metadata endpoints), overridden by opts. It
// sends no request.
func openS3Store(ctx context.Context, bucket string, opts S3Options) (Store, error) {
	var loadOpts []func(*config.LoadOptions) error
	if opts.Region != "" {
		loadOpts = append(loadOpts, config.WithRegion(opts.Region))
	}
	cfg, err := config.LoadDefaultConfig(ctx, loadOpts...)
	if err != nil {
		return nil, fmt.Errorf("s3://%s: load AWS configuration: %w", bucket, err)
	}
	if cfg.Region == "" {
		cfg.Region = defaultS3Region
	}
	st := &s3Bucket{bucket: bucket}
	st.client = s3.NewFromConfig(cfg, func(o *s3.Options) {
		if opts.Endpoint != "" {
			o.BaseEndpoint = aws.String(opts.Endpoint)
		}
		o.UsePathStyle = opts.PathStyle
		o.Retryer = retry.NewStandard(func(so *retry.StandardOptions) {
			so.MaxAttempts = s3MaxAttempts
			so.MaxBackoff = s3MaxBackoff
			// The client-side retry quota would fail requests outright after
			// a burst of errors; a batch job would rather wait them out,
			// within MaxAttempts.
			so.RateLimiter = ratelimit.None
		})
		// Whole-object checksums cannot check ranged GETs; S3 returns none
		// for them, but some compatible stores echo the stored ones.
		o.ResponseChecksumValidation = aws.ResponseChecksumValidationWhenRequired
		if b, ok := o.HTTPClient.(*awshttp.BuildableClient); ok {
			o.HTTPClient = b.WithTransportOptions(func(t *http.Transport) {
				t.ResponseHeaderTimeout = s3ResponseTimeout
			}).WithTimeout(s3RequestTimeout)
		}
		o.HTTPClient = countingClient{o.HTTPClient, &st.requests}
	})
	st.tm = transfermanager.New(st.client, func(o *transfermanager.Options) {
		o.PartSizeBytes = s3PartSize
		o.MultipartUploadThreshold = s3PartSize
		o.Concurrency = s3UploadConcurrency
		// As configured (AWS_REQUEST_CHECKSUM_CALCULATION=when_required
		// for stores that reject the SDK's default CRC32 checksums); the
		// transfer manager would otherwise impose its own default.
		o.RequestChecksumCalculation = cfg.RequestChecksumCalculation
		// Abort a failed multipart upload even when ctx was canceled.
		o.FailTimeout = time.Minute
	})
	return st, nil
}

// countingClient counts the HTTP requests of a store.
type countingClient struct {
	next s3.HTTPClient
	n    *atomic.Int64
}

func (c countingClient) Do(r *http.Request) (*http.Response, error) {
	c.n.Add(1)
	return c.next.Do(r)
}

// uri names an object the way a user writes it.
func (s *s3Bucket) uri(key string) string { return schemeS3 + s.bucket + "/" + key }

// pathErr returns err of op on key as "op s3://bucket/key: err", with
// the S3 errors that mean a missing object as fs.ErrNotExist and, for
// writes, those that mean a refused conditional create as fs.ErrExist.
func (s *s3Bucket) pathErr(op, key string, err error) error {
	code, status := "", 0
	var ae smithy.APIError
	if errors.As(err, &ae) {
		code = ae.ErrorCode()
	}
	var re *awshttp.ResponseError
	if errors.As(err, &re) {
		status = re.HTTPStatusCode()
	}
	switch {
	case code == "NoSuchBucket":
		err = &classified{sentinel: fs.ErrNotExist, err: fmt.Errorf("bucket %s does not exist", s.bucket)}
	case code == "NoSuchKey" || code == "NotFound" || status == http.StatusNotFound:
		err = fs.ErrNotExist
	case op == "create" && (code == "PreconditionFailed" || status == http.StatusPreconditionFailed ||
		code == "ConditionalRequestConflict"):
		// Amazon S3 API reference: PutObject, If-None-Match.
		err = fs.ErrExist
	case op == "create" && (code == "NotImplemented" || status == http.StatusNotImplemented):
		// A store that does not implement conditional writes.
		err = &classified{ErrNoConditionalCreate, err}
	}
	return &fs.PathError{Op: op, Path: s.uri(key), Err: err}
}

// Stat sends a HeadObject request.
func (s *s3Bucket) Stat(ctx context.Context, key string) (ObjectInfo, error) {
	out, err := s.client.HeadObject(ctx, &s3.HeadObjectInput{Bucket: &s.bucket, Key: &key})
	if err != nil {
		return ObjectInfo{}, s.pathErr("stat", key, err)
	}
	return ObjectInfo{Key: key, Size: aws.ToInt64(out.ContentLength), ModTime: aws.ToTime(out.LastModified)}, nil
}

// List pages through ListObjectsV2 below dir+"/". Keys ending in "/" are
// the empty "folder" objects some tools create and are left out.
func (s *s3Bucket) List(ctx context.Context, dir string) ([]ObjectInfo, error) {
	prefix := dirPrefix(dir)
	var out []ObjectInfo
	p := s3.NewListObjectsV2Paginator(s.client, &s3.ListObjectsV2Input{Bucket: &s.bucket, Prefix: &prefix})
	for p.HasMorePages() {
		page, err := p.NextPage(ctx)
		if err != nil {
			return nil, s.pathErr("list", strings.TrimSuffix(prefix, "/"), err)
		}
		for _, o := range page.Contents {
			k := aws.ToString(o.Key)
			if strings.HasSuffix(k, "/") || !strings.HasPrefix(k, prefix) {
				continue
			}
			out = append(out, ObjectInfo{Key: k[len(prefix):], Size: aws.ToInt64(o.Size), ModTime: aws.ToTime(o.LastModified)})
		}
	}
	// S3 lists in UTF-8 byte order already; S3-compatible stores may not.
	slices.SortFunc(out, func(a, b ObjectInfo) int { return strings.Compare(a.Key, b.Key) })
	return out, nil
}

// dirPrefix is the key prefix of the objects below the folder dir: dir+"/",
// or "" for the bucket's root.
func dirPrefix(dir string) string {
	dir = strings.TrimSuffix(dir, "/")
	if dir == "" {
		return ""
	}
	return dir + "/"
}

// Open sends a HeadObject request for the size and ETag; ReadAt then sends
// ranged GETs under ctx, each conditional on that ETag so that a read
// never mixes two versions of the object.
func (s *s3Bucket) Open(ctx context.Context, key string) (Object, error) {
	out, err := s.client.HeadObject(ctx, &s3.HeadObjectInput{Bucket: &s.bucket, Key: &key})
	if err != nil {
		return nil, s.pathErr("open", key, err)
	}
	return &s3Object{st: s, ctx: ctx, key: key, size: aws.ToInt64(out.ContentLength), etag: out.ETag, readAhead: s3ReadAhead}, nil
}

// Delete sends a DeleteObject request.
func (s *s3Bucket) Delete(ctx context.Context, key string) error {
	_, err := s.client.DeleteObject(ctx, &s3.DeleteObjectInput{Bucket: &s.bucket, Key: &key})
	if err != nil {
		if err = s.pathErr("delete", key, err); !errors.Is(err, fs.ErrNotExist) {
			return err
		}
	}
	return nil
}

// Write streams what write produces to S3 through the transfer manager: a
// single PutObject below s3PartSize, a multipart upload above it, which is
// aborted if write fails or panics, so no object and no parts are left.
//
// A create-if-absent write is buffered in memory and sent as one
// PutObject with If-None-Match: * (Amazon S3 API reference: PutObject),
// which S3 refuses with 412 Precondition Failed (or 409
// ConditionalRequestConflict while another such write is in flight) when
// the key exists. Such writes are small (manifests, lock files), and a
// conditional single PutObject is what S3-compatible stores support most
// widely.
func (s *s3Bucket) Write(ctx context.Context, key string, ifAbsent bool, write func(io.Writer) error) (int64, string, error) {
	if ifAbsent {
		return s.create(ctx, key, write)
	}
	pr, pw := io.Pipe()
	done := make(chan error, 1)
	go func() {
		_, err := s.tm.UploadObject(ctx, &transfermanager.UploadObjectInput{Bucket: &s.bucket, Key: &key, Body: pr})
		pr.CloseWithError(err) // unblocks write if the upload failed
		done <- err
	}()
	finished := false
	// Deferred so that a panic in write also ends the upload (aborting a
	// multipart one) before it goes on up.
	defer func() {
		if !finished {
			pw.CloseWithError(errWriteAborted)
			<-done //nolint:errcheck // the panic or earlier error is what goes on up
		}
	}()

	bw := bufio.NewWriterSize(pw, writeBufferSize)
	tw := newTeeWriter(bw)
	werr := write(tw)
	if werr == nil && tw.err == nil {
		tw.err = bw.Flush()
	}
	switch {
	case tw.err != nil:
		// Sending failed; that is the root cause of whatever write reports.
		pw.CloseWithError(errWriteAborted)
		finished = true
		if err := <-done; err != nil {
			return 0, "", s.pathErr("write", key, err)
		}
		return 0, "", s.pathErr("write", key, tw.err)
	case werr != nil:
		pw.CloseWithError(werr)
		finished = true
		<-done //nolint:errcheck // the upload was aborted because of werr, which is returned
		return 0, "", werr
	}
	_ = pw.Close() // always nil for a pipe writer
	finished = true
	if err := <-done; err != nil {
		return 0, "", s.pathErr("write", key, err)
	}
	return tw.n, tw.sum(), nil
}

// errWriteAborted ends the upload of a Write whose write function failed.
var errWriteAborted = errors.New("write aborted")

// create is Write with ifAbsent: one conditional PutObject.
func (s *s3Bucket) create(ctx context.Context, key string, write func(io.Writer) error) (int64, string, error) {
	var buf bytes.Buffer
	tw := newTeeWriter(&buf)
	if err := write(tw); err != nil {
		return 0, "", err
	}
	_, err := s.client.PutObject(ctx, &s3.PutObjectInput{
		Bucket:      &s.bucket,
		Key:         &key,
		Body:        bytes.NewReader(buf.Bytes()),
		IfNoneMatch: aws.String("*"),
	})
	if err != nil {
		err = s.pathErr("create", key, err)
		// A create that was stored but whose response was lost is sent
		// again by the SDK's retryer and then refused: the object is
		// ours exactly when it holds our bytes.
		if errors.Is(err, fs.ErrExist) && s.holds(ctx, key, buf.Bytes()) {
			return tw.n, tw.sum(), nil
		}
		return 0, "", err
	}
	return tw.n, tw.sum(), nil
}

// holds reports whether the object at key exists and holds exactly b.
func (s *s3Bucket) holds(ctx context.Context, key string, b []byte) bool {
	got, err := readAll(ctx, s, key)
	return err == nil && bytes.Equal(got, b)
}

// abortUploads aborts the incomplete multipart uploads below the folder dir
// ("" for the whole bucket), which a killed process leaves behind and S3
// bills for, and returns how many it aborted. A store that does not
// implement ListMultipartUploads gives 0 and no error.
func (s *s3Bucket) abortUploads(ctx context.Context, dir string) (int, error) {
	prefix := dirPrefix(dir)
	n := 0
	// Amazon S3 API reference: ListMultipartUploads, AbortMultipartUpload.
	p := s3.NewListMultipartUploadsPaginator(s.client, &s3.ListMultipartUploadsInput{Bucket: &s.bucket, Prefix: &prefix})
	for p.HasMorePages() {
		page, err := p.NextPage(ctx)
		if err != nil {
			if notImplemented(err) || noSuchUpload(err) {
				return n, nil
			}
			return n, s.pathErr("list uploads", strings.TrimSuffix(prefix, "/"), err)
		}
		for _, u := range page.Uploads {
			_, err := s.client.AbortMultipartUpload(ctx, &s3.AbortMultipartUploadInput{Bucket: &s.bucket, Key: u.Key, UploadId: u.UploadId})
			switch {
			case err == nil:
				n++
			case !errors.Is(s.pathErr("abort upload", aws.ToString(u.Key), err), fs.ErrNotExist):
				// NoSuchUpload: completed or aborted meanwhile.
				return n, s.pathErr("abort upload", aws.ToString(u.Key), err)
			}
		}
	}
	return n, nil
}

// noSuchUpload reports whether err is S3's NoSuchUpload, which gofakes3
// answers ListMultipartUploads with in a bucket that never had an upload.
func noSuchUpload(err error) bool {
	var ae smithy.APIError
	return errors.As(err, &ae) && ae.ErrorCode() == "NoSuchUpload"
}

// notImplemented reports whether err is a server's answer that it does not
// implement the operation.
func notImplemented(err error) bool {
	var ae smithy.APIError
	if errors.As(err, &ae) && ae.ErrorCode() == "NotImplemented" {
		return true
	}
	var re *awshttp.ResponseError
	return errors.As(err, &re) && re.HTTPStatusCode() == http.StatusNotImplemented
}
