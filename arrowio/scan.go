package arrowio

import (
	"context"
	"errors"
	"fmt"
	"math"
	"unsafe"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
)

// Scanning reads a numeric column's values straight from Parquet's column
// chunk readers into buffers the Reader keeps, without building Arrow
// arrays. Pass one needs only the non-null values and how many nulls there
// were, and for that decoding into reused buffers costs about 0.6 of the
// time pqarrow's record reader takes to build the same columns as arrays
// (measured on the benchmark lake, make bench): no allocation, no zeroing,
// no validity bitmaps.

// scanKinds gives, per Arrow type, the Parquet physical type a scan
// decodes it from (Apache Parquet format specification, "Logical Types":
// UINT_8 to UINT_32 annotate INT32, UINT_64 annotates INT64, so unsigned
// values arrive as the bits of signed ones).
var scanKinds = map[arrow.Type]parquet.Type{
	arrow.FLOAT64: parquet.Types.Double,
	arrow.FLOAT32: parquet.Types.Float,
	arrow.INT8:    parquet.Types.Int32,
	arrow.INT16:   parquet.Types.Int32,
	arrow.INT32:   parquet.Types.Int32,
	arrow.INT64:   parquet.Types.Int64,
	arrow.UINT8:   parquet.Types.Int32,
	arrow.UINT16:  parquet.Types.Int32,
	arrow.UINT32:  parquet.Types.Int32,
	arrow.UINT64:  parquet.Types.Int64,
}

func unsignedType(t arrow.Type) bool {
	switch t {
	case arrow.UINT8, arrow.UINT16, arrow.UINT32, arrow.UINT64:
		return true
	}
	return false
}

// narrowRange is the range of the Arrow types stored as a wider INT32
// (INT(8) and INT(16), signed or not); ok is false for other types.
func narrowRange(t arrow.Type) (lo, hi int64, ok bool) {
	switch t {
	case arrow.INT8:
		return math.MinInt8, math.MaxInt8, true
	case arrow.INT16:
		return math.MinInt16, math.MaxInt16, true
	case arrow.UINT8:
		return 0, math.MaxUint8, true
	case arrow.UINT16:
		return 0, math.MaxUint16, true
	}
	return 0, 0, false
}

func isNarrow(t arrow.Type) bool {
	_, _, ok := narrowRange(t)
	return ok
}

// checkNarrow returns an error naming the first of vals (the INT32 values
// of a column of Arrow type t) that does not fit t, and nil when all fit or
// t is not narrow (narrowRange). A valid file never fails it. Arrow's
// record reader truncates such values silently (300 would be read as the
// int8 44); the scan, the rewrite and Records refuse the file instead.
func checkNarrow(t arrow.Type, vals []int32) error {
	lo, hi, ok := narrowRange(t)
	if !ok {
		return nil
	}
	unsigned := unsignedType(t)
	for _, v := range vals {
		x := int64(v)
		if unsigned {
			x = int64(uint32(v))
		}
		if x < lo || x > hi {
			return fmt.Errorf("%w: value %d does not fit the column's type %s", errCorruptData, x, t)
		}
	}
	return nil
}

// CanScan reports whether ScanColumn can read top-level column col: a flat
// (not nested, not repeated) column of a float or integer Arrow type
// stored in the matching Parquet physical type.
func (r *Reader) CanScan(col int) bool {
	fields := r.fr.Manifest.Fields
	if col < 0 || col >= len(fields) || !fields[col].IsLeaf() {
		return false
	}
	f := &fields[col]
	d := r.pr.MetaData().Schema.Column(f.ColIndex)
	if d.MaxRepetitionLevel() != 0 || d.MaxDefinitionLevel() > 1 {
		return false
	}
	pt, ok := scanKinds[f.Field.Type.ID()]
	return ok && pt == d.PhysicalType()
}

// scanBuffers are a Reader's reusable decode buffers.
type scanBuffers struct {
	f64   []float64
	f32   []float32
	i32   []int32
	i64   []int64
	defs  []int16
	ones  []int16 // definition levels of a required column written as optional
	bools []bool
	i96   []parquet.Int96
	bytes []parquet.ByteArray
	fixed []parquet.FixedLenByteArray
	out64 []float64
	out32 []float32
}

