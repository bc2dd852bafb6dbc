// Package stats computes exact, mergeable statistics of numeric Arrow
// columns and derives feature-scaling parameters from them.
//
// It owns the numerics of lakescale: the per-column Accumulator of pass one
// (exact integer sums of values and squares, counts, min and max), its
// canonical binary encoding, the correctly rounded Summary, the scaling
// methods (Fit) and the per-value transform of pass two (Params.Forward,
// Transform).
//
// It does not touch files, paths or goroutines: Arrow arrays in, values out.
//
// Concurrency: an Accumulator is not safe for concurrent use; give each
// worker its own and Merge them. Params and Summary are plain values.
package stats
