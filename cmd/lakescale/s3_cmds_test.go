package main

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"github.com/aws/aws-sdk-go-v2/aws"
	"github.com/aws/aws-sdk-go-v2/credentials"
	"github.com/aws/aws-sdk-go-v2/service/s3"
	"github.com/johannesboyne/gofakes3"
	"github.com/johannesboyne/gofakes3/backend/s3mem"
	"github.com/rogpeppe/go-internal/testscript"
)

// The S3 scenarios run lakescale against an in-memory S3 server
// (github.com/johannesboyne/gofakes3) on a real loopback listener. The
// helpers below talk to it with the AWS SDK's own client, not with
// lakescale's storage code, so they check what lakescale stored
// independently of how it reads it back.

// cmdS3Server starts the server and points the scripts' environment at it:
//
//	s3-server [-no-conditional] BUCKET...
//
// -no-conditional strips If-None-Match from every request, which makes
// the server behave like a store that does not honour create-only-if-
// absent writes.
func cmdS3Server(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "s3-server")
	strip := len(args) > 0 && args[0] == "-no-conditional"
	if strip {
		args = args[1:]
	}
	if len(args) == 0 {
		ts.Fatalf("usage: s3-server [-no-conditional] BUCKET...")
	}
	backend := s3mem.New()
	for _, b := range args {
		if err := backend.CreateBucket(b); err != nil {
			ts.Fatalf("create bucket %s: %v", b, err)
		}
	}
	h := gofakes3.New(backend).Server()
	if strip {
		inner := h
		h = http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
			r.Header.Del("If-None-Match")
			inner.ServeHTTP(w, r)
		})
	}
	srv := httptest.NewServer(h) // listens on 127.0.0.1
	ts.Defer(srv.Close)
	for k, v := range map[string]string{ // the keys of s3EnvKeys
		"AWS_ENDPOINT_URL":            srv.URL,
		"LAKESCALE_S3_PATH_STYLE":     "true",
		"AWS_ACCESS_KEY_ID":           "lakescale-test",
		"AWS_SECRET_ACCESS_KEY":       "lakescale-test-secret",
		"AWS_REGION":                  "us-east-1",
		"AWS_EC2_METADATA_DISABLED":   "true",
		"AWS_CONFIG_FILE":             os.DevNull,
		"AWS_SHARED_CREDENTIALS_FILE": os.DevNull,
	} {
		ts.Setenv(k, v)
	}
}

// s3EnvKeys are the variables s3-server sets.
var s3EnvKeys = []string{
	"AWS_ENDPOINT_URL", "LAKESCALE_S3_PATH_STYLE", "AWS_ACCESS_KEY_ID", "AWS_SECRET_ACCESS_KEY",
	"AWS_REGION", "AWS_EC2_METADATA_DISABLED", "AWS_CONFIG_FILE", "AWS_SHARED_CREDENTIALS_FILE",
}

// s3Env returns s3-server's variables as KEY=VALUE, for programs that a
// custom command starts itself (testscript's exec passes them already).
func s3Env(ts *testscript.TestScript) []string {
	var env []string
	for _, k := range s3EnvKeys {
		if v := ts.Getenv(k); v != "" {
			env = append(env, k+"="+v)
		}
	}
	return env
}

// s3ParquetCount counts the *.parquet objects below s3://bucket/prefix.
func s3ParquetCount(ts *testscript.TestScript, uri string) int {
	bucket, prefix := splitURI(ts, uri)
	n := 0
	for _, k := range s3Keys(ts, s3Client(ts), bucket, prefix) {
		if strings.HasSuffix(k, ".parquet") {
			n++
		}
	}
	return n
}

// s3Client builds an SDK client for the script's server.
func s3Client(ts *testscript.TestScript) *s3.Client {
	endpoint := ts.Getenv("AWS_ENDPOINT_URL")
	if endpoint == "" {
		ts.Fatalf("no S3 server: run s3-server first")
	}
	return s3.New(s3.Options{
		BaseEndpoint: aws.String(endpoint),
		UsePathStyle: true,
		Region:       "us-east-1",
		Credentials:  credentials.NewStaticCredentialsProvider("lakescale-test", "lakescale-test-secret", ""),
	})
}

