package main

import (
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"strconv"
	"time"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/decimal128"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
	"github.com/rogpeppe/go-internal/testscript"
)

// typesSchema has the integer widths the lake lacks (scaled when
// selected) and columns of non-numeric types that must pass through
// unchanged.
func typesSchema() *arrow.Schema {
	return arrow.NewSchema([]arrow.Field{
		{Name: "i8", Type: arrow.PrimitiveTypes.Int8, Nullable: true},
		{Name: "i16", Type: arrow.PrimitiveTypes.Int16},
		{Name: "u8", Type: arrow.PrimitiveTypes.Uint8},
		{Name: "u16", Type: arrow.PrimitiveTypes.Uint16},
		{Name: "u32", Type: arrow.PrimitiveTypes.Uint32, Nullable: true},
		{Name: "flag", Type: arrow.FixedWidthTypes.Boolean, Nullable: true},
		{Name: "day", Type: arrow.FixedWidthTypes.Date32},
		{Name: "ts_ms", Type: &arrow.TimestampType{Unit: arrow.Millisecond, TimeZone: "UTC"}},
		{Name: "ts_ns", Type: &arrow.TimestampType{Unit: arrow.Nanosecond}, Nullable: true},
		{Name: "amount", Type: &arrow.Decimal128Type{Precision: 12, Scale: 3}},
		{Name: "blob", Type: arrow.BinaryTypes.Binary},
		{Name: "note", Type: arrow.BinaryTypes.LargeString, Nullable: true},
		{Name: "code", Type: &arrow.FixedSizeBinaryType{ByteWidth: 4}},
		{Name: "cat", Type: &arrow.DictionaryType{IndexType: arrow.PrimitiveTypes.Int32, ValueType: arrow.BinaryTypes.String}},
	}, nil)
}

// cmdGenTypes writes FILES files DIR/part=K/data.parquet of ROWS rows
// each with typesSchema, values from a seeded generator; u32 holds values
// above 2^31 (negative if misread as int32).
//
//	gen-types DIR FILES ROWS
func cmdGenTypes(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "gen-types")
	if len(args) != 3 {
		ts.Fatalf("usage: gen-types DIR FILES ROWS")
	}
	files, err := strconv.Atoi(args[1])
	ts.Check(err)
	rows, err := strconv.Atoi(args[2])
	ts.Check(err)
	schema := typesSchema()
	base := time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC)
	for k := range files {
		rng := rand.New(rand.NewPCG(uint64(k), 42))
		b := array.NewRecordBuilder(memory.DefaultAllocator, schema)
		for i := range rows {
			if i%7 == 3 {
				b.Field(0).AppendNull()
			} else {
				b.Field(0).(*array.Int8Builder).Append(int8(rng.IntN(256) - 128))
			}
			b.Field(1).(*array.Int16Builder).Append(int16(rng.IntN(65536) - 32768))
			b.Field(2).(*array.Uint8Builder).Append(uint8(rng.IntN(256)))
			b.Field(3).(*array.Uint16Builder).Append(uint16(rng.IntN(65536)))
			if i%11 == 5 {
				b.Field(4).AppendNull()
			} else {
				b.Field(4).(*array.Uint32Builder).Append(uint32(3_000_000_000 + rng.IntN(1_000_000_000)))
			}
			if i%5 == 0 {
				b.Field(5).AppendNull()
			} else {
				b.Field(5).(*array.BooleanBuilder).Append(rng.IntN(2) == 1)
			}
			b.Field(6).(*array.Date32Builder).Append(arrow.Date32FromTime(base.AddDate(0, 0, rng.IntN(400))))
			b.Field(7).(*array.TimestampBuilder).Append(arrow.Timestamp(base.UnixMilli() + rng.Int64N(1e10)))
			if i%9 == 2 {
				b.Field(8).AppendNull()
			} else {
				b.Field(8).(*array.TimestampBuilder).Append(arrow.Timestamp(base.UnixNano() + rng.Int64N(1e15)))
			}
			b.Field(9).(*array.Decimal128Builder).Append(decimal128.FromI64(rng.Int64N(1e11) - 5e10))
			b.Field(10).(*array.BinaryBuilder).Append([]byte{byte(i), 0, byte(rng.IntN(256))})
			if i%4 == 1 {
				b.Field(11).AppendNull()
			} else {
				b.Field(11).(*array.LargeStringBuilder).Append(fmt.Sprintf("note %d/%d", k, i))
			}
			b.Field(12).(*array.FixedSizeBinaryBuilder).Append([]byte{'c', byte('a' + k), byte(i), 0xff})
			ts.Check(b.Field(13).(*array.BinaryDictionaryBuilder).AppendString([]string{"red", "green", "blue"}[rng.IntN(3)]))
		}
		rec := b.NewRecord()
		b.Release()
		path := filepath.Join(ts.MkAbs(args[0]), fmt.Sprintf("part=%d", k), "data.parquet")
		writeArrowRecord(ts, path, rec, 100)
		rec.Release()
	}
}

// arrowSchemaOf reads the Arrow schema stored in a Parquet file's footer
// with Arrow's pqarrow reader.
func arrowSchemaOf(path string) (*arrow.Schema, error) {
	r, err := file.OpenParquetFile(path, false)
	if err != nil {
		return nil, err
	}
	defer r.Close()
	fr, err := pqarrow.NewFileReader(r, pqarrow.ArrowReadProperties{}, memory.DefaultAllocator)
	if err != nil {
		return nil, err
	}
	return fr.Schema()
}
