package jobs

import (
	"bytes"
	"context"
	"errors"
	"io"
	"net/http/httptest"
	"path/filepath"
	"strings"
	"testing"

	"github.com/johannesboyne/gofakes3"
	"github.com/johannesboyne/gofakes3/backend/s3mem"

	"github.com/lakescale/lakescale/arrowio"
)

// startS3 serves an in-memory S3 (github.com/johannesboyne/gofakes3) with
// one bucket on a loopback listener and points the storage layer at it.
func startS3(t *testing.T, bucket string) {
	t.Helper()
	dir := t.TempDir()
	for k, v := range map[string]string{
		"AWS_ACCESS_KEY_ID": "test", "AWS_SECRET_ACCESS_KEY": "test", "AWS_SESSION_TOKEN": "",
		"AWS_EC2_METADATA_DISABLED": "true", "AWS_PROFILE": "",
		"AWS_CONFIG_FILE": filepath.Join(dir, "config"), "AWS_SHARED_CREDENTIALS_FILE": filepath.Join(dir, "credentials"),
		"AWS_ENDPOINT_URL": "", "AWS_ENDPOINT_URL_S3": "",
	} {
		t.Setenv(k, v)
	}
	backend := s3mem.New()
	if err := backend.CreateBucket(bucket); err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(gofakes3.New(backend).Server())
	t.Cleanup(srv.Close)
	SetStorage(Storage{Endpoint: srv.URL, PathStyle: true})
	t.Cleanup(func() { SetStorage(Storage{}) })
}

// A run from s3:// to s3:// commits; committing the same output again is
// refused by the store (If-None-Match) and leaves the first manifest.
func TestS3SecondCommitRefused(t *testing.T) {
	startS3(t, "lake")
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeDemoLake(t, lake)
	files, err := arrowio.Discover(lake)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range files {
		b, err := arrowio.ReadFile(f.Abs)
		if err != nil {
			t.Fatal(err)
		}
		if err := arrowio.WriteFileAtomic("s3://lake/in/"+f.Rel, func(w io.Writer) error { _, err := w.Write(b); return err }); err != nil {
			t.Fatal(err)
		}
	}
	in, out := "s3://lake/in", "s3://lake/out"
	if err := Run(context.Background(), testConfig(t, in, out, 2)); err != nil {
		t.Fatal(err)
	}
	if err := Verify(context.Background(), io.Discard, out); err != nil {
		t.Fatal(err)
	}
	path := out + "/" + ManifestName
	first, err := arrowio.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	m, _, err := readManifest(path)
	if err != nil {
		t.Fatal(err)
	}
	m.CreatedAt = "2030-01-01T00:00:00Z"
	err = writeManifest(path, m, false)
	if !errors.Is(err, arrowio.ErrExist) || !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), path) {
		t.Fatalf("second commit: %v; want a refusal naming %s", err, path)
	}
	if again, _ := arrowio.ReadFile(path); !bytes.Equal(again, first) {
		t.Error("the refused commit changed the manifest")
	}
}
