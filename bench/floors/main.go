// Command floors times the two things lakescale's passes cannot beat: the
// read floor (decode the scaled columns with Arrow's pqarrow reader and do
// nothing with them) and the write floor (read every column and re-write
// the file unchanged). bench/run runs it next to lakescale.
//
//	floors read  -input LAKE -columns a,b,c -workers N
//	floors copy  -input LAKE -output DIR -workers N [-default-writer]
//
// Both read with plain pqarrow: the file opened with file.OpenParquetFile,
// ArrowReadProperties{BatchSize: 64 Ki rows, Parallel: false} (the batch
// size lakescale uses by default; column parallelism off because files are
// already read in parallel, one per worker), and the Go allocator.
//
// copy writes the way pass two does: a flat file (every benchmark file)
// through arrowio.RewriteParquetAtomic, column chunk by column chunk with
// no map, anything else through arrowio.WriteParquetAtomic; so it has
// lakescale's writer settings (zstd level 1 with raw blocks for pages zstd
// cannot shrink, dictionary encoding off for float columns, encoders
// reused, a constant created_by, row groups as the input's) and the atomic
// write (SHA-256 while writing; fsync and rename in the background,
// arrowio.Commits, as pass two does). That makes the ratio "pass
// two / write floor" measure what scaling and lakescale's orchestration add
// to a copy, and nothing the writer settings change. (Integer columns keep
// dictionary encoding in a copy; pass two writes them scaled, as floats
// without a dictionary, which can make it cheaper than the copy.)
//
// -default-writer instead writes with pqarrow's default properties
// (dictionary on for every column, 1 MiB pages) and zstd to a plain file:
// the reference for output size ("compression ratio within 10% of the
// default writer's"), not a floor.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"sync"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"github.com/lakescale/lakescale/arrowio"
)

const batchRows = 64 << 10

func main() {
	if len(os.Args) < 2 || (os.Args[1] != "read" && os.Args[1] != "copy") {
		fmt.Fprintln(os.Stderr, "usage: floors read|copy -input DIR [-output DIR] [-columns a,b] [-workers N] [-default-writer]")
		os.Exit(2)
	}
	mode := os.Args[1]
	fs := flag.NewFlagSet(mode, flag.ExitOnError)
	input := fs.String("input", "", "input lake")
	output := fs.String("output", "", "output directory (copy)")
	columns := fs.String("columns", "", "comma-separated columns to read (read; default all)")
	workers := fs.Int("workers", 1, "files processed at once")
	defaultWriter := fs.Bool("default-writer", false, "copy with pqarrow's default writer properties")
	_ = fs.Parse(os.Args[2:])
	files, err := arrowio.Discover(*input)
	if err != nil {
		fmt.Fprintln(os.Stderr, "floors:", err)
		os.Exit(1)
	}
	var cols []string
	if *columns != "" {
		cols = strings.Split(*columns, ",")
	}
	var rows, bytes int64
	var mu sync.Mutex
	commits, _ := arrowio.NewCommits(context.Background(), *workers)
	err = forEach(*workers, len(files), func(i int) error {
		var n, b int64
		var err error
		if mode == "read" {
			n, err = readFile(files[i].Abs, cols)
		} else {
			dst := filepath.Join(*output, filepath.FromSlash(files[i].Rel))
			n, b, err = copyFile(files[i].Abs, dst, *defaultWriter, commits)
		}
		if err != nil {
			return fmt.Errorf("%s: %w", files[i].Rel, err)
		}
		mu.Lock()
		rows, bytes = rows+n, bytes+b
		mu.Unlock()
		return nil
	})
	if cerr := commits.Wait(); err == nil {
		err = cerr
	}
	if err != nil {
		fmt.Fprintln(os.Stderr, "floors:", err)
		os.Exit(1)
	}
	fmt.Printf("floors %s: %d files, %d rows, %d bytes written\n", mode, len(files), rows, bytes)
}

// forEach runs task(0..n-1) on workers goroutines and returns the first
// error.
func forEach(workers, n int, task func(i int) error) error {
	next := make(chan int)
	errs := make([]error, n)
	var wg sync.WaitGroup
	for range max(1, workers) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				errs[i] = task(i)
			}
		}()
	}
	for i := range n {
		next <- i
	}
	close(next)
	wg.Wait()
	return errors.Join(errs...)
}

func openReader(path string) (*file.Reader, *pqarrow.FileReader, error) {
	pr, err := file.OpenParquetFile(path, false)
	if err != nil {
		return nil, nil, err
	}
	fr, err := pqarrow.NewFileReader(pr, pqarrow.ArrowReadProperties{BatchSize: batchRows}, memory.DefaultAllocator)
	if err != nil {
		pr.Close()
		return nil, nil, err
	}
	return pr, fr, nil
}

