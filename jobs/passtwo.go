package jobs

import (
	"context"
	"errors"
	"fmt"
	"math"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// outputRowGroupRows caps an output row group written through record
// batches (files with nested columns). That way each worker buffers one
// compressed row group while writing it, so the cap (rather than the
// input's row-group size) bounds pass two's memory. Flat files are
// rewritten with the input's row groups, column by column, their pages
// streamed out (dictionary-encoded columns hold one column chunk's pages).
const outputRowGroupRows = 256 << 10

// recordPathOnly makes pass two write every file through Arrow record
// batches; tests compare the two ways.
var recordPathOnly = false

// hookFileWritten is called after each output file is written (on local
// disk it may still wait for its commit); tests use it to interrupt a run
// at a known point.
var hookFileWritten = func(rel string) {}

// hookOutputsInPlace is called when pass two has put every output in
// place, before it returns.
var hookOutputsInPlace = func() {}

// written is what pass two learns about one file.
type written struct {
	In      fileResult // rows, bytes and hash of the input (Accs unused)
	Out     arrowio.Written
	Outside []manifests.OutOfRange // per column, when the plan has bounds
}

// passTwo writes the scaled copy of every input of the plan's share;
// results are in file order (zero for the files of other shards).
// With pass one's results (run), each input is checked against them
// (version, size, rows and footer) instead of being hashed again; without (apply, which
// has no pass one), inputs are hashed on the way.
//
// A worker goes on with its next file while the last one is synced and
// renamed into place (arrowio.Commits): on the benchmark lake (make
// bench) that took about 5% off a full run's wall time, which had waited
// for fsync(2) once per file. Every output is in place, or the error is
// returned, before passTwo returns.
func passTwo(ctx context.Context, cfg *Config, p *plan, params []stats.Params, meta string, known []fileResult) ([]written, error) {
	results := make([]written, len(p.Files))
	// A failed commit cancels ctx, which stops the workers.
	commits, ctx := arrowio.NewCommits(ctx, cfg.Workers)
	err := forEachFile(ctx, cfg.Workers, largestFirst(p.Files), func(ctx context.Context, i int) error {
		if !p.mine(i) {
			return nil
		}
		var k *fileResult
		if known != nil {
			k = &known[i]
		}
		res, err := scaleFile(ctx, cfg, p, i, params, meta, k, commits)
		if err != nil {
			return fmt.Errorf("partition %s: %w", partitionName(p.Files[i]), err)
		}
		results[i] = res
		return nil
	})
	switch cerr := commits.Wait(); {
	case cerr == nil:
	case err == nil || errors.Is(err, cerr):
		err = cerr // the workers stopped because of it
	default:
		err = errors.Join(err, cerr)
	}
	if err == nil {
		hookOutputsInPlace()
	}
	return results, err
}

// outputSchema replaces each selected column by a nullable float column.
func outputSchema(in *arrow.Schema, idx []int, float32Out bool) *arrow.Schema {
	fields := append([]arrow.Field(nil), in.Fields()...)
	t := arrow.DataType(arrow.PrimitiveTypes.Float64)
	if float32Out {
		t = arrow.PrimitiveTypes.Float32
	}
	for _, i := range idx {
		fields[i] = arrow.Field{Name: fields[i].Name, Type: t, Nullable: true}
	}
	return arrow.NewSchema(fields, nil)
}

// scaleFile streams one input file into its scaled output.
func scaleFile(ctx context.Context, cfg *Config, p *plan, i int, params []stats.Params, meta string, known *fileResult, commits *arrowio.Commits) (written, error) {
	f := p.Files[i]
	open := arrowio.OpenContext
	if known != nil {
		open = arrowio.OpenUnhashed
	}
	r, err := open(ctx, f.Abs, memory.DefaultAllocator)
	if err != nil {
		return written{}, err
	}
	defer r.Close()
	if known != nil && (r.Version() != known.Version || r.Size() != known.Bytes || r.NumRows() != known.Rows || r.FooterChecksum() != known.Origin.Footer) {
		return written{}, fmt.Errorf("%w: %s changed after its statistics were computed (now %d bytes, %d rows); run again",
			ErrInputChanged, f.Rel, r.Size(), r.NumRows())
	}
	if r.NumRows() == 0 {
		return written{}, fmt.Errorf("%w: %s has no rows", ErrEmptyPartition, f.Rel)
	}
	idx, err := columnIndices(r.Schema(), p.Columns, p.Files[0].Rel, f.Rel)
	if err != nil {
		return written{}, err
	}
	// which[k] is the plan column for schema field k, or -1.
	which := make([]int, r.Schema().NumFields())
	for k := range which {
		which[k] = -1
	}
	for j, k := range idx {
		which[k] = j
	}
	schema := outputSchema(r.Schema(), idx, cfg.Float32)
	opts := arrowio.WriteOptions{
		Compression:  cfg.Compression,
		RowGroupRows: outputRowGroupRows,
		Metadata:     map[string]string{p.metaKey(): meta},
		Commits:      commits,
	}
	dst := arrowio.Join(cfg.Output, f.Rel)
	out, outside, err := writeScaled(ctx, cfg, p, r, f.Rel, dst, schema, which, params, opts)
	if err != nil {
		return written{}, err
	}
	hookFileWritten(f.Rel)
	res := written{In: fileResult{Rows: r.NumRows()}, Out: out, Outside: outside()}
	if out.Rows != r.NumRows() {
		return written{}, fmt.Errorf("%s: wrote %d rows, read %d", f.Rel, out.Rows, r.NumRows())
	}
	if known == nil {
		// Pass two read every column, so the hash needs almost no reads.
		if res.In.Bytes, res.In.SHA256, err = r.Checksum(); err != nil {
			return written{}, err
		}
	}
	return res, nil
}

// writeScaled writes the scaled copy of r at dst. Flat files (every
// column neither nested nor repeated, which is what lakescale's inputs
// normally are) are rewritten column chunk by column chunk without Arrow
// arrays (arrowio.RewriteParquetAtomic, output row groups as the input's);
// others go through Arrow record batches (output row groups of at most
// outputRowGroupRows rows). Either way the bytes depend only on the input.
func writeScaled(ctx context.Context, cfg *Config, p *plan, r *arrowio.Reader, rel, dst string, schema *arrow.Schema,
	which []int, params []stats.Params, opts arrowio.WriteOptions) (arrowio.Written, func() []manifests.OutOfRange, error) {
	mapVals, outside := p.valueMapper(cfg, params)
	maps := make([]arrowio.ValueMap, len(which))
	for k, j := range which {
		if j >= 0 {
			maps[k] = func(vals, out any) error { return mapVals(j, vals, out) }
		}
	}
	if !recordPathOnly {
		ropts := opts
		ropts.BatchRows = cfg.BatchRows
		out, err := arrowio.RewriteParquetAtomic(ctx, dst, r, schema, maps, ropts)
		if !errors.Is(err, arrowio.ErrNotRewritable) {
			if err != nil && err != context.Cause(ctx) {
				err = fmt.Errorf("%s: %w", rel, err)
			}
			return out, outside, err
		}
	}
	mapCol, outside := p.columnMapper(cfg, params)
	out, err := arrowio.WriteParquetAtomic(ctx, dst, schema, opts, func(w *pqarrow.FileWriter) error {
		for rg := range r.NumRowGroups() {
			if err := scaleRowGroup(ctx, cfg, r, rg, schema, which, p.Columns, mapCol, w); err != nil {
				return fmt.Errorf("%s: %w", rel, err)
			}
		}
		return nil
	})
	return out, outside, err
}

// scaleRowGroup writes one input row group as one output row group.
func scaleRowGroup(ctx context.Context, cfg *Config, r *arrowio.Reader, rg int, schema *arrow.Schema,
	which []int, cols []column, mapCol func(j int, a arrow.Array) (arrow.Array, error), w *pqarrow.FileWriter) error {
	rr, err := r.Records(ctx, rg, nil, cfg.BatchRows)
	if err != nil {
		return err
	}
	defer rr.Release()
	started := false
	arrays := make([]arrow.Array, len(which))
	for rr.Next() {
		if err := context.Cause(ctx); err != nil {
			return err
		}
		rec := rr.Record()
		if rec.NumRows() == 0 {
			continue
		}
		for k := range arrays {
			j := which[k]
			if j < 0 {
				arrays[k] = rec.Column(k)
				arrays[k].Retain()
				continue
			}
			a, err := mapCol(j, rec.Column(k))
			if err != nil {
				releaseAll(arrays[:k])
				return fmt.Errorf("column %s: %w", cols[j].Name, err)
			}
			arrays[k] = a
			if cfg.InfPolicy == InfError {
				if n := countInf(a); n > 0 {
					releaseAll(arrays[:k+1])
					return fmt.Errorf("%w: column %s: row group %d: %d scaled values are infinite (want finite values; --on-infinity skip lets them through)",
						ErrInfinite, cols[j].Name, rg, n)
				}
			}
		}
		out := array.NewRecord(schema, arrays, rec.NumRows())
		releaseAll(arrays)
		if !started {
			w.NewBufferedRowGroup()
			started = true
		}
		err := w.WriteBuffered(out)
		out.Release()
		if err != nil {
			return fmt.Errorf("row group %d: %w", rg, err)
		}
	}
	if err := rr.Err(); err != nil {
		return fmt.Errorf("row group %d: %w", rg, err)
	}
	return nil
}

func releaseAll(as []arrow.Array) {
	for _, a := range as {
		if a != nil {
			a.Release()
		}
	}
}

// countInf counts infinite values in a scaled (float) array.
func countInf(a arrow.Array) int {
	n := 0
	switch a := a.(type) {
	case *array.Float64:
		for i, v := range a.Float64Values() {
			if math.IsInf(v, 0) && a.IsValid(i) {
				n++
			}
		}
	case *array.Float32:
		for i, v := range a.Float32Values() {
			if math.IsInf(float64(v), 0) && a.IsValid(i) {
				n++
			}
		}
	}
	return n
}
