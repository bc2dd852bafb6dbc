// Package arrowio owns every byte lakescale reads from or writes to storage.
//
// Every function takes locations: plain paths, file:///absolute/path or
// s3://bucket/prefix. Locate maps a location to its Store (the local disk,
// or one S3 bucket through the AWS SDK) and a key; a Store describes,
// lists, reads ranges of, writes whole (or creates only if absent) and
// deletes objects, and the functions here are built on those operations,
// so that each works the same on both backends. What only a local disk
// has (folders to create and prune, symbolic links, fsync of folders,
// temporary names) is handled beside the Store, for local locations only.
//
// It discovers partitioned Parquet datasets (flat or Hive-style key=value
// folders), opens Parquet files for streaming reads of selected columns,
// as Arrow record batches or, for numeric columns, as dense values in
// reused buffers (Reader.ScanColumn), hashing each file on the way
// (Reader.Checksum), rewrites flat Parquet files column chunk by column
// chunk with some columns' values mapped (RewriteParquetAtomic), writes
// Parquet files
// and JSON documents atomically (on local disk: temporary name
// ".<name>.tmp-*" in the destination folder, fsync, rename, fsync of the
// folder, optionally left to a background Commits; on S3: one upload,
// multipart above a threshold, that appears whole or not at all), creates commit points only if absent (CreateFile:
// link(2) on local disk, If-None-Match on S3) and checks that a store
// honours that (CheckConditionalCreate), reads footers back for
// verification, removes temporary files left by interrupted runs and
// takes exclusive lock files with a renewable lease (pid, host, start
// time, expiry; a stale lock of a dead local process or an expired lease
// is taken over). Parquet outputs are deterministic: the same records and
// options give the same bytes.
//
// Errors name the operation and the location, "op location: err", as
// *fs.PathError does; callers add only what they know (a partition, a
// column). Sentinels ErrNoInputs, ErrNotParquet, ErrBadPartition,
// ErrLocked and ErrNoConditionalCreate classify errors for errors.Is, a
// missing object matches fs.ErrNotExist and a refused create ErrExist,
// and a cancelled context surfaces as context.Cause(ctx).
//
// It does not decide what to compute or which files to write; package jobs
// does. A Reader is not safe for concurrent use (open one per worker); the
// package-level functions and Stores are. Importing the package replaces
// Arrow's zstd codec with one that reuses encoders and stores pages zstd
// cannot shrink in raw blocks (see codec.go); other pages are the same
// bytes as Arrow's codec gives.
package arrowio