// splitURI splits s3://bucket/prefix.
func splitURI(ts *testscript.TestScript, uri string) (bucket, prefix string) {
	rest, ok := strings.CutPrefix(uri, "s3://")
	if !ok {
		ts.Fatalf("%s: want s3://bucket/prefix", uri)
	}
	bucket, prefix, _ = strings.Cut(rest, "/")
	return bucket, strings.TrimSuffix(prefix, "/")
}

// s3Keys lists the keys below prefix, relative to it, sorted.
func s3Keys(ts *testscript.TestScript, c *s3.Client, bucket, prefix string) []string {
	var keys []string
	p := s3.NewListObjectsV2Paginator(c, &s3.ListObjectsV2Input{Bucket: aws.String(bucket), Prefix: aws.String(prefix + "/")})
	for p.HasMorePages() {
		page, err := p.NextPage(context.Background())
		if err != nil {
			ts.Fatalf("list s3://%s/%s: %v", bucket, prefix, err)
		}
		for _, o := range page.Contents {
			keys = append(keys, strings.TrimPrefix(aws.ToString(o.Key), prefix+"/"))
		}
	}
	sort.Strings(keys)
	return keys
}

// cmdS3Put uploads every file below a local folder:
//
//	s3-put DIR s3://bucket/prefix
func cmdS3Put(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "s3-put")
	if len(args) != 2 {
		ts.Fatalf("usage: s3-put DIR s3://bucket/prefix")
	}
	c := s3Client(ts)
	bucket, prefix := splitURI(ts, args[1])
	root := ts.MkAbs(args[0])
	err := filepath.Walk(root, func(p string, info os.FileInfo, err error) error {
		if err != nil || info.IsDir() {
			return err
		}
		rel, _ := filepath.Rel(root, p)
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		_, err = c.PutObject(context.Background(), &s3.PutObjectInput{
			Bucket: aws.String(bucket), Key: aws.String(prefix + "/" + filepath.ToSlash(rel)), Body: strings.NewReader(string(b)),
		})
		return err
	})
	if err != nil {
		ts.Fatalf("s3-put: %v", err)
	}
}

// cmdS3Get downloads every object below a prefix into a local folder:
//
//	s3-get s3://bucket/prefix DIR
func cmdS3Get(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "s3-get")
	if len(args) != 2 {
		ts.Fatalf("usage: s3-get s3://bucket/prefix DIR")
	}
	c := s3Client(ts)
	bucket, prefix := splitURI(ts, args[0])
	dir := ts.MkAbs(args[1])
	for _, k := range s3Keys(ts, c, bucket, prefix) {
		out, err := c.GetObject(context.Background(), &s3.GetObjectInput{Bucket: aws.String(bucket), Key: aws.String(prefix + "/" + k)})
		if err != nil {
			ts.Fatalf("get %s/%s: %v", args[0], k, err)
		}
		b, err := io.ReadAll(out.Body)
		out.Body.Close()
		if err != nil {
			ts.Fatalf("get %s/%s: %v", args[0], k, err)
		}
		dst := filepath.Join(dir, filepath.FromSlash(k))
		if err := os.MkdirAll(filepath.Dir(dst), 0o755); err != nil {
			ts.Fatalf("%v", err)
		}
		if err := os.WriteFile(dst, b, 0o644); err != nil {
			ts.Fatalf("%v", err)
		}
	}
}

// cmdS3Ls prints the keys below a prefix, relative to it, one per line:
//
//	s3-ls s3://bucket/prefix
func cmdS3Ls(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "s3-ls")
	if len(args) != 1 {
		ts.Fatalf("usage: s3-ls s3://bucket/prefix")
	}
	bucket, prefix := splitURI(ts, args[0])
	for _, k := range s3Keys(ts, s3Client(ts), bucket, prefix) {
		fmt.Fprintln(ts.Stdout(), k)
	}
}

// cmdS3Rm deletes objects:
//
//	s3-rm s3://bucket/key...
func cmdS3Rm(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "s3-rm")
	c := s3Client(ts)
	for _, a := range args {
		bucket, key := splitURI(ts, a)
		if _, err := c.DeleteObject(context.Background(), &s3.DeleteObjectInput{Bucket: aws.String(bucket), Key: aws.String(key)}); err != nil {
			ts.Fatalf("delete %s: %v", a, err)
		}
	}
}
