package arrowio

import (
	"context"
	"io"
	"math/rand/v2"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

const benchRows = 1 << 20

var benchSchema = arrow.NewSchema([]arrow.Field{{Name: "v", Type: arrow.PrimitiveTypes.Float64, Nullable: true}}, nil)

// benchRecord is about a million float64 values with a few nulls, spread
// like scaled sensor readings (high entropy in the low mantissa bits).
func benchRecord(mem memory.Allocator) arrow.Record {
	rng := rand.New(rand.NewPCG(7, 11))
	b := array.NewFloat64Builder(mem)
	defer b.Release()
	b.Reserve(benchRows)
	for i := 0; i < benchRows; i++ {
		if i%97 == 0 {
			b.AppendNull()
			continue
		}
		b.Append(rng.NormFloat64()*3.5 + 20)
	}
	arr := b.NewArray()
	defer arr.Release()
	return array.NewRecord(benchSchema, []arrow.Array{arr}, benchRows)
}

// cpuTime is the process's user plus system CPU time (getrusage(2)); on a
// shared machine it is steadier than wall time.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// BenchmarkWriteFloat64 encodes a ~1M-row float64 record to io.Discard
// (no disk, so only the encoding CPU is measured) with Arrow's zstd codec
// and the reusing one, with dictionary encoding on and off. It reports
// CPU ms per op next to wall time and the output size.
func BenchmarkWriteFloat64(b *testing.B) {
	rec := benchRecord(memory.DefaultAllocator)
	defer rec.Release()
	for _, codec := range []struct {
		name string
		c    compress.Codec
	}{{"stock", stockZstd}, {"reuse", reuseZstd{stockZstd}}} {
		for _, dict := range []bool{true, false} {
			name := codec.name + "/dict=off"
			if dict {
				name = codec.name + "/dict=on"
			}
			b.Run(name, func(b *testing.B) {
				useCodec(b, codec.c)
				props, arrowProps, err := writerProps(benchSchema, WriteOptions{}, memory.DefaultAllocator)
				if err != nil {
					b.Fatal(err)
				}
				if dict {
					props = parquet.NewWriterProperties(
						parquet.WithCompression(compress.Codecs.Zstd),
						parquet.WithCreatedBy(CreatedBy),
						parquet.WithMaxRowGroupLength(DefaultRowGroupRows),
						parquet.WithDictionaryDefault(true))
				}
				b.SetBytes(benchRows * 8)
				b.ReportAllocs()
				var size int64
				start := cpuTime()
				b.ResetTimer()
				for i := 0; i < b.N; i++ {
					tw := newTeeWriter(io.Discard)
					if _, err := writeParquet(context.Background(), &stickyWriter{w: tw}, benchSchema, props, arrowProps, nil, nil, func(fw *pqarrow.FileWriter) error {
						return fw.Write(rec)
					}); err != nil {
						b.Fatal(err)
					}
					size = tw.n
				}
				b.StopTimer()
				b.ReportMetric(float64(cpuTime()-start)/float64(time.Millisecond)/float64(b.N), "cpu-ms/op")
				b.ReportMetric(float64(size), "file-bytes")
			})
		}
	}
}

// BenchmarkWriteParquetAtomic is the whole write path for the same record:
// temporary file, hash, fsync, rename and folder fsync.
func BenchmarkWriteParquetAtomic(b *testing.B) {
	rec := benchRecord(memory.DefaultAllocator)
	defer rec.Release()
	path := filepath.Join(b.TempDir(), "v.parquet")
	b.SetBytes(benchRows * 8)
	start := cpuTime()
	for i := 0; i < b.N; i++ {
		if _, err := WriteParquetAtomic(context.Background(), path, benchSchema, WriteOptions{}, func(fw *pqarrow.FileWriter) error {
			return fw.Write(rec)
		}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(cpuTime()-start)/float64(time.Millisecond)/float64(b.N), "cpu-ms/op")
}

// BenchmarkReadFloat64 reads the ~1M-row float64 file back in 64Ki-row
// batches, with whole-chunk reads and with buffered streams.
func BenchmarkReadFloat64(b *testing.B) {
	rec := benchRecord(memory.DefaultAllocator)
	path := filepath.Join(b.TempDir(), "v.parquet")
	if _, err := WriteParquetAtomic(context.Background(), path, benchSchema, WriteOptions{}, func(fw *pqarrow.FileWriter) error {
		return fw.Write(rec)
	}); err != nil {
		b.Fatal(err)
	}
	rec.Release()
	for _, buffered := range []bool{false, true} {
		name := "whole-chunk"
		if buffered {
			name = "buffered"
		}
		b.Run(name, func(b *testing.B) {
			old := bufferedStreams
			bufferedStreams = buffered
			defer func() { bufferedStreams = old }()
			b.SetBytes(benchRows * 8)
			b.ReportAllocs()
			start := cpuTime()
			for i := 0; i < b.N; i++ {
				r, err := Open(path, memory.DefaultAllocator)
				if err != nil {
					b.Fatal(err)
				}
				rows := int64(0)
				for rg := 0; rg < r.NumRowGroups(); rg++ {
					rr, err := r.Records(context.Background(), rg, nil, DefaultBatchRows)
					if err != nil {
						b.Fatal(err)
					}
					for rr.Next() {
						rows += rr.Record().NumRows()
					}
					if err := rr.Err(); err != nil {
						b.Fatal(err)
					}
					rr.Release()
				}
				r.Close()
				if rows != benchRows {
					b.Fatalf("read %d rows", rows)
				}
			}
			b.ReportMetric(float64(cpuTime()-start)/float64(time.Millisecond)/float64(b.N), "cpu-ms/op")
		})
	}
}
