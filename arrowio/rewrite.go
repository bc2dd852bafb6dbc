package arrowio

import (
	"context"
	"encoding/base64"
	"errors"
	"fmt"
	"slices"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/flight"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/metadata"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
	"github.com/apache/arrow/go/v17/parquet/schema"
)

// Rewriting copies a Parquet file column chunk by column chunk with
// Parquet's column readers and writers, replacing the values of some
// columns on the way, without building Arrow arrays: values are decoded
// into buffers the Reader keeps and encoded from them. Each output row
// group is written column after column, its pages streamed to the file as
// they fill (a column that keeps dictionary encoding holds its pages until
// the column chunk is done, so memory follows the input's column chunks,
// not its row groups), and the input is read front
// to back, so its hash follows the reads. On the benchmark lake a copy
// this way cost about 0.8 of the CPU time and 0.4 of the memory of the
// same copy through pqarrow's record reader and writer.

// ValueMap replaces one batch of a column's values: vals are the batch's
// non-null values as ScanColumn hands them out, and out, a []float64 or a
// []float32 (by the output column's type) of exactly len(vals) elements,
// receives the new values. Nulls stay null.
type ValueMap func(vals, out any) error

// rewritePlan is the output layout of a rewrite.
type rewritePlan struct {
	pq    *schema.Schema
	props *parquet.WriterProperties
	meta  metadata.KeyValueMetadata
}

// planRewrite checks that r's file can be rewritten into schema with maps
// (indexed by top-level column; nil entries are copied): every column
// flat, every mapped column scannable and written as a nullable float64 or
// float32, every other column written in exactly the Parquet type, logical
// type and nullability it is read in, as pqarrow would write schema.
func planRewrite(r *Reader, out *arrow.Schema, maps []ValueMap, opts WriteOptions, mem memory.Allocator) (*rewritePlan, error) {
	in := r.pr.MetaData().Schema
	if len(maps) != len(r.fr.Manifest.Fields) || out.NumFields() != len(maps) || in.NumColumns() != len(maps) {
		return nil, fmt.Errorf("%w: %d maps, %d output fields, %d input columns, %d input leaves",
			ErrNotRewritable, len(maps), out.NumFields(), len(r.fr.Manifest.Fields), in.NumColumns())
	}
	var extra []parquet.WriterProperty
	for c, m := range maps {
		if m == nil && r.dictionaryAbandoned(c) {
			extra = append(extra, parquet.WithDictionaryPath(in.Column(c).ColumnPath(), false))
		}
	}
	props, arrowProps, err := writerProps(out, opts, mem, extra...)
	if err != nil {
		return nil, err
	}
	pq, err := pqarrow.ToParquet(out, props, arrowProps)
	if err != nil {
		return nil, err
	}
	if pq.NumColumns() != len(maps) {
		return nil, fmt.Errorf("%w: output schema has %d leaf columns, want %d", ErrNotRewritable, pq.NumColumns(), len(maps))
	}
	for c, m := range maps {
		f := &r.fr.Manifest.Fields[c]
		if !f.IsLeaf() || f.ColIndex != c {
			return nil, fmt.Errorf("%w: column %s is nested", ErrNotRewritable, f.Field.Name)
		}
		if name := out.Field(c).Name; name != f.Field.Name {
			return nil, fmt.Errorf("%w: output column %d is %s, input column %s", ErrNotRewritable, c, name, f.Field.Name)
		}
		src, dst := in.Column(c), pq.Column(c)
		if src.MaxRepetitionLevel() != 0 || src.MaxDefinitionLevel() > 1 || dst.MaxRepetitionLevel() != 0 {
			return nil, fmt.Errorf("%w: column %s is nested or repeated", ErrNotRewritable, f.Field.Name)
		}
		if m != nil {
			pt := dst.PhysicalType()
			if !r.CanScan(c) || dst.MaxDefinitionLevel() != 1 || (pt != parquet.Types.Double && pt != parquet.Types.Float) {
				return nil, fmt.Errorf("%w: column %s cannot be mapped to %s", ErrNotRewritable, f.Field.Name, out.Field(c).Type)
			}
			continue
		}
		pt := src.PhysicalType()
		if pt != dst.PhysicalType() || (pt == parquet.Types.FixedLenByteArray && src.TypeLength() != dst.TypeLength()) ||
			src.MaxDefinitionLevel() != dst.MaxDefinitionLevel() || !src.LogicalType().Equals(dst.LogicalType()) {
			return nil, fmt.Errorf("%w: column %s would be written as %s (%s, length %d, max definition level %d), read as %s (%s, %d, %d)",
				ErrNotRewritable, f.Field.Name, dst.PhysicalType(), dst.LogicalType(), dst.TypeLength(), dst.MaxDefinitionLevel(),
				pt, src.LogicalType(), src.TypeLength(), src.MaxDefinitionLevel())
		}
	}
	// The footer pqarrow's FileWriter writes: the Arrow schema's own
	// metadata, then the serialized schema under "ARROW:schema".
	meta := metadata.NewKeyValueMetadata()
	md := out.Metadata()
	for i, k := range md.Keys() {
		if err := meta.Append(k, md.Values()[i]); err != nil {
			return nil, err
		}
	}
	if err := meta.Append(arrowSchemaKey, base64.StdEncoding.EncodeToString(flight.SerializeSchema(out, mem))); err != nil {
		return nil, err
	}
	return &rewritePlan{pq: pq, props: props, meta: meta}, nil
}