// readFile decodes the named columns (all when cols is nil) of every row
// group and drops the batches.
func readFile(path string, cols []string) (int64, error) {
	pr, fr, err := openReader(path)
	if err != nil {
		return 0, err
	}
	defer pr.Close()
	var leaves []int
	if cols != nil {
		sc := pr.MetaData().Schema
		for _, c := range cols {
			j := sc.ColumnIndexByName(c)
			if j < 0 {
				return 0, fmt.Errorf("no column %s", c)
			}
			leaves = append(leaves, j)
		}
	}
	rr, err := fr.GetRecordReader(context.Background(), leaves, nil)
	if err != nil {
		return 0, err
	}
	defer rr.Release()
	var rows int64
	for rr.Next() {
		rows += rr.Record().NumRows()
	}
	return rows, ignoreEOF(rr.Err())
}

// ignoreEOF: pqarrow's record reader reports a complete read as io.EOF.
func ignoreEOF(err error) error {
	if errors.Is(err, io.EOF) {
		return nil
	}
	return err
}

// arrowRecord is rec's columns under schema.
func arrowRecord(schema *arrow.Schema, rec arrow.Record) arrow.Record {
	return array.NewRecord(schema, rec.Columns(), rec.NumRows())
}

// copyFile re-writes every row group of src, unchanged, as one row group
// of dst.
func copyFile(src, dst string, defaultWriter bool, commits *arrowio.Commits) (rows, bytes int64, err error) {
	pr, fr, err := openReader(src)
	if err != nil {
		return 0, 0, err
	}
	defer pr.Close()
	schema, err := fr.Schema()
	if err != nil {
		return 0, 0, err
	}
	schema = plainSchema(schema)
	fill := func(w *pqarrow.FileWriter) error {
		for rg := range pr.NumRowGroups() {
			rr, err := fr.GetRecordReader(context.Background(), nil, []int{rg})
			if err != nil {
				return err
			}
			w.NewBufferedRowGroup()
			for rr.Next() {
				rec := rr.Record()
				out := arrowRecord(schema, rec)
				err := w.WriteBuffered(out)
				out.Release()
				if err != nil {
					rr.Release()
					return err
				}
			}
			err = ignoreEOF(rr.Err())
			rr.Release()
			if err != nil {
				return err
			}
		}
		return nil
	}
	if !defaultWriter {
		// lakescale's writer: the column chunk rewrite pass two uses for
		// flat files, or record batches through WriteParquetAtomic.
		opts := arrowio.WriteOptions{Compression: arrowio.Zstd, Commits: commits}
		r, err := arrowio.Open(src, memory.DefaultAllocator)
		if err != nil {
			return 0, 0, err
		}
		defer r.Close()
		maps := make([]arrowio.ValueMap, r.Schema().NumFields())
		wr, err := arrowio.RewriteParquetAtomic(context.Background(), dst, r, r.Schema(), maps, opts)
		if errors.Is(err, arrowio.ErrNotRewritable) {
			wr, err = arrowio.WriteParquetAtomic(context.Background(), dst, schema, opts, fill)
		}
		return wr.Rows, wr.Bytes, err
	}
	if err := os.MkdirAll(filepath.Dir(dst), 0o755); err != nil {
		return 0, 0, err
	}
	f, err := os.Create(dst)
	if err != nil {
		return 0, 0, err
	}
	props := parquet.NewWriterProperties(parquet.WithCompression(compress.Codecs.Zstd))
	w, err := pqarrow.NewFileWriter(schema, f, props, pqarrow.NewArrowWriterProperties(pqarrow.WithStoreSchema()))
	if err != nil {
		f.Close()
		return 0, 0, err
	}
	if err := fill(w); err != nil {
		_ = w.Close() // the fill error is the one to report
		return 0, 0, err
	}
	if err := w.Close(); err != nil { // closes f
		return 0, 0, err
	}
	st, err := os.Stat(dst)
	if err != nil {
		return 0, 0, err
	}
	return pr.NumRows(), st.Size(), nil
}

// plainSchema drops the field metadata pqarrow's reader adds
// ("PARQUET:field_id" = "-1"), so records read back match the schema the
// writer is given.
func plainSchema(s *arrow.Schema) *arrow.Schema {
	fields := s.Fields()
	for i := range fields {
		fields[i].Metadata = arrow.Metadata{}
	}
	md := s.Metadata()
	return arrow.NewSchema(fields, &md)
}
