// Package jobs plans and runs lakescale's work: it resolves the effective
// job (job file plus flags), discovers the input dataset, selects columns,
// runs pass one (exact statistics per file, merged) and pass two (scaled
// copies) over one worker pool, and commits the result by writing the
// manifest last. It also implements show, verify, diff, invert and the
// demo, the fit filter, the statistics cache, the output lock, and
// sharded measure and apply with their merge and commit (shard.go).
//
// It does not do arithmetic (package stats), define wire formats (package
// manifests) or touch storage directly (package arrowio).
//
// Concurrency: each exported function runs one job to completion and is
// safe to call from one goroutine at a time per output directory (run,
// apply, invert, commit and clean hold the output's lock file, so a second
// caller fails at once rather than interleaving; the shards of a sharded
// apply take no lock, as they share their output by design, but refuse an
// output whose lock is held).
// Inside,
// one errgroup sized by Config.Workers processes files, largest first;
// every task writes only its own slot of a pre-sized results slice.
package jobs
