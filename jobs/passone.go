package jobs

import (
	"cmp"
	"context"
	"fmt"
	"slices"
	"strings"

	"github.com/apache/arrow/go/v17/arrow/memory"
	"golang.org/x/sync/errgroup"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/stats"
)

// fileResult is what pass one learns about one input file.
type fileResult struct {
	Rows    int64
	Bytes   int64
	SHA256  string
	Version string               // of the file pass one read (arrowio.Reader.Version)
	Accs    []*stats.Accumulator // one per selected column, plan order
	Origin  origin               // measured, cached or (not fitted) only described
}

// forEachFile runs task for every index of order, in that order, on one
// pool of workers goroutines, stopping at the first error.
func forEachFile(ctx context.Context, workers int, order []int, task func(ctx context.Context, i int) error) error {
	g, gctx := errgroup.WithContext(ctx)
	g.SetLimit(workers)
	for _, i := range order {
		if gctx.Err() != nil {
			break
		}
		g.Go(func() error { return task(gctx, i) })
	}
	if err := g.Wait(); err != nil {
		return err
	}
	return context.Cause(ctx)
}

// largestFirst returns the indices of files in order of size, largest
// first, equal sizes by path. Workers take files in this order, so that
// the last files of a pass, when some workers are already idle, are the
// smallest (Graham's "largest processing time first" list schedule, see
// assign): with partitions of skewed sizes a pass no longer ends with one
// large file read by one worker while the others wait.
func largestFirst(files []arrowio.File) []int {
	order := make([]int, len(files))
	for i := range order {
		order[i] = i
	}
	slices.SortFunc(order, func(a, b int) int { // paths are unique: a total order
		fa, fb := files[a], files[b]
		if c := cmp.Compare(fb.Size, fa.Size); c != 0 {
			return c
		}
		return strings.Compare(fa.Rel, fb.Rel)
	})
	return order
}

// measureFiles is the part of pass one that reads the inputs: discovery,
// the fit slice and cache, and the statistics of every file, or with a
// shard only of the files of its share (the others get results with
// source sourceElsewhere).
func measureFiles(ctx context.Context, cfg *Config, defCache string, log *runLog, sh *Shard) (*plan, []fileResult, error) {
	p, err := discover(cfg.Input, cfg.Rules)
	if err != nil {
		return nil, nil, err
	}
	if err := p.nightly(cfg, defCache, log); err != nil {
		return nil, nil, err
	}
	if sh != nil {
		p.share = sh.of(p.Files)
	}
	results, err := passOne(ctx, cfg, p)
	if err != nil {
		return nil, nil, err
	}
	log.passOne(results)
	return p, results, nil
}

// passOne computes the statistics of every file of the plan's share;
// results are in file order.
func passOne(ctx context.Context, cfg *Config, p *plan) ([]fileResult, error) {
	results := make([]fileResult, len(p.Files))
	err := forEachFile(ctx, cfg.Workers, largestFirst(p.Files), func(ctx context.Context, i int) error {
		if !p.mine(i) {
			results[i].Origin.Source = sourceElsewhere
			return nil
		}
		res, err := measureFile(ctx, cfg, p, i)
		if err != nil {
			return fmt.Errorf("partition %s: %w", partitionName(p.Files[i]), err)
		}
		results[i] = res
		return nil
	})
	return results, err
}

