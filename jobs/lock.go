package jobs

import (
	"errors"
	"fmt"

	"github.com/lakescale/lakescale/arrowio"
)

// lockName is the lock file inside an output tree. It starts with '_' so
// that discovery ignores it, and prepareOutput does not count it as a
// foreign file.
const lockName = "_lock"

// lockOutput takes the output's lock so that two overlapping runs cannot
// both write and commit it; the second fails at once. A lock left by a
// process of this host that no longer runs is taken over, with a note on
// Out and a warning in the log. The returned function releases the lock.
func lockOutput(cfg *Config, log *runLog) (func(), error) {
	path := arrowio.Join(cfg.Output, lockName)
	l, stale, err := arrowio.AcquireLock(path, cfg.Now())
	if errors.Is(err, arrowio.ErrLocked) {
		return nil, fmt.Errorf("output %s is in use by another run (remove %s only if that run is dead): %w", cfg.Output, path, err)
	}
	if err != nil {
		return nil, err
	}
	if stale != nil {
		_, _ = fmt.Fprintf(cfg.Out, "took over the stale lock of pid %d on host %s (started %s), which no longer runs\n", stale.PID, stale.Host, stale.Started)
		log.warn("took over a stale lock", "pid", stale.PID, "host", stale.Host, "started", stale.Started)
	}
	return func() { _ = l.Release() }, nil
}
