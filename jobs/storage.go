package jobs

import "github.com/lakescale/lakescale/arrowio"

// Storage configures access to S3-compatible object stores for every
// s3:// location a command reads or writes. Credentials and the region
// come from the AWS SDK's standard chain (environment, shared config and
// credentials files, web identity, instance roles).
type Storage struct {
	// Endpoint is the URL of an S3-compatible service; empty means AWS,
	// or AWS_ENDPOINT_URL_S3 / AWS_ENDPOINT_URL when set.
	Endpoint string
	// PathStyle addresses buckets as ENDPOINT/bucket/key, which most
	// S3-compatible stores need.
	PathStyle bool
	// Region overrides the SDK's region when not empty.
	Region string
}

// SetStorage applies s to every object-store location used afterwards.
func SetStorage(s Storage) {
	arrowio.SetS3Options(arrowio.S3Options{Endpoint: s.Endpoint, PathStyle: s.PathStyle, Region: s.Region})
}
