// Package manifests defines the JSON documents lakescale writes: the
// dataset manifest (_manifest.json, the commit point of a run), the
// statistics file written by the measure command, and the per-file
// parameter block embedded in each output's Parquet key-value metadata.
//
// It owns the wire types, their canonical encoding (indented JSON, struct
// field order, sorted map keys, floats that round-trip exactly, a trailing
// newline) and strict decoding (unknown fields and unknown versions are
// errors). It does not read or write files: Encode and Decode take an
// io.Writer and an io.Reader, and package arrowio owns the bytes on disk.
//
// Concurrency: values are plain data; nothing here is shared.
package manifests