// dictionaryAbandoned reports whether the writer of r's file gave up
// dictionary encoding for leaf column c in some row group: the chunk has
// a dictionary page and a data page that is not dictionary-encoded (what
// a writer does when the dictionary outgrows its limit; the chunk's page
// encoding statistics tell, Apache Parquet format specification,
// ColumnMetaData.encoding_stats). A copy of such a column is written
// without a dictionary: the values would only fill one again, at the cost
// of hashing each of them, and be written plain after it.
func (r *Reader) dictionaryAbandoned(c int) bool {
	md := r.pr.MetaData()
	for rg := range r.NumRowGroups() {
		cc, err := md.RowGroup(rg).ColumnChunk(c)
		if err != nil || !cc.HasDictionaryPage() {
			continue
		}
		if _, other := dataPageEncodings(cc); other > 0 {
			return true
		}
	}
	return false
}

// dataPageEncodings counts, from a column chunk's page encoding statistics,
// the data pages that are dictionary-encoded and the others. Both are 0
// when the writer recorded no such statistics.
func dataPageEncodings(cc *metadata.ColumnChunkMetaData) (dict, other int) {
	for _, s := range cc.EncodingStats() {
		switch s.PageType.String() {
		case "DATA_PAGE", "DATA_PAGE_V2":
			if s.Encoding == parquet.Encodings.RLEDict || s.Encoding == parquet.Encodings.PlainDict {
				dict++
			} else {
				other++
			}
		}
	}
	return dict, other
}

// ErrNotRewritable is what RewriteParquetAtomic returns, before writing
// anything, for a file it cannot copy column chunk by column chunk (nested
// or repeated columns, a mapped column that cannot be scanned, a copied
// column whose Parquet type would change); copy such a file through
// Records and WriteParquetAtomic instead.
var ErrNotRewritable = errors.New("cannot be rewritten column chunk by column chunk")

// CanRewrite reports whether RewriteParquetAtomic can write r's file into
// schema with maps, that is whether it would not fail with
// ErrNotRewritable.
func (r *Reader) CanRewrite(schema *arrow.Schema, maps []ValueMap) bool {
	_, err := planRewrite(r, schema, maps, WriteOptions{}, memory.DefaultAllocator)
	return err == nil
}

