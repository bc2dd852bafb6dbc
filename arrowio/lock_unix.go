//go:build unix

package arrowio

import (
	"errors"
	"os"
	"strings"
	"syscall"
)

// processAlive reports whether a process with this pid exists: kill(2)
// with signal 0 checks without sending anything; ESRCH means there is no
// such process, EPERM that there is one owned by another user (POSIX).
func processAlive(pid int) bool {
	err := syscall.Kill(pid, 0)
	return err == nil || !errors.Is(err, syscall.ESRCH)
}

// pidNamespace names this process's PID namespace on Linux (the target
// of /proc/self/ns/pid, "pid:[inode]"; proc(5)), or "" where there is
// none to read. Two containers can share a host name but not see each
// other's processes; the namespace tells them apart.
func pidNamespace() string {
	ns, err := os.Readlink("/proc/self/ns/pid")
	if err != nil {
		return ""
	}
	return ns
}

// bootID is the Linux kernel's random boot id
// (/proc/sys/kernel/random/boot_id; proc(5)), or "" elsewhere.
func bootID() string {
	b, err := os.ReadFile("/proc/sys/kernel/random/boot_id")
	if err != nil {
		return ""
	}
	return strings.TrimSpace(string(b))
}
