package arrowio

import (
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"reflect"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

// scanAll collects what ScanColumn hands out for one column of one row
// group: the values (copied, as the buffer is reused) and the null count.
func scanAll(t *testing.T, r *Reader, rg, col int, batch int64) (vals []any, nulls int) {
	t.Helper()
	limit := batch
	if limit <= 0 {
		limit = DefaultBatchRows
	}
	err := r.ScanColumn(context.Background(), rg, col, batch, func(v any, n int) error {
		rv := reflect.ValueOf(v)
		if int64(rv.Len()+n) > limit {
			t.Fatalf("batch of %d values and %d nulls exceeds %d rows", rv.Len(), n, batch)
		}
		for i := range rv.Len() {
			vals = append(vals, rv.Index(i).Interface())
		}
		nulls += n
		return nil
	})
	if err != nil {
		t.Fatalf("ScanColumn(rg %d, col %d): %v", rg, col, err)
	}
	return vals, nulls
}

// TestScanMatchesIndependentReader: the non-null values ScanColumn reads,
// in order, and its null count agree with what the independent reader
// github.com/xitongsys/parquet-go reads from the same file, for a nullable
// int64, a nullable float64 with NaN, infinities and signed zeros, and a
// required int32 column, over several row groups and odd batch sizes.
func TestScanMatchesIndependentReader(t *testing.T) {
	path := tempPath(t, "x.parquet")
	writeRows(t, memory.DefaultAllocator, path, mixedRows(25000), 3000, WriteOptions{RowGroupRows: 10000})
	_, _, cols := independentRead(t, path)
	r, err := Open(path, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if r.NumRowGroups() != 3 {
		t.Fatalf("%d row groups, want 3", r.NumRowGroups())
	}
	for _, col := range []int{0, 1, 3} {
		if !r.CanScan(col) {
			t.Fatalf("CanScan(%d) = false", col)
		}
		var got []any
		nulls := 0
		for rg := range r.NumRowGroups() {
			v, n := scanAll(t, r, rg, col, 777)
			got, nulls = append(got, v...), nulls+n
		}
		var want []any
		wantNulls := 0
		for _, v := range cols[col] {
			if v == nil {
				wantNulls++
			} else {
				want = append(want, v)
			}
		}
		if nulls != wantNulls || len(got) != len(want) {
			t.Fatalf("column %d: %d values and %d nulls, want %d and %d", col, len(got), nulls, len(want), wantNulls)
		}
		for i := range got {
			g, w := got[i], want[i]
			if gf, ok := g.(float64); ok {
				wf, _ := w.(float64)
				if math.Float64bits(gf) != math.Float64bits(wf) {
					t.Fatalf("column %d value %d = %v, want %v", col, i, gf, wf)
				}
			} else if g != w {
				t.Fatalf("column %d value %d = %#v, want %#v", col, i, g, w)
			}
		}
	}
	if r.CanScan(2) || r.CanScan(4) || r.CanScan(-1) {
		t.Error("CanScan accepts a string column or a column that does not exist")
	}
	if err := r.ScanColumn(context.Background(), 0, 2, 0, func(any, int) error { return nil }); err == nil || !strings.Contains(err.Error(), path) {
		t.Errorf("scanning a string column: %v, want an error naming the file", err)
	}
}

// allTypesSchema has every Arrow type ScanColumn reads, nullable and
// required, plus columns it must refuse (a string, a list).
var allTypesSchema = arrow.NewSchema([]arrow.Field{
	{Name: "f64", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "f32", Type: arrow.PrimitiveTypes.Float32, Nullable: true},
	{Name: "i8", Type: arrow.PrimitiveTypes.Int8, Nullable: true},
	{Name: "i16", Type: arrow.PrimitiveTypes.Int16},
	{Name: "i32", Type: arrow.PrimitiveTypes.Int32, Nullable: true},
	{Name: "i64", Type: arrow.PrimitiveTypes.Int64},
	{Name: "u8", Type: arrow.PrimitiveTypes.Uint8, Nullable: true},
	{Name: "u16", Type: arrow.PrimitiveTypes.Uint16},
	{Name: "u32", Type: arrow.PrimitiveTypes.Uint32, Nullable: true},
	{Name: "u64", Type: arrow.PrimitiveTypes.Uint64},
	{Name: "s", Type: arrow.BinaryTypes.String, Nullable: true},
	{Name: "l", Type: arrow.ListOf(arrow.PrimitiveTypes.Float64), Nullable: true},
}, nil)

func allTypesRecord(mem memory.Allocator, lo, n int) arrow.Record {
	b := array.NewRecordBuilder(mem, allTypesSchema)
	defer b.Release()
	for i := lo; i < lo+n; i++ {
		null := i%9 == 4
		x := uint64(i) * 0x9E3779B97F4A7C15 // spread over every bit
		for k, fb := range b.Fields() {
			if null && allTypesSchema.Field(k).Nullable {
				fb.AppendNull()
				continue
			}
			switch fb := fb.(type) {
			case *array.Float64Builder:
				fb.Append(math.Float64frombits(x &^ (1 << 62))) // finite
			case *array.Float32Builder:
				fb.Append(float32(i) * -0.25)
			case *array.Int8Builder:
				fb.Append(int8(x))
			case *array.Int16Builder:
				fb.Append(int16(x))
			case *array.Int32Builder:
				fb.Append(int32(x))
			case *array.Int64Builder:
				fb.Append(int64(x))
			case *array.Uint8Builder:
				fb.Append(uint8(x))
			case *array.Uint16Builder:
				fb.Append(uint16(x))
			case *array.Uint32Builder:
				fb.Append(uint32(x)) // above 2^31 for about half the rows
			case *array.Uint64Builder:
				fb.Append(x)
			case *array.StringBuilder:
				fb.Append(fmt.Sprint(i))
			case *array.ListBuilder:
				fb.Append(true)
				fb.ValueBuilder().(*array.Float64Builder).Append(float64(i))
			}
		}
	}
	return b.NewRecord()
}

// TestScanMatchesRecords: for every numeric Arrow type, ScanColumn hands
// out exactly the valid values of the arrays Arrow's own record reader
// (pqarrow) builds from the same row group, as the Go type of that array
// (uint32 columns as []uint32 with values above 2^31 intact).
func TestScanMatchesRecords(t *testing.T) {
	mem := memory.DefaultAllocator
	path := tempPath(t, "all.parquet")
	_, err := WriteParquetAtomic(context.Background(), path, allTypesSchema, WriteOptions{RowGroupRows: 4000, Mem: mem}, func(w *pqarrow.FileWriter) error {
		for lo := 0; lo < 10000; lo += 2500 {
			rec := allTypesRecord(mem, lo, 2500)
			err := w.WriteBuffered(rec)
			rec.Release()
			if err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	r, err := Open(path, mem)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if r.CanScan(10) || r.CanScan(11) {
		t.Error("CanScan accepts a string or list column")
	}
	for col := range 10 {
		if !r.CanScan(col) {
			t.Fatalf("CanScan(%s) = false", allTypesSchema.Field(col).Name)
		}
		for rg := range r.NumRowGroups() {
			got, nulls := scanAll(t, r, rg, col, 1000)
			rr, err := r.Records(context.Background(), rg, []int{col}, 0)
			if err != nil {
				t.Fatal(err)
			}
			var want []any
			wantNulls := 0
			for rr.Next() {
				a := rr.Record().Column(0)
				wantNulls += a.NullN()
				rv := reflect.ValueOf(a).MethodByName("Value")
				for i := range a.Len() {
					if a.IsValid(i) {
						want = append(want, rv.Call([]reflect.Value{reflect.ValueOf(i)})[0].Interface())
					}
				}
			}
			rr.Release()
			if !sameNumbers(got, want) || nulls != wantNulls {
				t.Fatalf("%s row group %d: scan gave %d values (%d nulls), records %d (%d nulls); first %v vs %v",
					allTypesSchema.Field(col).Name, rg, len(got), nulls, len(want), wantNulls, head(got), head(want))
			}
		}
	}
}

// sameNumbers compares values printed in decimal (int8 to int32 columns
// come as int32), requiring unsigned columns to come as unsigned types.
func sameNumbers(got, want []any) bool {
	if len(got) != len(want) {
		return false
	}
	for i := range got {
		g, w := reflect.ValueOf(got[i]), reflect.ValueOf(want[i])
		if g.CanUint() != w.CanUint() || fmt.Sprint(got[i]) != fmt.Sprint(want[i]) {
			return false
		}
	}
	return true
}

func head(v []any) []any { return v[:min(len(v), 3)] }

// TestScanChecksum: scanning columns in ascending order, with buffered or
// whole-chunk reads, hashes the file from the reads themselves: Checksum
// is the SHA-256 of the whole file (crypto/sha256 over os.ReadFile), and
// only the columns not scanned and the footer are read again to hash them.
func TestScanChecksum(t *testing.T) {
	path := tempPath(t, "x.parquet")
	writeRows(t, memory.DefaultAllocator, path, mixedRows(600000), 100000, WriteOptions{RowGroupRows: 200000, Compression: None})
	raw, want := fileSHA256(t, path)
	pf, err := file.OpenParquetFile(path, false)
	if err != nil {
		t.Fatal(err)
	}
	var skipped int64 // the string column's chunks
	for rg := range pf.NumRowGroups() {
		cc, err := pf.MetaData().RowGroup(rg).ColumnChunk(2)
		if err != nil {
			t.Fatal(err)
		}
		skipped += cc.TotalCompressedSize()
	}
	pf.Close()
	for _, buffered := range []bool{true, false} {
		t.Run(fmt.Sprintf("buffered=%v", buffered), func(t *testing.T) {
			r := openStreams(t, path, buffered)
			for rg := range r.NumRowGroups() {
				for _, col := range []int{0, 1, 3} {
					scanAll(t, r, rg, col, 0)
				}
			}
			size, sum, err := r.Checksum()
			if err != nil {
				t.Fatal(err)
			}
			if size != int64(len(raw)) || sum != want {
				t.Errorf("Checksum = %d %s; want %d %s", size, sum, len(raw), want)
			}
			footer := int64(len(raw)) / 100
			if g := r.hasher.gaps; g > skipped+footer {
				t.Errorf("read %d bytes again to hash them; the columns not scanned are %d", g, skipped)
			}
		})
	}
}

// TestScanErrors: a corrupt page header gives an error naming the file and
// the column (not a panic); a cancelled context stops the scan with its
// cause; fn's error comes back unchanged; a bad row group is refused.
func TestScanErrors(t *testing.T) {
	path := tempPath(t, "x.parquet")
	writeRows(t, memory.DefaultAllocator, path, mixedRows(20000), 5000, WriteOptions{Compression: None})
	pf, err := file.OpenParquetFile(path, false)
	if err != nil {
		t.Fatal(err)
	}
	cc, err := pf.MetaData().RowGroup(0).ColumnChunk(1)
	if err != nil {
		t.Fatal(err)
	}
	off := cc.DataPageOffset()
	pf.Close()

	r, err := Open(path, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	cause := errors.New("stop here")
	ctx, cancel := context.WithCancelCause(context.Background())
	cancel(cause)
	if err := r.ScanColumn(ctx, 0, 1, 0, func(any, int) error { return nil }); err != cause {
		t.Errorf("cancelled scan: %v, want the cause", err)
	}
	mine := errors.New("from fn")
	if err := r.ScanColumn(context.Background(), 0, 1, 0, func(any, int) error { return mine }); err != mine {
		t.Errorf("fn's error: %v, want it unchanged", err)
	}
	if err := r.ScanColumn(context.Background(), 1, 1, 0, func(any, int) error { return nil }); err == nil {
		t.Error("row group 1 of 1 accepted")
	}
	r.Close()

	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	for i := off; i < off+24; i++ {
		raw[i] = 0xff
	}
	bad := tempPath(t, "bad.parquet")
	if err := os.WriteFile(bad, raw, 0o644); err != nil {
		t.Fatal(err)
	}
	r, err = Open(bad, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	err = r.ScanColumn(context.Background(), 0, 1, 0, func(any, int) error { return nil })
	if err == nil || !strings.Contains(err.Error(), bad) || !strings.Contains(err.Error(), "column x") {
		t.Errorf("corrupt page header: %v, want an error naming %s and column x", err, bad)
	}
}