// RewriteParquetAtomic writes at path, atomically as WriteParquetAtomic
// does, a copy of r's file with the Arrow schema out, in which column c's
// values are replaced by maps[c] where that is not nil; the other columns
// are copied value for value; a file it cannot take gives an error
// wrapping ErrNotRewritable and writes nothing. Row groups follow the
// input's (opts.RowGroupRows is not used): each is written column by
// column with its pages streamed out, so memory grows at most with one
// column chunk (of a column that keeps dictionary encoding), not with the
// row group. The footer holds the serialized Arrow schema and opts.Metadata
// in sorted key order, as WriteParquetAtomic writes them. ctx is checked
// between batches; a cancelled ctx gives context.Cause(ctx) unchanged.
// An error from a map comes back as "write path: err".
//
// r must have been opened with Go's allocator (memory.DefaultAllocator or
// nil, what Open uses unless told otherwise), which never reuses memory:
// byte-array statistics keep slices of the input's pages until their
// column chunk is written. (The pages of the chunks r opens itself come
// from its pageArena, which recycles them only after that.)
func RewriteParquetAtomic(ctx context.Context, path string, r *Reader, out *arrow.Schema, maps []ValueMap, opts WriteOptions) (Written, error) {
	if err := context.Cause(ctx); err != nil {
		return Written{}, err
	}
	mem := opts.allocator()
	plan, err := planRewrite(r, out, maps, opts, mem)
	if err != nil {
		return Written{}, pathError("write", path, err)
	}
	keys, err := metadataKeys(opts.Metadata)
	if err != nil {
		return Written{}, pathError("write", path, err)
	}
	return writeParquetFile(ctx, path, opts.Commits, func(sink *stickyWriter) (int64, error) {
		var fw *file.Writer
		return sinkPanics(sink, func() { closeWriterQuietly(fw) }, func() (int64, error) {
			fw = file.NewParquetWriter(sink, plan.pq.Root(), file.WithWriterProps(plan.props), file.WithWriteMetadata(plan.meta))
			var rows int64
			for rg := range r.NumRowGroups() {
				n, err := r.rewriteRowGroup(ctx, fw.AppendRowGroup(), rg, maps, int(opts.BatchRows))
				if err != nil {
					closeWriterQuietly(fw)
					return 0, err
				}
				rows += n
			}
			for _, k := range keys {
				if err := fw.AppendKeyValueMetadata(k, opts.Metadata[k]); err != nil {
					closeWriterQuietly(fw)
					return 0, err
				}
			}
			if err := fw.Close(); err != nil {
				return 0, err
			}
			return rows, nil
		})
	})
}

// rewriteRowGroup copies or maps every column of row group rg into rgw,
// in column order, and closes rgw.
func (r *Reader) rewriteRowGroup(ctx context.Context, rgw file.SerialRowGroupWriter, rg int, maps []ValueMap, batch int) (int64, error) {
	if batch <= 0 {
		batch = DefaultBatchRows
	}
	want := r.RowGroupRows(rg)
	for c, m := range maps {
		name := r.fr.Manifest.Fields[c].Field.Name
		cw, err := rgw.NextColumn()
		if err != nil {
			return 0, err
		}
		// done comes after cw.Close: until then the column's byte-array
		// statistics may point into the input's pages. After an error the
		// Reader's chunk parts stay busy and unrecycled.
		var rows int64
		var done func()
		if m == nil && r.canCopyIndices(rg, c, cw) {
			rows, done, err = r.copyIndices(ctx, rg, c, cw, batch)
		} else {
			var cr file.ColumnChunkReader
			if cr, done, err = r.columnReader(rg, c); err == nil {
				if m != nil {
					rows, err = r.mapColumn(ctx, cr, c, cw, m, batch)
				} else {
					rows, err = r.copyColumn(ctx, cr, c, cw, batch)
				}
			}
		}
		if err == nil && rows != want {
			err = fmt.Errorf("%w: read %d rows, the footer says %d", errCorruptData, rows, want)
		}
		if err != nil {
			if cerr := context.Cause(ctx); cerr != nil && err == cerr {
				return 0, err
			}
			return 0, fmt.Errorf("column %s: row group %d: %w", name, rg, err)
		}
		if err := cw.Close(); err != nil {
			return 0, fmt.Errorf("column %s: row group %d: %w", name, rg, err)
		}
		done()
	}
	if err := rgw.Close(); err != nil {
		return 0, err
	}
	return want, nil
}

