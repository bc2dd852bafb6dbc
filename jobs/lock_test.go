package jobs

import (
	"context"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/lakescale/lakescale/arrowio"
)

// foreignLock is a lock file of another host's live run, its lease
// running far beyond any test clock.
const foreignLock = `{"pid":1,"host":"elsewhere","started":"2026-01-02T03:04:05Z","expires":"2099-01-01T00:00:00Z"}` + "\n"

// While a command holds the output's lock, its lease is renewed in the
// background; unlocking stops the renewal and removes the lock.
func TestLockLeaseRenewed(t *testing.T) {
	defer func(d time.Duration) { lockRenewEvery = d }(lockRenewEvery)
	lockRenewEvery = 5 * time.Millisecond

	out := filepath.Join(t.TempDir(), "out")
	start := time.Date(2026, 3, 1, 2, 0, 0, 0, time.UTC)
	var mu sync.Mutex
	ticks := 0
	cfg := Config{Output: out, Now: func() time.Time {
		mu.Lock()
		defer mu.Unlock()
		ticks++
		return start.Add(time.Duration(ticks) * time.Minute)
	}}
	log, err := newRunLog(&cfg, "test")
	if err != nil {
		t.Fatal(err)
	}
	unlock, err := lockOutput(&cfg, log)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(out, lockName)
	first := lockExpiry(t, path)
	deadline := time.Now().Add(5 * time.Second)
	for lockExpiry(t, path) == first {
		if time.Now().After(deadline) {
			t.Fatalf("lease still ends at %s after 5 s of renewals every %s", first, lockRenewEvery)
		}
		time.Sleep(time.Millisecond)
	}
	unlock()
	if _, err := os.Stat(path); !os.IsNotExist(err) {
		t.Fatalf("lock left after unlock: %v", err)
	}
}

func lockExpiry(t *testing.T, path string) string {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var h arrowio.LockHolder
	if err := json.Unmarshal(b, &h); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return h.Expires
}

// A run whose lock is taken over while it works (its lease ran out, say
// while the machine was suspended) does not commit.
func TestLockLostRunDoesNotCommit(t *testing.T) {
	defer func(d time.Duration) { lockRenewEvery = d }(lockRenewEvery)
	lockRenewEvery = 2 * time.Millisecond
	tmp := t.TempDir()
	lake, out := filepath.Join(tmp, "lake"), filepath.Join(tmp, "out")
	writeDemoLake(t, lake)
	defer func(h func(string)) { hookFileWritten = h }(hookFileWritten)
	defer func(h func()) { hookLockLost = h }(hookLockLost)
	lostSeen := make(chan struct{})
	hookLockLost = func() { close(lostSeen) }
	var once sync.Once
	hookFileWritten = func(string) {
		once.Do(func() {
			// Written again and again until the renewal has seen it: a
			// renewal that read the lock just before one write may
			// overwrite it (Renew reads, then writes), but not every one.
			other := foreignLock
			deadline := time.After(10 * time.Second)
			for {
				if err := os.WriteFile(filepath.Join(out, lockName), []byte(other), 0o644); err != nil {
					t.Error(err)
				}
				select {
				case <-lostSeen:
					return
				case <-deadline:
					t.Error("the renewal never saw the lock taken over")
					return
				case <-time.After(time.Millisecond):
				}
			}
		})
	}
	err := Run(context.Background(), testConfig(t, lake, out, 1))
	if !errors.Is(err, arrowio.ErrLockLost) || !strings.Contains(err.Error(), "nothing of this run is committed") {
		t.Fatalf("run that lost its lock: %v; want ErrLockLost", err)
	}
	if _, err := os.Stat(filepath.Join(out, ManifestName)); !os.IsNotExist(err) {
		t.Fatalf("manifest committed after the lock was lost: %v", err)
	}
	if got, _ := os.ReadFile(filepath.Join(out, lockName)); !strings.Contains(string(got), "elsewhere") {
		t.Errorf("the new holder's lock was removed or changed: %q", got)
	}
}

// Lock.Check, which guards the irreversible steps, sees a take-over at
// once, without waiting for a renewal.
func TestLockCheckSeesTakeOver(t *testing.T) {
	defer func(d time.Duration) { lockRenewEvery = d }(lockRenewEvery)
	lockRenewEvery = time.Hour
	out := filepath.Join(t.TempDir(), "out")
	cfg := Config{Output: out, Now: time.Now}
	log, err := newRunLog(&cfg, "test")
	if err != nil {
		t.Fatal(err)
	}
	unlock, err := lockOutput(&cfg, log)
	if err != nil {
		t.Fatal(err)
	}
	defer unlock()
	if err := cfg.checkLock(); err != nil {
		t.Fatalf("own lock: %v", err)
	}
	other := foreignLock
	if err := os.WriteFile(filepath.Join(out, lockName), []byte(other), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := cfg.checkLock(); !errors.Is(err, arrowio.ErrLockLost) {
		t.Fatalf("after a take-over: %v, want ErrLockLost", err)
	}
	if err := prepareOutput(&cfg); !errors.Is(err, arrowio.ErrLockLost) {
		t.Fatalf("prepareOutput after a take-over: %v, want ErrLockLost", err)
	}
}

// A run whose lease runs out without a renewal (the machine was
// suspended, say: here its clock jumps 20 minutes) stops and commits
// nothing, although no other run has taken the lock yet.
func TestLockLeaseLapsedRunStops(t *testing.T) {
	defer func(d time.Duration) { lockRenewEvery = d }(lockRenewEvery)
	lockRenewEvery = 2 * time.Millisecond
	tmp := t.TempDir()
	lake, out := filepath.Join(tmp, "lake"), filepath.Join(tmp, "out")
	writeDemoLake(t, lake)
	cfg := testConfig(t, lake, out, 1)
	base := cfg.Now()
	var jumped atomic.Bool
	cfg.Now = func() time.Time {
		if jumped.Load() {
			return base.Add(20 * time.Minute)
		}
		return base
	}
	defer func(h func(string)) { hookFileWritten = h }(hookFileWritten)
	defer func(h func()) { hookLockLost = h }(hookLockLost)
	lostSeen := make(chan struct{})
	hookLockLost = func() { close(lostSeen) }
	var once sync.Once
	hookFileWritten = func(string) {
		once.Do(func() {
			jumped.Store(true)
			select {
			case <-lostSeen:
			case <-time.After(10 * time.Second):
				t.Error("the renewal never saw the lease run out")
			}
		})
	}
	err := Run(context.Background(), cfg)
	if !errors.Is(err, arrowio.ErrLockLost) || !strings.Contains(err.Error(), "lease ended") {
		t.Fatalf("run whose lease ran out: %v; want ErrLockLost for the lease", err)
	}
	if _, err := os.Stat(filepath.Join(out, ManifestName)); !os.IsNotExist(err) {
		t.Fatalf("manifest committed after the lease ran out: %v", err)
	}
}
