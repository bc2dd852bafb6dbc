package arrowio

import (
	"errors"
	"testing"
)

func TestCheckLocation(t *testing.T) {
	for _, loc := range []string{"lake", "/abs/lake", "../up", "file:///abs", "s3://b", "s3://b/", "s3://b/p/k=v/x.parquet", "s3://b/p/"} {
		if err := CheckLocation(loc); err != nil {
			t.Errorf("CheckLocation(%q) = %v", loc, err)
		}
	}
	for _, loc := range []string{"gs://b/x", "s3:///x", "s3://b/in/../out", "s3://b/./x", "s3://b//x", "file://rel", "file://"} {
		if err := CheckLocation(loc); !errors.Is(err, ErrBadLocation) {
			t.Errorf("CheckLocation(%q) = %v, want ErrBadLocation", loc, err)
		}
	}
}

func TestJoinAndDir(t *testing.T) {
	for _, c := range []struct{ got, want string }{
		{Join("s3://b/p", "site=a/x.parquet"), "s3://b/p/site=a/x.parquet"},
		{Join("s3://b/p/", "_manifest.json"), "s3://b/p/_manifest.json"},
		{Join("s3://b"), "s3://b"},
		{Join("s3://b/jobs", "../../other/in"), "s3://b/other/in"},
		{Join("s3://b/x", ".."), "s3://b"},
		{Join("file:///data/out", "x"), "file:///data/out/x"},
		{Join("out", "site=a/x.parquet"), "out/site=a/x.parquet"},
		{Dir("s3://b/p/job.toml"), "s3://b/p"},
		{Dir("s3://b/job.toml"), "s3://b"},
		{Dir("file:///data/job.toml"), "file:///data"},
		{Dir("jobs/job.toml"), "jobs"},
		{Dir("s3://b"), "s3://b"},
		{Dir("file:///"), "file:///"},
	} {
		if c.got != c.want {
			t.Errorf("got %q, want %q", c.got, c.want)
		}
	}
}