// mapColumn reads column c's chunk from cr in batches, maps each batch's
// values and writes them to cw with the input's definition levels (all
// defined when the input column is required).
func (r *Reader) mapColumn(ctx context.Context, cr file.ColumnChunkReader, c int, cw file.ColumnChunkWriter, m ValueMap, n int) (int64, error) {
	b := &r.parts.scan
	var defs, levels []int16 // read into, written from
	if cr.Descriptor().MaxDefinitionLevel() > 0 {
		b.defs = grow(b.defs, n)
		defs, levels = b.defs, b.defs
	} else {
		if len(b.ones) < n {
			b.ones = make([]int16, n)
			for i := range b.ones {
				b.ones[i] = 1
			}
		}
		levels = b.ones
	}
	t := r.fr.Manifest.Fields[c].Field.Type.ID()
	var rows int64
	for {
		if err := context.Cause(ctx); err != nil {
			return 0, err
		}
		vals, total, nv, err := b.read(cr, n, defs, t)
		if err != nil || total == 0 {
			return rows, err
		}
		rows += total
		switch w := cw.(type) {
		case *file.Float64ColumnChunkWriter:
			b.out64 = grow(b.out64, nv)
			if err := m(vals, b.out64); err != nil {
				return 0, err
			}
			_, err = w.WriteBatch(b.out64[:nv:nv], levels[:total], nil)
		case *file.Float32ColumnChunkWriter:
			b.out32 = grow(b.out32, nv)
			if err := m(vals, b.out32); err != nil {
				return 0, err
			}
			_, err = w.WriteBatch(b.out32[:nv:nv], levels[:total], nil)
		default:
			err = fmt.Errorf("cannot map into a %T", cw)
		}
		if err != nil {
			return 0, err
		}
	}
}

// copyColumn copies column c's chunk from cr value for value into cw.
func (r *Reader) copyColumn(ctx context.Context, cr file.ColumnChunkReader, c int, cw file.ColumnChunkWriter, n int) (int64, error) {
	b := &r.parts.scan
	var defs []int16
	if cr.Descriptor().MaxDefinitionLevel() > 0 {
		b.defs = grow(b.defs, n)
		defs = b.defs
	}
	switch cr := cr.(type) {
	case *file.BooleanColumnChunkReader:
		return copyChunk(ctx, cr, cw, &b.bools, defs, n, nil)
	case *file.Int32ColumnChunkReader:
		var check func([]int32) error
		if t := r.fr.Manifest.Fields[c].Field.Type.ID(); isNarrow(t) {
			check = func(v []int32) error { return checkNarrow(t, v) }
		}
		return copyChunk(ctx, cr, cw, &b.i32, defs, n, check)
	case *file.Int64ColumnChunkReader:
		return copyChunk(ctx, cr, cw, &b.i64, defs, n, nil)
	case *file.Int96ColumnChunkReader:
		return copyChunk(ctx, cr, cw, &b.i96, defs, n, nil)
	case *file.Float32ColumnChunkReader:
		return copyChunk(ctx, cr, cw, &b.f32, defs, n, nil)
	case *file.Float64ColumnChunkReader:
		return copyChunk(ctx, cr, cw, &b.f64, defs, n, nil)
	case *file.ByteArrayColumnChunkReader:
		return copyChunk(ctx, cr, cw, &b.bytes, defs, n, nil)
	case *file.FixedLenByteArrayColumnChunkReader:
		return copyChunk(ctx, cr, cw, &b.fixed, defs, n, nil)
	}
	return 0, fmt.Errorf("cannot copy a %T", cr)
}

