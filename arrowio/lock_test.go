package arrowio

import (
	"encoding/json"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"testing"
	"time"
)

var lockTime = time.Date(2026, 3, 1, 2, 0, 0, 0, time.UTC)

func TestLockExclusive(t *testing.T) {
	path := filepath.Join(t.TempDir(), "out", "_lock")
	l, stale, err := AcquireLock(path, lockTime, false)
	if err != nil || stale != nil {
		t.Fatalf("first acquire: %v, stale %v", err, stale)
	}
	var h LockHolder
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(data, &h); err != nil {
		t.Fatal(err)
	}
	host, _ := os.Hostname()
	if h.PID != os.Getpid() || h.Host != host || h.Started != "2026-03-01T02:00:00Z" {
		t.Fatalf("lock file holds %+v", h)
	}
	// This process is alive, so a second acquire fails at once.
	_, _, err = AcquireLock(path, lockTime, false)
	if !errors.Is(err, ErrLocked) {
		t.Fatalf("second acquire: %v, want ErrLocked", err)
	}
	if !strings.Contains(err.Error(), path) || !strings.Contains(err.Error(), "pid") {
		t.Fatalf("error %q does not name the lock file and holder", err)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(path); !os.IsNotExist(err) {
		t.Fatalf("lock file still there after Release: %v", err)
	}
	if err := l.Release(); err != nil {
		t.Fatalf("second Release: %v", err)
	}
	l, _, err = AcquireLock(path, lockTime, false)
	if err != nil {
		t.Fatalf("acquire after release: %v", err)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
}

// deadPID returns the pid of a process that has exited.
func deadPID(t *testing.T) int {
	t.Helper()
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	if err := cmd.Run(); err != nil {
		t.Fatal(err)
	}
	return cmd.Process.Pid
}

func writeHolder(t *testing.T, path string, h LockHolder) {
	t.Helper()
	b, _ := json.Marshal(h)
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

func TestLockStaleTakeover(t *testing.T) {
	if runtime.GOOS == "windows" {
		t.Skip("process liveness is not checked here")
	}
	path := filepath.Join(t.TempDir(), "_lock")
	host, _ := os.Hostname()
	pid := deadPID(t)
	writeHolder(t, path, LockHolder{PID: pid, Host: host, Started: "2026-02-28T02:00:00Z"})
	l, stale, err := AcquireLock(path, lockTime, false)
	if err != nil {
		t.Fatalf("stale lock of dead pid %d not taken over: %v", pid, err)
	}
	defer func() { _ = l.Release() }()
	if stale == nil || stale.PID != pid {
		t.Fatalf("stale holder %+v, want pid %d", stale, pid)
	}
}

func TestLockNotTakenOver(t *testing.T) {
	host, _ := os.Hostname()
	for name, content := range map[string]string{
		// Another host's process cannot be checked from here.
		"other host": `{"pid":` + "12345" + `,"host":"` + host + `-elsewhere","started":"2026-02-28T02:00:00Z"}`,
		// This test process is alive.
		"live process": `{"pid":` + strconv.Itoa(os.Getpid()) + `,"host":"` + host + `","started":"2026-02-28T02:00:00Z"}`,
		"unreadable":   "",
	} {
		t.Run(name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "_lock")
			if err := os.WriteFile(path, []byte(content), 0o644); err != nil {
				t.Fatal(err)
			}
			_, _, err := AcquireLock(path, lockTime, false)
			if !errors.Is(err, ErrLocked) {
				t.Fatalf("got %v, want ErrLocked", err)
			}
			if got, _ := os.ReadFile(path); string(got) != content {
				t.Fatalf("lock file changed to %q", got)
			}
		})
	}
}

// Release leaves a lock that is no longer its own.
func TestLockReleaseKeepsOthers(t *testing.T) {
	path := filepath.Join(t.TempDir(), "_lock")
	l, _, err := AcquireLock(path, lockTime, false)
	if err != nil {
		t.Fatal(err)
	}
	writeHolder(t, path, LockHolder{PID: 1, Host: "elsewhere", Started: "2026-03-01T03:00:00Z"})
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(path); err != nil {
		t.Fatalf("another holder's lock was removed: %v", err)
	}
}

// A lock whose folders did not exist leaves none behind once released,
// unless something else was written there meanwhile.
func TestLockRemovesCreatedFolders(t *testing.T) {
	root := t.TempDir()
	path := filepath.Join(root, "a", "b", "_lock")
	l, _, err := AcquireLock(path, lockTime, false)
	if err != nil {
		t.Fatal(err)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(filepath.Join(root, "a")); !os.IsNotExist(err) {
		t.Fatalf("created folder left behind: %v", err)
	}

	l, _, err = AcquireLock(path, lockTime, false)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(filepath.Join(root, "a", "b", "data"), nil, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(filepath.Join(root, "a", "b", "data")); err != nil {
		t.Fatalf("folder with data removed: %v", err)
	}

	// An existing folder is never removed, even when empty.
	l, _, err = AcquireLock(filepath.Join(root, "_lock"), lockTime, false)
	if err != nil {
		t.Fatal(err)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(root); err != nil {
		t.Fatalf("existing folder removed: %v", err)
	}
}

// A lock whose lease ran out is taken over whatever its host; one whose
// lease still runs is not.
func TestLockLeaseExpiry(t *testing.T) {
	path := filepath.Join(t.TempDir(), "_lock")
	old := LockHolder{PID: 7, Host: "pod-that-is-gone", Started: "2026-03-01T01:00:00Z", Expires: "2026-03-01T01:10:00Z"}
	writeHolder(t, path, old)
	_, _, err := AcquireLock(path, lockTime.Add(-time.Hour).Add(5*time.Minute), false) // 01:05, lease runs
	if !errors.Is(err, ErrLocked) || !strings.Contains(err.Error(), "lease until 2026-03-01T01:10:00Z") {
		t.Fatalf("lock with a running lease: %v; want ErrLocked naming the lease", err)
	}
	l, stale, err := AcquireLock(path, lockTime, false) // 02:00, lease over
	if err != nil {
		t.Fatalf("expired lease not taken over: %v", err)
	}
	if stale == nil || *stale != old {
		t.Fatalf("stale holder %+v, want %+v", stale, old)
	}
	var h LockHolder
	data, _ := os.ReadFile(path)
	if err := json.Unmarshal(data, &h); err != nil {
		t.Fatal(err)
	}
	if want := lockTime.Add(LockLease).Format(time.RFC3339); h.Expires != want {
		t.Errorf("new lease until %s, want %s", h.Expires, want)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
}

// Renew moves the lease on, and fails once another run took the lock.
func TestLockRenew(t *testing.T) {
	path := filepath.Join(t.TempDir(), "_lock")
	l, _, err := AcquireLock(path, lockTime, false)
	if err != nil {
		t.Fatal(err)
	}
	later := lockTime.Add(7 * time.Minute)
	if err := l.Renew(later); err != nil {
		t.Fatal(err)
	}
	var h LockHolder
	data, _ := os.ReadFile(path)
	if err := json.Unmarshal(data, &h); err != nil {
		t.Fatal(err)
	}
	if want := later.Add(LockLease).Format(time.RFC3339); h.Expires != want || h.Started != "2026-03-01T02:00:00Z" {
		t.Fatalf("after renew: %+v; want started kept and expires %s", h, want)
	}
	// Still ours: a second acquire is refused.
	if _, _, err := AcquireLock(path, later, false); !errors.Is(err, ErrLocked) {
		t.Fatalf("acquire of a renewed lock: %v", err)
	}
	writeHolder(t, path, LockHolder{PID: 1, Host: "elsewhere", Started: "2026-03-01T03:00:00Z"})
	if err := l.Renew(later); !errors.Is(err, ErrLockLost) || !strings.Contains(err.Error(), path) {
		t.Fatalf("renew after take-over: %v; want ErrLockLost naming %s", err, path)
	}
	if err := l.Release(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(path); err != nil {
		t.Fatalf("release removed the new holder's lock: %v", err)
	}
}

// A dead pid in another PID namespace of the same host name (a container
// sharing the host's name) says nothing about that process: not taken over.
func TestLockOtherPIDNamespace(t *testing.T) {
	if pidNamespace() == "" {
		t.Skip("no PID namespace to compare here")
	}
	path := filepath.Join(t.TempDir(), "_lock")
	host, _ := os.Hostname()
	writeHolder(t, path, LockHolder{PID: deadPID(t), Host: host, Started: "2026-02-28T02:00:00Z", PIDNamespace: "pid:[1]", Expires: "2099-01-01T00:00:00Z"})
	if _, _, err := AcquireLock(path, lockTime, false); !errors.Is(err, ErrLocked) {
		t.Fatalf("lock of another PID namespace: %v, want ErrLocked", err)
	}
	// The same for another boot (another machine of the same name).
	if bootID() != "" {
		writeHolder(t, path, LockHolder{PID: deadPID(t), Host: host, Started: "2026-02-28T02:00:00Z", PIDNamespace: pidNamespace(), BootID: "another-boot", Expires: "2099-01-01T00:00:00Z"})
		if _, _, err := AcquireLock(path, lockTime, false); !errors.Is(err, ErrLocked) {
			t.Fatalf("lock of another boot: %v, want ErrLocked", err)
		}
	}
}

// A lock whose lease was not renewed in time counts as lost for its own
// holder too, before anyone else may take it over.
func TestLockOwnLeaseRunsOut(t *testing.T) {
	path := filepath.Join(t.TempDir(), "_lock")
	l, _, err := AcquireLock(path, lockTime, false)
	if err != nil {
		t.Fatal(err)
	}
	defer func() { _ = l.Release() }()
	if err := l.Check(lockTime.Add(LockLease / 2)); err != nil {
		t.Fatalf("check within the lease: %v", err)
	}
	late := lockTime.Add(LockLease - lockMargin)
	if err := l.Check(late); !errors.Is(err, ErrLockLost) {
		t.Fatalf("check at the lease's end: %v, want ErrLockLost", err)
	}
	if err := l.Renew(late); !errors.Is(err, ErrLockLost) {
		t.Fatalf("renew after the lease: %v, want ErrLockLost", err)
	}
	// The file is still this lock's: the lease, not the file, ran out.
	if err := l.Check(lockTime.Add(time.Minute)); err != nil {
		t.Fatalf("check with an earlier clock: %v", err)
	}
}
