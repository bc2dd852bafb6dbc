package jobs

import (
	"encoding/json"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/lakescale/lakescale/arrowio"
)

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
