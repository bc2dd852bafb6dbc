//go:build unix

package arrowio

import (
	"errors"
	"os"
	"syscall"
)

// fsyncDir makes a rename inside dir durable (fsync(2) on the folder, as
// POSIX requires for directory entries). File systems that cannot sync a
// folder report EINVAL or ENOTSUP; there is nothing more to do on those.
func fsyncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if errors.Is(err, syscall.EINVAL) || errors.Is(err, syscall.ENOTSUP) {
		err = nil
	}
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	return err
}
