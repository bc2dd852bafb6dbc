//go:build !unix

package arrowio

// fsyncDir is a no-op where folders cannot be opened for syncing.
func fsyncDir(string) error { return nil }

// linkUnsupported cannot tell here; a failed link is reported as it is.
func linkUnsupported(error) bool { return false }
