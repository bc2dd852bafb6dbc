package arrowio

import (
	"context"
	"fmt"
	"io"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"github.com/lakescale/lakescale/internal/invariants"
)

// Compression names an output codec.
type Compression string

const (
	Zstd   Compression = "zstd"
	Snappy Compression = "snappy"
	None   Compression = "none"
)

// DefaultRowGroupRows caps the rows of one row group when
// WriteOptions.RowGroupRows is 0. About a million rows keeps a float64
// column chunk near 8 MiB: large enough for efficient scans, small enough
// that a buffered row group of a dozen columns stays around 100 MiB
// (common practice puts row groups in the tens to hundreds of MiB).
const DefaultRowGroupRows = 1 << 20

// CreatedBy is the constant written as the Parquet footer's created_by, so
// that no library version string makes outputs differ between builds.
const CreatedBy = "lakescale"

// WriteOptions configure Parquet outputs.
type WriteOptions struct {
	Compression  Compression // "" means Zstd
	RowGroupRows int64       // 0: DefaultRowGroupRows
	Metadata     map[string]string
	// Mem allocates the writer's buffers; nil means memory.DefaultAllocator.
	Mem memory.Allocator
	// BatchRows is how many rows RewriteParquetAtomic moves at a time;
	// 0 means DefaultBatchRows.
	BatchRows int64
	// Commits, when set, puts local files in place in the background:
	// the write returns once the file is written and hashed, and the file
	// is in place once Commits.Wait has returned nil.
	Commits *Commits
}

func (o WriteOptions) allocator() memory.Allocator {
	if o.Mem == nil {
		return memory.DefaultAllocator
	}
	return o.Mem
}

// Written describes a committed output file.
type Written struct {
	Rows   int64
	Bytes  int64
	SHA256 string // lowercase hex
}

func (c Compression) codec() (compress.Compression, error) {
	switch c {
	case Zstd, "":
		return compress.Codecs.Zstd, nil
	case Snappy:
		return compress.Codecs.Snappy, nil
	case None:
		return compress.Codecs.Uncompressed, nil
	}
	return 0, fmt.Errorf("unknown compression %q (want zstd, snappy or none)", string(c))
}

// outputZstdLevel is the zstd level outputs are written with: 1, the fastest
// of klauspost/compress's encoders. On the benchmark lake (make bench)
// level 1 instead of the default 3 cut the CPU time of re-writing a file
// by 12-15%, and the files grew by 2.4%; compression is the largest
// single cost of pass two.
const outputZstdLevel = 1

// outputPageBytes is the data page size outputs are written with, a
// quarter of Arrow's default (1 MiB). Each page is compressed on its own,
// and a zstd encoder working through 256 KiB pages stays within the CPU's
// caches: a full run of a quarter of the benchmark lake (make bench) took
// 7-10% less CPU at 1 and 2 workers, for files 1.5% larger. (A variable
// so that tests can cut many pages from little data.)
var outputPageBytes int64 = 256 << 10

// writerProps builds deterministic writer properties for schema: the
// chosen codec (zstd at outputZstdLevel), a constant created_by, the
// row-group cap, pages of outputPageBytes, and dictionary encoding off for
// float and double columns, whose high-entropy values rarely repeat (a
// dictionary there costs CPU and is usually abandoned for plain encoding
// once the dictionary page fills). extra comes last, overriding the rest.
func writerProps(schema *arrow.Schema, opts WriteOptions, mem memory.Allocator, extra ...parquet.WriterProperty) (*parquet.WriterProperties, pqarrow.ArrowWriterProperties, error) {
	codec, err := opts.Compression.codec()
	if err != nil {
		return nil, pqarrow.ArrowWriterProperties{}, err
	}
	rg := opts.RowGroupRows
	if rg <= 0 {
		rg = DefaultRowGroupRows
	}
	arrowProps := pqarrow.NewArrowWriterProperties(pqarrow.WithStoreSchema(), pqarrow.WithAllocator(mem))
	base := []parquet.WriterProperty{
		parquet.WithAllocator(mem),
		parquet.WithCompression(codec),
		parquet.WithCreatedBy(CreatedBy),
		parquet.WithMaxRowGroupLength(rg),
		parquet.WithDictionaryDefault(true),
		parquet.WithDataPageSize(outputPageBytes),
	}
	if codec == compress.Codecs.Zstd {
		base = append(base, parquet.WithCompressionLevel(outputZstdLevel))
	}
	pqSchema, err := pqarrow.ToParquet(schema, parquet.NewWriterProperties(base...), arrowProps)
	if err != nil {
		return nil, pqarrow.ArrowWriterProperties{}, err
	}
	for i := 0; i < pqSchema.NumColumns(); i++ {
		col := pqSchema.Column(i)
		switch col.PhysicalType() {
		case parquet.Types.Float, parquet.Types.Double:
			base = append(base, parquet.WithDictionaryPath(col.ColumnPath(), false))
		}
	}
	base = append(base, extra...)
	return parquet.NewWriterProperties(base...), arrowProps, nil
}

