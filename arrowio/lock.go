package arrowio

import (
	"bytes"
	"crypto/rand"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"time"
)

// ErrLocked marks a lock file held by another run.
var ErrLocked = errors.New("locked by another run")

// LockHolder is what a lock file records about the process holding it.
type LockHolder struct {
	PID     int    `json:"pid"`
	Host    string `json:"host"`
	Started string `json:"started"` // RFC 3339, UTC
	// PIDNamespace is the holder's PID namespace (Linux), so that a
	// process is judged dead only from inside the namespace it ran in.
	PIDNamespace string `json:"pid_ns,omitempty"`
	// BootID identifies the running kernel (Linux), which the host name
	// and namespace alone do not: two machines or containers can share
	// a name, and namespace numbers repeat across boots and hosts.
	BootID string `json:"boot_id,omitempty"`
	// Token is random, so that two acquisitions never write the same
	// bytes: a lock file holding this lock's bytes is this lock.
	Token string `json:"token,omitempty"`
	// Expires ends the holder's lease unless it renews it (Lock.Renew)
	// first; RFC 3339, UTC. Empty in lock files of earlier versions,
	// which never expire.
	Expires string `json:"expires,omitempty"`
}

// LockLease is how long a lock stays valid without renewal. A holder
// renews it well before then (every LockLease/4 is the intent); a lock
// whose lease ran out belongs to a run that died, on whatever host, and
// is taken over. This is what frees the lock of a killed container or
// batch job, whose host name is never seen again. Hosts' clocks must
// agree to well within the lease.
const LockLease = 10 * time.Minute

// ErrLockLost is returned by Renew and Check when the lock file no longer
// holds this lock (another run took it over), or when this lock's lease
// ran out without a renewal, after which another run may take it.
var ErrLockLost = errors.New("lock lost")

// Lock is a held lock file; Release gives it up.
type Lock struct {
	st      Store
	key     string
	path    string
	holder  LockHolder
	content []byte
	expires time.Time // the lease end content records
	created string    // topmost folder AcquireLock created for the lock, or ""
}

// AcquireLock takes the lock file at path, creating it (and its folder)
// with a create-only-if-absent write (link(2) on local disk, If-None-Match
// on S3) so that of two processes only one can succeed. The file records
// this process's pid, host name, boot id, PID namespace, start time, a
// random token and the end of its lease (now + LockLease).
//
// When path already exists and its holder is a process of this host, boot
// and PID namespace that no longer runs, or its lease ended before now,
// the lock is stale: it is removed and taken, and the old holder is
// returned. Any other holder, whose process cannot be checked from here
// and whose lease still runs, is not taken over: the error wraps ErrLocked
// and names the holder; it is returned at once, without waiting. Two
// processes that find the same stale lock at the same moment could in
// principle both take it: the take-over re-reads the file just before
// removing it, which narrows but does not close that window.
//
// With unchecked the lock file is created as CreateFileUnchecked creates
// files, for stores that cannot carry out create-only-if-absent writes.
func AcquireLock(path string, now time.Time, unchecked bool) (*Lock, *LockHolder, error) {
	st, key, err := Locate(path)
	if err != nil {
		return nil, nil, err
	}
	host, err := os.Hostname()
	if err != nil {
		return nil, nil, pathError("lock", path, fmt.Errorf("host name: %w", err))
	}
	var token [8]byte
	if _, err := rand.Read(token[:]); err != nil {
		return nil, nil, pathError("lock", path, err)
	}
	me := LockHolder{PID: os.Getpid(), Host: host, Started: now.UTC().Format(time.RFC3339), PIDNamespace: pidNamespace(), BootID: bootID(), Token: hex.EncodeToString(token[:])}
	content, err := me.encode(now)
	if err != nil {
		return nil, nil, pathError("lock", path, err)
	}
	created := ""
	if st == Local {
		for d := filepath.Dir(key); ; d = filepath.Dir(d) {
			if _, err := os.Lstat(d); err == nil || filepath.Dir(d) == d {
				break
			}
			created = d
		}
		if err := os.MkdirAll(filepath.Dir(key), 0o755); err != nil {
			return nil, nil, pathError("lock", path, unwrapPath(err))
		}
	}
	var stale *LockHolder
	for attempt := 0; ; attempt++ {
		write := func(w io.Writer) error {
			_, err := w.Write(content)
			return err
		}
		var err error
		if unchecked {
			_, _, err = createUnchecked(st, key, path, write)
		} else {
			_, _, err = st.Write(background, key, true, write)
		}
		if err == nil {
			return &Lock{st: st, key: key, path: path, holder: me, content: content, expires: wall(now).Add(LockLease), created: created}, stale, nil
		}
		if !errors.Is(err, fs.ErrExist) {
			return nil, nil, pathError("lock", path, unwrapPath(err))
		}
		old, err := readAll(background, st, key)
		if errors.Is(err, fs.ErrNotExist) && attempt < 3 {
			continue // released meanwhile
		}
		if err != nil {
			return nil, nil, pathError("lock", path, unwrapPath(err))
		}
		var h LockHolder
		if err := json.Unmarshal(old, &h); err != nil || h.PID <= 0 || h.Host == "" {
			return nil, nil, pathError("lock", path, fmt.Errorf("%w: unreadable lock file (%q); remove it if no lakescale run is writing here", ErrLocked, bytes.TrimSpace(old)))
		}
		// Only a process of this host, boot and PID namespace can be
		// checked (lock files of earlier versions name neither).
		sameNS := (h.PIDNamespace == "" || h.PIDNamespace == me.PIDNamespace) && (h.BootID == "" || h.BootID == me.BootID)
		dead := h.Host == host && sameNS && !processAlive(h.PID)
		if !dead && !h.expired(now) || attempt >= 3 {
			until := ""
			if h.Expires != "" {
				until = ", lease until " + h.Expires
			}
			return nil, nil, pathError("lock", path, fmt.Errorf("%w: held by pid %d on host %s since %s%s", ErrLocked, h.PID, h.Host, h.Started, until))
		}
		// Stale: remove it only if it is still the lock we judged.
		if again, err := readAll(background, st, key); err != nil || !bytes.Equal(again, old) {
			continue
		}
		if err := st.Delete(background, key); err != nil {
			return nil, nil, pathError("lock", path, unwrapPath(err))
		}
		stale = &h
	}
}

