//go:build unix

package arrowio

import (
	"errors"
	"syscall"
)

// processAlive reports whether a process with this pid exists: kill(2)
// with signal 0 checks without sending anything; ESRCH means there is no
// such process, EPERM that there is one owned by another user (POSIX).
func processAlive(pid int) bool {
	err := syscall.Kill(pid, 0)
	return err == nil || !errors.Is(err, syscall.ESRCH)
}
