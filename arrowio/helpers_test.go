package arrowio

import (
	"context"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
	pqgo "github.com/xitongsys/parquet-go/reader"
	pqsource "github.com/xitongsys/parquet-go/source"
)

// mixedSchema has the column kinds lakescale passes through or scales.
var mixedSchema = arrow.NewSchema([]arrow.Field{
	{Name: "id", Type: arrow.PrimitiveTypes.Int64, Nullable: true},
	{Name: "x", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	{Name: "site", Type: arrow.BinaryTypes.String, Nullable: true},
	{Name: "n", Type: arrow.PrimitiveTypes.Int32, Nullable: false},
}, nil)

// mixedRow is one expected row of mixedSchema; nil pointers are nulls.
type mixedRow struct {
	id   *int64
	x    *float64
	site *string
	n    int32
}

// mixedRows builds n deterministic rows with nulls in every nullable
// column, NaN, infinities, signed zeros and repeated strings.
func mixedRows(n int) []mixedRow {
	specials := []float64{math.NaN(), math.Inf(1), math.Inf(-1), math.Copysign(0, -1), 0, math.MaxFloat64, math.SmallestNonzeroFloat64}
	sites := []string{"alpha", "beta", "", "gamma δ"}
	rows := make([]mixedRow, n)
	for i := range rows {
		r := mixedRow{n: int32(i*7 - 1000)}
		if i%5 != 3 {
			v := int64(i)*1_000_003 - 1<<40
			r.id = &v
		}
		if i%7 != 2 {
			v := float64(i)*0.37 - 11.5
			if i%11 == 0 {
				v = specials[(i/11)%len(specials)]
			}
			r.x = &v
		}
		if i%6 != 1 {
			s := sites[i%len(sites)]
			r.site = &s
		}
		rows[i] = r
	}
	return rows
}

// buildRecord turns rows into one Arrow record allocated from mem.
func buildRecord(mem memory.Allocator, rows []mixedRow) arrow.Record {
	b := array.NewRecordBuilder(mem, mixedSchema)
	defer b.Release()
	ids := b.Field(0).(*array.Int64Builder)
	xs := b.Field(1).(*array.Float64Builder)
	ss := b.Field(2).(*array.StringBuilder)
	ns := b.Field(3).(*array.Int32Builder)
	for _, r := range rows {
		if r.id == nil {
			ids.AppendNull()
		} else {
			ids.Append(*r.id)
		}
		if r.x == nil {
			xs.AppendNull()
		} else {
			xs.Append(*r.x)
		}
		if r.site == nil {
			ss.AppendNull()
		} else {
			ss.Append(*r.site)
		}
		ns.Append(r.n)
	}
	return b.NewRecord()
}

// writeRows writes rows to path in batches of batch rows.
func writeRows(t testing.TB, mem memory.Allocator, path string, rows []mixedRow, batch int, opts WriteOptions) Written {
	t.Helper()
	opts.Mem = mem
	w, err := WriteParquetAtomic(context.Background(), path, mixedSchema, opts, func(fw *pqarrow.FileWriter) error {
		for lo := 0; lo < len(rows); lo += batch {
			rec := buildRecord(mem, rows[lo:min(lo+batch, len(rows))])
			err := fw.WriteBuffered(rec)
			rec.Release()
			if err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		t.Fatalf("WriteParquetAtomic: %v", err)
	}
	return w
}

// localFile adapts *os.File to the source interface of the independent
// reader github.com/xitongsys/parquet-go (which otherwise takes a source
// from a separate module). Open("") re-opens the same file, as that
// reader does once per column.
type localFile struct {
	*os.File
	path string
}

func (f *localFile) Open(name string) (pqsource.ParquetFile, error) {
	if name == "" {
		name = f.path
	}
	o, err := os.Open(name)
	if err != nil {
		return nil, err
	}
	return &localFile{File: o, path: name}, nil
}

func (f *localFile) Create(string) (pqsource.ParquetFile, error) { return nil, os.ErrPermission }

// independentRead reads every column of a Parquet file with
// github.com/xitongsys/parquet-go, which shares no code with Arrow's
// reader. It returns the footer's row count and key-value metadata and,
// per column, the values with nil for nulls.
func independentRead(t *testing.T, path string) (rows int64, meta map[string]string, cols [][]any) {
	t.Helper()
	pr := openIndependent(t, path)
	rows = pr.GetNumRows()
	meta = map[string]string{}
	for _, kv := range pr.Footer.GetKeyValueMetadata() {
		meta[kv.Key] = kv.GetValue()
	}
	for i := range pr.SchemaHandler.ValueColumns {
		vals, _, dls, err := pr.ReadColumnByIndex(int64(i), rows)
		if err != nil {
			t.Fatalf("xitongsys/parquet-go column %d: %v", i, err)
		}
		if len(vals) != int(rows) || len(dls) != int(rows) {
			t.Fatalf("xitongsys/parquet-go column %d: %d values, %d levels, want %d", i, len(vals), len(dls), rows)
		}
		cols = append(cols, vals)
	}
	return rows, meta, cols
}

// checkMixed compares the independent reader's columns with rows, value
// by value; floats compare by bit pattern so NaN and -0 must survive.
func checkMixed(t *testing.T, cols [][]any, rows []mixedRow) {
	t.Helper()
	if len(cols) != 4 {
		t.Fatalf("independent reader found %d columns, want 4", len(cols))
	}
	for i, r := range rows {
		switch {
		case r.id == nil && cols[0][i] != nil, r.id != nil && cols[0][i] != *r.id:
			t.Fatalf("row %d id = %v, want %v", i, cols[0][i], deref(r.id))
		}
		if r.x == nil {
			if cols[1][i] != nil {
				t.Fatalf("row %d x = %v, want null", i, cols[1][i])
			}
		} else if got, ok := cols[1][i].(float64); !ok || math.Float64bits(got) != math.Float64bits(*r.x) {
			t.Fatalf("row %d x = %v, want %v", i, cols[1][i], *r.x)
		}
		switch {
		case r.site == nil && cols[2][i] != nil, r.site != nil && cols[2][i] != *r.site:
			t.Fatalf("row %d site = %#v, want %#v", i, cols[2][i], deref(r.site))
		}
		if cols[3][i] != r.n {
			t.Fatalf("row %d n = %#v, want %d", i, cols[3][i], r.n)
		}
	}
}

func deref[T any](p *T) any {
	if p == nil {
		return nil
	}
	return *p
}

// listDir returns the names in dir, for asserting that no temporary file
// was left behind.
func listDir(t *testing.T, dir string) []string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, e := range ents {
		names = append(names, e.Name())
	}
	return names
}

func tempPath(t *testing.T, name string) string { return filepath.Join(t.TempDir(), name) }

// openIndependent opens path with the independent reader
// github.com/xitongsys/parquet-go, closed when the test ends.
func openIndependent(t testing.TB, path string) *pqgo.ParquetReader {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	src := &localFile{File: f, path: path}
	t.Cleanup(func() { src.Close() })
	pr, err := pqgo.NewParquetColumnReader(src, 1)
	if err != nil {
		t.Fatalf("xitongsys/parquet-go: %v", err)
	}
	t.Cleanup(pr.ReadStop)
	return pr
}

// writeWithProps writes rec to path with pqarrow and the writer
// properties props, storing the Arrow schema.
func writeWithProps(t *testing.T, path string, rec arrow.Record, props *parquet.WriterProperties) {
	t.Helper()
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	w, err := pqarrow.NewFileWriter(rec.Schema(), f, props, pqarrow.NewArrowWriterProperties(pqarrow.WithStoreSchema()))
	if err != nil {
		t.Fatal(err)
	}
	if err := w.Write(rec); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

// sameIndependentValues fails t unless the independent reader
// github.com/xitongsys/parquet-go reads the same values from both files.
func sameIndependentValues(t *testing.T, a, b string) {
	t.Helper()
	_, _, ac := independentRead(t, a)
	_, _, bc := independentRead(t, b)
	if !reflect.DeepEqual(ac, bc) {
		t.Fatalf("the independent reader reads other values from %s than from %s", b, a)
	}
}