// read decodes the next batch of at most n rows of a numeric column of
// Arrow type t into b (see readChunk): the non-null values, densely packed
// (as unsigned types when t is unsigned), the rows read (0 at the end) and
// the count of values. defs, when not nil, receives the definition levels.
// Values that do not fit a narrow t (checkNarrow) are an error.
func (b *scanBuffers) read(cr file.ColumnChunkReader, n int, defs []int16, t arrow.Type) (vals any, total int64, nv int, err error) {
	unsigned := unsignedType(t)
	switch c := cr.(type) {
	case *file.Float64ColumnChunkReader:
		return readInto(c, &b.f64, n, defs)
	case *file.Float32ColumnChunkReader:
		return readInto(c, &b.f32, n, defs)
	case *file.Int32ColumnChunkReader:
		vals, total, nv, err = readInto(c, &b.i32, n, defs)
		if err == nil {
			err = checkNarrow(t, b.i32[:nv])
		}
		if unsigned && err == nil { // the same bits, read as unsigned
			vals = unsafe.Slice((*uint32)(unsafe.Pointer(unsafe.SliceData(b.i32))), nv)
		}
		return vals, total, nv, err
	case *file.Int64ColumnChunkReader:
		vals, total, nv, err = readInto(c, &b.i64, n, defs)
		if unsigned && err == nil {
			vals = unsafe.Slice((*uint64)(unsafe.Pointer(unsafe.SliceData(b.i64))), nv)
		}
		return vals, total, nv, err
	}
	return nil, 0, 0, fmt.Errorf("unexpected column reader %T", cr)
}

// readInto is readChunk into *buf, grown to n values, with the values
// handed out as an any.
func readInto[T any](cr chunkReader[T], buf *[]T, n int, defs []int16) (any, int64, int, error) {
	*buf = grow(*buf, n)
	v, _, total, err := readChunk(cr, *buf, defs)
	return v, total, len(v), err
}

func grow[T any](s []T, n int) []T {
	if cap(s) < n {
		return make([]T, n)
	}
	return s[:n]
}

// ScanColumn reads top-level column col (CanScan must hold) of row group
// rg in batches of at most batchRows rows (DefaultBatchRows when <= 0) and
// calls fn with each batch's non-null values, densely packed in a slice
// the Reader reuses (valid only during the call), and the count of nulls
// among its rows. The slice is []float64, []float32, []int32 (int8 to
// int32), []int64, []uint32 (uint8 to uint32) or []uint64, by the
// column's Arrow type. Columns scanned in ascending order read a file front to
// back. ctx is checked before every batch (then context.Cause(ctx) comes
// back unchanged); fn's error is returned unchanged; other errors name the
// path and the column. The rows read must add up to the footer's count.
func (r *Reader) ScanColumn(ctx context.Context, rg, col int, batchRows int64, fn func(vals any, nulls int) error) error {
	if !r.CanScan(col) {
		return pathError("read", r.path, fmt.Errorf("%w: column %d cannot be scanned", arrow.ErrInvalid, col))
	}
	if rg < 0 || rg >= r.NumRowGroups() {
		return pathError("read", r.path, fmt.Errorf("%w: row group %d of %d", arrow.ErrIndex, rg, r.NumRowGroups()))
	}
	if batchRows <= 0 {
		batchRows = DefaultBatchRows
	}
	f := &r.fr.Manifest.Fields[col]
	name := f.Field.Name
	fail := func(err error) error {
		return pathError("read", r.path, fmt.Errorf("column %s: row group %d: %w", name, rg, err))
	}
	cr, done, err := r.columnReader(rg, f.ColIndex)
	if err != nil {
		return fail(err)
	}
	defer done()
	b := &r.parts.scan
	n := int(batchRows)
	var defs []int16
	if cr.Descriptor().MaxDefinitionLevel() > 0 {
		b.defs = grow(b.defs, n)
		defs = b.defs
	}
	var rows int64
	for {
		if err := context.Cause(ctx); err != nil {
			return err
		}
		vals, total, nv, err := b.read(cr, n, defs, f.Field.Type.ID())
		if err != nil {
			return fail(err)
		}
		if total == 0 {
			break
		}
		rows += total
		if err := fn(vals, int(total)-nv); err != nil {
			return err
		}
	}
	if want := r.RowGroupRows(rg); rows != want {
		return fail(fmt.Errorf("%w: read %d rows, the footer says %d", errCorruptData, rows, want))
	}
	return nil
}

// decoding runs f, turning a panic into an error: corrupt pages can make
// Parquet's decoders panic, and a bad input must not take the process down.
func decoding(f func() error) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("%w: %v", errCorruptData, p)
		}
	}()
	return f()
}

// errCorruptData marks column data that does not match its footer.
var errCorruptData = errors.New("corrupt column data")
