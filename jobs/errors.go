package jobs

import "errors"

// Sentinels for errors.Is and for exit-code decisions in the CLI.
var (
	// ErrUsage marks a bad flag value or a missing required flag (exit 2).
	ErrUsage = errors.New("usage")
	// ErrSchemaMismatch marks schema drift between input files.
	ErrSchemaMismatch = errors.New("schema mismatch")
	// ErrEmptyPartition marks an input file without rows.
	ErrEmptyPartition = errors.New("empty partition")
	// ErrInfinite marks an infinite value in a selected column.
	ErrInfinite = errors.New("infinite value")
	// ErrColumn marks an unknown or non-numeric selected column.
	ErrColumn = errors.New("bad column selection")
	// ErrOutputNotEmpty marks an output directory that holds other data.
	ErrOutputNotEmpty = errors.New("output directory not empty")
	// ErrVerify marks a dataset that does not match its manifest.
	ErrVerify = errors.New("verification failed")
	// ErrInputChanged marks an input whose size or footer changed between
	// a run's two passes.
	ErrInputChanged = errors.New("input changed during the run")
)