// WriteParquetAtomic writes a Parquet file at path atomically: fill writes
// record batches through w (check ctx between batches); on any error or
// cancellation the temporary file is removed and nothing appears at path.
// The SHA-256 is computed while writing.
//
// w.Write starts at least one row group per call; for batches smaller than
// a row group use w.WriteBuffered, which fills row groups up to
// opts.RowGroupRows. An empty fill gives a valid file with no rows.
//
// The file stores the Arrow schema (so types round-trip), opts.Metadata
// in the footer's key-value metadata in sorted key order, and a constant
// created_by; the same input gives the same bytes. ctx is checked before
// fill runs and after it returns; a cancelled ctx gives context.Cause(ctx)
// unchanged. Other errors, including fill's, come back as "write path: err";
// do not add the path again. fill must not close w.
func WriteParquetAtomic(ctx context.Context, path string, schema *arrow.Schema, opts WriteOptions, fill func(w *pqarrow.FileWriter) error) (Written, error) {
	if err := context.Cause(ctx); err != nil {
		return Written{}, err
	}
	mem := opts.allocator()
	props, arrowProps, err := writerProps(schema, opts, mem)
	if err != nil {
		return Written{}, pathError("write", path, err)
	}
	keys, err := metadataKeys(opts.Metadata)
	if err != nil {
		return Written{}, pathError("write", path, err)
	}
	return writeParquetFile(ctx, path, opts.Commits, func(sink *stickyWriter) (int64, error) {
		return writeParquet(ctx, sink, schema, props, arrowProps, keys, opts.Metadata, fill)
	})
}

// writeParquetFile runs write over the temporary file (or object) of an
// atomic write of path and commits it, or hands a local file to commits
// when not nil; it returns the file's size and SHA-256.
// write returns the rows written; its errors other than context.Cause(ctx)
// come back as "write path: err".
func writeParquetFile(ctx context.Context, path string, commits *Commits, write func(sink *stickyWriter) (int64, error)) (Written, error) {
	st, key, err := Locate(path)
	if err != nil {
		return Written{}, err
	}
	var rows int64
	fill := func(w io.Writer) error {
		r, err := write(&stickyWriter{w: w})
		if err == nil || err == context.Cause(ctx) {
			rows = r
			return err
		}
		return pathError("write", path, err)
	}
	var n int64
	var sum string
	if _, local := st.(localStore); local && commits != nil {
		var check func(int64)
		if invariants.Enabled {
			check = func(n int64) { checkWritten(st, key, path, rows, n) }
		}
		n, sum, err = writeDeferred(key, commits, fill, check)
	} else {
		n, sum, err = st.Write(ctx, key, false, fill)
		if err == nil && invariants.Enabled {
			checkWritten(st, key, path, rows, n)
		}
	}
	if err != nil {
		return Written{}, err
	}
	return Written{Rows: rows, Bytes: n, SHA256: sum}, nil
}

// sinkPanics runs write, which drives a Parquet writer over sink. The
// writer panics on some sink failures (the magic bytes, page writes); when
// sink has recorded an I/O error such a panic is that error, returned after
// cleanup runs. Any other panic is a bug and is re-raised.
func sinkPanics(sink *stickyWriter, cleanup func(), write func() (int64, error)) (rows int64, err error) {
	defer func() {
		if p := recover(); p != nil {
			if sink.err == nil {
				panic(p)
			}
			cleanup()
			rows, err = 0, sink.err
		}
	}()
	rows, err = write()
	if err == nil && sink.err != nil {
		// file.Writer.Close can drop an error from writing the footer; the
		// sticky writer keeps it.
		return 0, sink.err
	}
	return rows, err
}

// writeParquet runs the pqarrow writer over w, with fill writing the
// record batches.
func writeParquet(ctx context.Context, w *stickyWriter, schema *arrow.Schema, props *parquet.WriterProperties, arrowProps pqarrow.ArrowWriterProperties, keys []string, meta map[string]string, fill func(*pqarrow.FileWriter) error) (int64, error) {
	var fw *pqarrow.FileWriter
	return sinkPanics(w, func() { closeQuietly(fw) }, func() (int64, error) {
		var err error
		fw, err = pqarrow.NewFileWriter(schema, w, props, arrowProps)
		if err != nil {
			return 0, err
		}
		if err := context.Cause(ctx); err != nil {
			closeQuietly(fw)
			return 0, err
		}
		ferr := fill(fw)
		if err := context.Cause(ctx); err != nil {
			closeQuietly(fw)
			return 0, err
		}
		if ferr != nil {
			closeQuietly(fw)
			return 0, ferr
		}
		for _, k := range keys {
			if err := fw.AppendKeyValueMetadata(k, meta[k]); err != nil {
				closeQuietly(fw)
				return 0, err
			}
		}
		if err := fw.Close(); err != nil {
			return 0, err
		}
		return int64(fw.NumRows()), nil
	})
}

// stickyWriter keeps the first error of w and returns it from every later
// Write, because the Parquet writer does not report every failure it sees
// (and panics on some). It has no Close method: pqarrow's FileWriter.Close
// closes a sink that is an io.Closer.
type stickyWriter struct {
	w   io.Writer
	err error
}

func (s *stickyWriter) Write(p []byte) (int, error) {
	if s.err != nil {
		return 0, s.err
	}
	n, err := s.w.Write(p)
	if err == nil && n < len(p) {
		err = io.ErrShortWrite
	}
	s.err = err
	return n, err
}

// checkWritten re-reads the committed file's size and footer and panics
// if they disagree with what the writer counted.
func checkWritten(st Store, key, path string, rows, n int64) {
	info, err := st.Stat(background, key)
	if err != nil {
		panic(fmt.Sprintf("arrowio: committed %s but cannot stat it: %v", path, err))
	}
	if info.Size != n {
		panic(fmt.Sprintf("arrowio: wrote %d bytes to %s, stat says %d", n, path, info.Size))
	}
	got, _, _, err := ReadFooter(path)
	if err != nil || got != rows {
		panic(fmt.Sprintf("arrowio: wrote %d rows to %s, footer says %d (%v)", rows, path, got, err))
	}
}

// closeQuietly closes fw on an error path to release its buffers; the
// output is discarded, so its error (or panic) does not matter.
func closeQuietly(fw *pqarrow.FileWriter) {
	if fw == nil {
		return
	}
	defer func() { _ = recover() }()
	_ = fw.Close()
}