// encode renders h with its lease starting at now.
func (h LockHolder) encode(now time.Time) ([]byte, error) {
	h.Expires = now.Add(LockLease).UTC().Format(time.RFC3339)
	b, err := json.Marshal(h)
	return append(b, '\n'), err
}

// expired reports whether h's lease ended before now. A lock without a
// lease never expires.
func (h LockHolder) expired(now time.Time) bool {
	t, err := time.Parse(time.RFC3339, h.Expires)
	return err == nil && t.Before(now)
}

// Renew extends the lease to now + LockLease. It re-reads the lock file
// first and fails with ErrLockLost when the file no longer holds this
// lock. The check and the write are two steps; the lease is long against
// the renewal interval so that a renewal never races a take-over in
// practice.
func (l *Lock) Renew(now time.Time) error {
	if l == nil || l.content == nil {
		return nil
	}
	if err := l.verify(now, "renew lock"); err != nil {
		return err
	}
	content, err := l.holder.encode(now)
	if err != nil {
		return pathError("renew lock", l.path, err)
	}
	if _, _, err := l.st.Write(background, l.key, false, func(w io.Writer) error {
		_, err := w.Write(content)
		return err
	}); err != nil {
		// The write may have been stored although it reported an error
		// (a lost response); then the lock holds the new content.
		if cur, rerr := readAll(background, l.st, l.key); rerr == nil && bytes.Equal(cur, content) {
			l.content, l.expires = content, wall(now).Add(LockLease)
			return nil
		}
		return err
	}
	l.content, l.expires = content, wall(now).Add(LockLease)
	return nil
}

// wall drops the monotonic clock reading from t: leases are compared on
// the wall clock, as other hosts compare them, and the monotonic clock
// stops while a machine is suspended.
func wall(t time.Time) time.Time { return t.Round(0) }

// lockMargin is how long before its recorded end a lease counts as over
// for its holder, so that a holder stops before anyone else could take
// the lock over, with room for clocks that disagree a little.
const lockMargin = LockLease / 10

// leaseRuns fails with ErrLockLost once the lease this lock last wrote is
// (nearly) over at now: another run may take it over from then on.
func (l *Lock) leaseRuns(now time.Time, op string) error {
	if !wall(now).Before(l.expires.Add(-lockMargin)) {
		return pathError(op, l.path, fmt.Errorf("%w: its lease ended at %s without a renewal", ErrLockLost, l.expires.UTC().Format(time.RFC3339)))
	}
	return nil
}

// Check fails with ErrLockLost when the lock file no longer holds this
// lock, or when this lock's lease is (nearly) over at now, so that it may
// be taken over at any moment. Callers check just before an irreversible
// step (removing files, committing).
func (l *Lock) Check(now time.Time) error {
	if l == nil || l.content == nil {
		return nil
	}
	return l.verify(now, "check lock")
}

// verify fails with ErrLockLost, errors reading "op path: ...", when the
// lease is (nearly) over at now or the lock file no longer holds l.
func (l *Lock) verify(now time.Time, op string) error {
	if err := l.leaseRuns(now, op); err != nil {
		return err
	}
	cur, err := readAll(background, l.st, l.key)
	if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return pathError(op, l.path, unwrapPath(err))
	}
	if err != nil || !bytes.Equal(cur, l.content) {
		return pathError(op, l.path, ErrLockLost)
	}
	return nil
}

// Path is the lock file's path.
func (l *Lock) Path() string { return l.path }

// Release removes the lock file if it still holds what AcquireLock wrote,
// and then the folders AcquireLock created for it if they are empty, so
// that a run that failed before writing anything leaves no trace. Calling
// it again does nothing.
func (l *Lock) Release() error {
	if l == nil || l.content == nil {
		return nil
	}
	defer func() { l.content = nil }()
	cur, err := readAll(background, l.st, l.key)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return pathError("unlock", l.path, unwrapPath(err))
	}
	if !bytes.Equal(cur, l.content) {
		return nil // not ours any more; leave it to its holder
	}
	if err := l.st.Delete(background, l.key); err != nil {
		return err
	}
	if l.created != "" {
		// os.Remove fails on a folder that is not empty, which ends the climb.
		for d := filepath.Dir(l.key); os.Remove(d) == nil && d != l.created; {
			d = filepath.Dir(d)
		}
	}
	return nil
}

// HeldLock returns the holder of the lock file at path while it holds it:
// nil when there is no lock file or its lease ended before now. A lock
// file that cannot be decoded counts as held, by an unknown holder.
func HeldLock(path string, now time.Time) (*LockHolder, error) {
	st, key, err := Locate(path)
	if err != nil {
		return nil, err
	}
	b, err := readAll(background, st, key)
	if errors.Is(err, fs.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, pathError("lock", path, unwrapPath(err))
	}
	var h LockHolder
	if err := json.Unmarshal(b, &h); err != nil {
		return &LockHolder{}, nil
	}
	if h.expired(now) {
		return nil, nil
	}
	return &h, nil
}
