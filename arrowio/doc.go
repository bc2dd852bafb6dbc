// Package arrowio owns every byte lakescale reads from or writes to storage.
//
// It discovers partitioned Parquet datasets (flat or Hive-style key=value
// folders), opens Parquet files for streaming reads of selected columns,
// writes Parquet files and JSON documents atomically (temporary name in the
// destination folder, fsync, rename, fsync of the folder), hashes files, and
// reads footers back for verification. Every error it returns names the
// operation and the path.
//
// It does not decide what to compute or which files to write; package jobs
// does. A Reader is not safe for concurrent use (open one per worker); the
// package-level functions are.
package arrowio
