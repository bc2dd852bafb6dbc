// Package arrowio owns every byte lakescale reads from or writes to storage.
//
// It discovers partitioned Parquet datasets (flat or Hive-style key=value
// folders), opens Parquet files for streaming reads of selected columns,
// writes Parquet files and JSON documents atomically (temporary name
// ".<name>.tmp-*" in the destination folder, fsync, rename, fsync of the
// folder), hashes files, reads footers back for verification, removes
// temporary files left by interrupted runs and takes exclusive lock files
// (pid, host and start time; a stale lock of a dead local process is
// taken over). Parquet outputs are
// deterministic: the same records and options give the same bytes.
//
// Errors name the operation and the path, "op path: err", as *fs.PathError
// does; callers add only what they know (a partition, a column). Sentinels
// ErrNoInputs, ErrNotParquet and ErrBadPartition classify errors for
// errors.Is, and a cancelled context surfaces as context.Cause(ctx).
//
// It does not decide what to compute or which files to write; package jobs
// does. A Reader is not safe for concurrent use (open one per worker); the
// package-level functions are. Importing the package replaces Arrow's zstd
// codec with one that reuses encoders (see codec.go); its output is the
// same bytes.
package arrowio