// chunkReader and chunkWriter are the typed column chunk readers and
// writers of Parquet's file package, for values of Go type T.
type chunkReader[T any] interface {
	HasNext() bool
	Err() error
	ReadBatch(batchSize int64, values []T, defLvls, repLvls []int16) (total int64, valuesRead int, err error)
}

type chunkWriter[T any] interface {
	WriteBatch(values []T, defLevels, repLevels []int16) (valueOffset int64, err error)
}

// copyChunk moves a flat column's values and definition levels (defs nil
// for a required column) from cr to cw, a writer of the same type, in
// batches through *buf. Byte-array values point into cr's page buffers.
// The encoders copy them, but the column chunk's statistics keep the
// min and max slices until the chunk is closed, so the input's page
// buffers must not be reused before that (see rewriteRowGroup and
// RewriteParquetAtomic). check, when not nil, vets each batch's values.
func copyChunk[T any](ctx context.Context, cr chunkReader[T], cw file.ColumnChunkWriter, buf *[]T, defs []int16, n int, check func([]T) error) (int64, error) {
	w, ok := cw.(chunkWriter[T])
	if !ok {
		return 0, fmt.Errorf("cannot copy %T values into a %T", *buf, cw)
	}
	*buf = grow(*buf, n)
	var rows int64
	for {
		if err := context.Cause(ctx); err != nil {
			return 0, err
		}
		vals, lv, total, err := readChunk(cr, *buf, defs)
		if err != nil || total == 0 {
			return rows, err
		}
		if check != nil {
			if err := check(vals); err != nil {
				return 0, err
			}
		}
		rows += total
		if _, err := w.WriteBatch(vals, lv, nil); err != nil {
			return 0, err
		}
	}
}

// readChunk reads the next batch of a flat column (at most len(buf) rows)
// and returns its non-null values, vals = buf[:nv:nv], its definition
// levels, lv = defs[:rows] (nil for a required column, whose defs is nil),
// and its row count, 0 at the end of the chunk. It checks what Parquet's column
// reader does not: an error met while opening a later page (ReadBatch
// then stops early without reporting it, and later reads would go on with
// the previous page's decoder), and a page that yields fewer or more values
// than its definition levels mark as present. A decoder's panic comes back
// as an error.
func readChunk[T any](cr chunkReader[T], buf []T, defs []int16) (vals []T, lv []int16, total int64, err error) {
	var nv int
	err = decoding(func() (err error) {
		if err := cr.Err(); err != nil {
			return err
		}
		if !cr.HasNext() {
			return cr.Err()
		}
		total, nv, err = cr.ReadBatch(int64(len(buf)), buf, defs, nil)
		if err == nil {
			err = cr.Err()
		}
		return err
	})
	if err != nil {
		return nil, nil, 0, err
	}
	want := int(total)
	if defs != nil {
		lv = defs[:total]
		want = 0
		for _, d := range lv {
			if d > 0 {
				want++
			}
		}
	}
	// For a required column Parquet's reader counts rows by the values it
	// decoded, so there this check is only a guard.
	if nv != want {
		return nil, nil, 0, fmt.Errorf("%w: %d values decoded for %d defined rows", errCorruptData, nv, want)
	}
	return buf[:nv:nv], lv, total, nil
}

// metadataKeys returns the keys of user metadata in sorted order, refusing
// the key the serialized Arrow schema is stored under.
func metadataKeys(meta map[string]string) ([]string, error) {
	keys := make([]string, 0, len(meta))
	for k := range meta {
		if k == arrowSchemaKey {
			return nil, fmt.Errorf("metadata key %q is reserved", k)
		}
		keys = append(keys, k)
	}
	slices.Sort(keys)
	return keys, nil
}

// closeWriterQuietly closes fw on an error path; the output is discarded.
func closeWriterQuietly(fw *file.Writer) {
	if fw == nil {
		return
	}
	defer func() { _ = recover() }()
	_ = fw.Close()
}
