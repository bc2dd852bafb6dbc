package jobs

import (
	"errors"
	"fmt"
	"sync"
	"time"

	"github.com/lakescale/lakescale/arrowio"
)

// lockName is the lock file inside an output tree. It starts with '_' so
// that discovery ignores it, and outputState does not count it as a
// foreign file.
const lockName = "_lock"

// hookLockLost is called when the renewal finds the lock lost; tests use
// it to wait for that moment.
var hookLockLost = func() {}

// lockRenewEvery is how often a held lock's lease is renewed: a quarter of
// the lease, so that three renewals in a row may fail (a slow store)
// before the lock could be taken over.
var lockRenewEvery = arrowio.LockLease / 4

// lockOutput takes the output's lock so that two overlapping runs cannot
// both write and commit it; the second fails at once. A lock left by a
// process of this host that no longer runs, or one whose lease ran out (a
// killed container or batch job), is taken over, with a note on Out and a
// warning in the log. While held, the lease is renewed in the background.
// The returned function stops the renewal and releases the lock.
func lockOutput(cfg *Config, log *runLog) (func(), error) {
	path := arrowio.Join(cfg.Output, lockName)
	l, stale, err := arrowio.AcquireLock(path, cfg.Now(), cfg.SkipCommitCheck)
	if errors.Is(err, arrowio.ErrLocked) {
		return nil, fmt.Errorf("output %s is in use by another run (a dead run's lock is taken over when its lease ends; remove %s sooner only if that run is dead): %w", cfg.Output, path, err)
	}
	if errors.Is(err, arrowio.ErrNoConditionalCreate) {
		return nil, fmt.Errorf("%w%s", err, skipCheckHint)
	}
	if err != nil {
		return nil, err
	}
	if stale != nil {
		why := "which no longer runs"
		if stale.Expires != "" {
			why += " or whose lease ended at " + stale.Expires
		}
		_, _ = fmt.Fprintf(cfg.Out, "took over the stale lock of pid %d on host %s (started %s), %s\n", stale.PID, stale.Host, stale.Started, why)
		log.warn("took over a stale lock", "pid", stale.PID, "host", stale.Host, "started", stale.Started)
	}
	stop, done := make(chan struct{}), make(chan struct{})
	var mu sync.Mutex // l is used by the renewal and by lockCheck
	var lost error    // the ErrLockLost error, once the lock is lost
	lostErr := func(err error) error {
		return fmt.Errorf("output %s: lost its lock while working (another run took it over, or its lease ran out without a renewal); nothing of this run is committed: %w", cfg.Output, err)
	}
	cfg.lockCheck = func() error {
		mu.Lock()
		defer mu.Unlock()
		if lost == nil {
			if err := l.Check(cfg.Now()); errors.Is(err, arrowio.ErrLockLost) {
				lost = err
			} else if err != nil {
				return err
			}
		}
		if lost != nil {
			return lostErr(lost)
		}
		return nil
	}
	go func() {
		defer close(done)
		t := time.NewTicker(lockRenewEvery)
		defer t.Stop()
		for {
			select {
			case <-stop:
				return
			case <-t.C:
				mu.Lock()
				err := l.Renew(cfg.Now())
				if errors.Is(err, arrowio.ErrLockLost) {
					lost = err
				}
				mu.Unlock()
				if err == nil {
					continue
				}
				log.warn("could not renew the output lock", "error", err.Error())
				if errors.Is(err, arrowio.ErrLockLost) {
					// Stop the run's work at once: another run owns the
					// output now. Commit and prepareOutput check too.
					if cfg.stop != nil {
						cfg.stop(lostErr(err))
					}
					hookLockLost()
					return
				}
			}
		}
	}()
	return func() {
		close(stop)
		<-done
		_ = l.Release()
	}, nil
}

// checkLock fails when the output's lock, if this command holds one, has
// been taken over.
func (c *Config) checkLock() error {
	if c.lockCheck == nil {
		return nil
	}
	return c.lockCheck()
}