// measureFile streams one file's selected columns into fresh accumulators,
// unless p.reuse has its result (from the cache, or rows and hash only for
// a file the fit filter leaves out).
func measureFile(ctx context.Context, cfg *Config, p *plan, i int) (fileResult, error) {
	f := p.Files[i]
	r, err := arrowio.OpenContext(ctx, f.Abs, memory.DefaultAllocator)
	if err != nil {
		return fileResult{}, err
	}
	defer r.Close()
	if r.NumRows() == 0 {
		return fileResult{}, fmt.Errorf("%w: %s has no rows", ErrEmptyPartition, f.Rel)
	}
	idx, err := columnIndices(r.Schema(), p.Columns, p.Files[0].Rel, f.Rel)
	if err != nil {
		return fileResult{}, err
	}
	if err := p.checkSelection(r.Schema(), f.Rel); err != nil {
		return fileResult{}, err
	}
	res, done, err := p.reuse(cfg, i, r)
	res.Version = r.Version()
	if done || err != nil {
		return res, err
	}
	accs := make([]*stats.Accumulator, len(p.Columns))
	for j, c := range p.Columns {
		accs[j] = stats.NewAccumulator(c.Kind)
	}
	add := addRowGroup
	if scannable(r, idx) {
		add = scanRowGroup
	}
	for rg := range r.NumRowGroups() {
		if err := add(ctx, cfg, r, rg, idx, accs); err != nil {
			return fileResult{}, fmt.Errorf("%s: %w", f.Rel, err)
		}
		if cfg.InfPolicy == InfError {
			for j, a := range accs {
				if pos, neg := a.Infinities(); pos+neg > 0 {
					return fileResult{}, fmt.Errorf("%w: %s: column %s: row group %d has %d +Inf and %d -Inf values (want finite values; --on-infinity skip leaves them out of the statistics)",
						ErrInfinite, f.Rel, p.Columns[j].Name, rg, pos, neg)
				}
			}
		}
	}
	// A file's states are kept until every file is measured: compacted,
	// that is a few hundred bytes per column instead of 128 KiB.
	for _, a := range accs {
		a.Compact()
	}
	// The bytes just read are hashed already; only the rest is read now.
	size, sum, err := r.Checksum()
	if err != nil {
		return fileResult{}, err
	}
	res.Rows, res.Bytes, res.SHA256, res.Accs = r.NumRows(), size, sum, accs
	return res, nil
}

// scannable reports whether every column of idx can be read by
// Reader.ScanColumn, the faster way (numeric columns always can).
func scannable(r *arrowio.Reader, idx []int) bool {
	for _, k := range idx {
		if !r.CanScan(k) {
			return false
		}
	}
	return true
}

// scanRowGroup feeds one row group's columns into the accumulators, one
// column after another, in file order (so that the input's hash follows
// the reads), each in batches of dense values.
func scanRowGroup(ctx context.Context, cfg *Config, r *arrowio.Reader, rg int, idx []int, accs []*stats.Accumulator) error {
	order := make([]int, len(idx))
	for j := range order {
		order[j] = j
	}
	slices.SortFunc(order, func(a, b int) int { return cmp.Compare(idx[a], idx[b]) })
	for _, j := range order {
		a := accs[j]
		err := r.ScanColumn(ctx, rg, idx[j], cfg.BatchRows, func(vals any, nulls int) error {
			if err := a.AddValues(vals, nulls); err != nil {
				return fmt.Errorf("column %s: %w", r.Schema().Field(idx[j]).Name, err)
			}
			return nil
		})
		if err != nil {
			return err
		}
	}
	return nil
}

// addRowGroup feeds one row group's batches into the accumulators,
// checking for cancellation between batches. It reads through Arrow
// record batches, for columns ScanColumn cannot read.
func addRowGroup(ctx context.Context, cfg *Config, r *arrowio.Reader, rg int, idx []int, accs []*stats.Accumulator) error {
	rr, err := r.Records(ctx, rg, idx, cfg.BatchRows)
	if err != nil {
		return err
	}
	defer rr.Release()
	for rr.Next() {
		if err := context.Cause(ctx); err != nil {
			return err
		}
		rec := rr.Record()
		for j, a := range accs {
			if err := a.Add(rec.Column(j)); err != nil {
				return fmt.Errorf("column %s: %w", rec.ColumnName(j), err)
			}
		}
	}
	if err := rr.Err(); err != nil {
		return fmt.Errorf("row group %d: %w", rg, err)
	}
	return nil
}

// merge combines per-file states exactly, for the files where use is true
// (all when use is nil).
func merge(p *plan, results []fileResult, use []bool) ([]*stats.Accumulator, error) {
	total := make([]*stats.Accumulator, len(p.Columns))
	for j, c := range p.Columns {
		total[j] = stats.NewAccumulator(c.Kind)
	}
	for i, res := range results {
		if use != nil && !use[i] {
			continue
		}
		for j, a := range res.Accs {
			if err := total[j].Merge(a); err != nil {
				return nil, fmt.Errorf("column %s: %w", p.Columns[j].Name, err)
			}
		}
	}
	return total, nil
}
