package jobs

import (
	"context"
	"errors"
	"fmt"

	"github.com/lakescale/lakescale/arrowio"
)

// Clean removes what failed or killed runs left in an output tree, under
// the output's lock so that no running run loses files:
//
//   - in every tree: temporary files of interrupted writes (on an object
//     store, incomplete multipart uploads);
//   - in an uncommitted tree (the _uncommitted marker and no manifest):
//     every Parquet file, the marker and, on local disk, the folders left
//     empty, so that the next run starts from an empty output.
//
// A committed dataset's files are never removed: with a manifest present
// only temporary files (and a marker left by a run killed before it
// changed anything) go. A tree without marker or manifest that holds
// other files is refused, as run refuses it. The statistics cache stays.
func Clean(ctx context.Context, cfg Config) (err error) {
	if cfg.Output == "" {
		return fmt.Errorf("%w: clean needs an output location", ErrUsage)
	}
	if err := cfg.checkLocations(); err != nil {
		return err
	}
	// Looked at before the lock is taken, which would create the folder.
	if _, exists, err := arrowio.ListDir(cfg.Output); err != nil || !exists {
		if err == nil {
			fmt.Fprintf(cfg.Out, "nothing to clean: %s does not exist\n", cfg.Output)
		}
		return err
	}
	ctx, cfg.stop = context.WithCancelCause(ctx)
	defer cfg.stop(nil)
	log, err := newRunLog(&cfg, "clean")
	if err != nil {
		return err
	}
	defer func() { err = log.done(err) }()
	unlock, err := lockOutput(&cfg, log)
	if err != nil {
		return err
	}
	defer unlock()

	state, foreign, err := outputState(cfg.Output)
	if err != nil {
		return err
	}
	if state == outForeign {
		return fmt.Errorf("%w: %s holds %s and neither %s nor %s, so lakescale did not write it; nothing removed", ErrOutputNotEmpty, cfg.Output, foreign, ManifestName, markerName)
	}
	if err := cfg.checkLock(); err != nil {
		return err
	}
	temps, err := arrowio.RemoveTemps(cfg.Output)
	if err != nil {
		return err
	}
	removed := 0
	if state == outUncommitted {
		files, err := arrowio.Discover(cfg.Output)
		if err != nil && !errors.Is(err, arrowio.ErrNoInputs) {
			return err
		}
		if err := cfg.checkLock(); err != nil {
			return err
		}
		for _, f := range files {
			if err := context.Cause(ctx); err != nil {
				return err
			}
			if err := arrowio.Remove(f.Abs); err != nil {
				return err
			}
			removed++
		}
	}
	// A marker beside a manifest is left by a commit killed before it
	// removed the marker; either way the marker goes.
	if err := arrowio.Remove(arrowio.Join(cfg.Output, markerName)); err != nil {
		return err
	}
	if err := arrowio.RemoveEmptyDirs(cfg.Output); err != nil {
		return err
	}
	kind := "committed dataset kept"
	switch state {
	case outUncommitted:
		kind = "uncommitted run"
	case outEmpty:
		kind = "no dataset"
	}
	fmt.Fprintf(cfg.Out, "removed %d output files and %d temporary files from %s (%s)\n", removed, temps, cfg.Output, kind)
	log.phase("clean", "removed", removed, "temporary", temps)
	return nil
}
