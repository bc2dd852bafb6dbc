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

// linkUnsupported reports whether link(2) failed because the file system
// cannot make hard links (EPERM on FAT and many FUSE mounts, ENOTSUP,
// ENOSYS; POSIX link(2)), not because of the file.
func linkUnsupported(err error) bool {
	return errors.Is(err, syscall.EPERM) || errors.Is(err, syscall.ENOTSUP) || errors.Is(err, syscall.ENOSYS) || errors.Is(err, syscall.EOPNOTSUPP)
}
