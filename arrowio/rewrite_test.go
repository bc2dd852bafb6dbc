package arrowio

import (
	"bytes"
	"context"
	"errors"
	"math"
	"os"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
)

// rewriteInput writes mixedRows(n) in row groups of rg rows.
func rewriteInput(t *testing.T, n int, rg int64) (string, []mixedRow) {
	t.Helper()
	path := tempPath(t, "in.parquet")
	rows := mixedRows(n)
	writeRows(t, memory.DefaultAllocator, path, rows, 3000, WriteOptions{RowGroupRows: rg})
	return path, rows
}

func openT(t *testing.T, path string) *Reader {
	t.Helper()
	r, err := Open(path, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { r.Close() })
	return r
}

// TestRewriteCopies: with no maps the rewrite is a faithful copy: the
// independent reader github.com/xitongsys/parquet-go reads back every
// value (NaN, infinities, signed zeros, nulls, strings), the row groups are
// the input's, the Arrow schema and the metadata come back, and a second
// rewrite gives the same bytes.
func TestRewriteCopies(t *testing.T) {
	in, rows := rewriteInput(t, 25000, 10000)
	r := openT(t, in)
	maps := make([]ValueMap, 4)
	if !r.CanRewrite(mixedSchema, maps) {
		t.Fatal("CanRewrite = false for a flat file")
	}
	out := tempPath(t, "out.parquet")
	opts := WriteOptions{Metadata: map[string]string{"b": "2", "a": "1"}, BatchRows: 999}
	w, err := RewriteParquetAtomic(context.Background(), out, r, mixedSchema, maps, opts)
	if err != nil {
		t.Fatal(err)
	}
	if w.Rows != int64(len(rows)) {
		t.Errorf("wrote %d rows, want %d", w.Rows, len(rows))
	}
	n, meta, cols := independentRead(t, out)
	if n != int64(len(rows)) || meta["a"] != "1" || meta["b"] != "2" {
		t.Errorf("independent reader: %d rows, metadata %v", n, meta)
	}
	checkMixed(t, cols, rows)
	back := openT(t, out)
	if back.NumRowGroups() != 3 || back.RowGroupRows(2) != 5000 {
		t.Errorf("%d row groups, the last of %d rows; want the input's 3 and 5000", back.NumRowGroups(), back.RowGroupRows(2))
	}
	if !back.Schema().Equal(mixedSchema) {
		t.Errorf("schema read back %s, want %s", back.Schema(), mixedSchema)
	}
	r2 := openT(t, in)
	again := tempPath(t, "again.parquet")
	if _, err := RewriteParquetAtomic(context.Background(), again, r2, mixedSchema, maps, opts); err != nil {
		t.Fatal(err)
	}
	a, _ := os.ReadFile(out)
	b, _ := os.ReadFile(again)
	if !bytes.Equal(a, b) {
		t.Error("two rewrites of the same input differ")
	}
	// The input was read front to back: the hash needed only the footer.
	if _, _, err := r.Checksum(); err != nil || r.hasher.gaps > 64<<10 {
		t.Errorf("Checksum: %v; %d bytes read again to hash", err, r.hasher.gaps)
	}
}

// TestRewriteMaps: mapped columns get the map's values at the rows of the
// input's non-null values and stay null elsewhere, as float64 or float32
// output columns, also when the input column is required (n); the other
// columns are copied.
func TestRewriteMaps(t *testing.T) {
	in, rows := rewriteInput(t, 12000, 5000)
	r := openT(t, in)
	out := arrow.NewSchema([]arrow.Field{
		mixedSchema.Field(0),
		{Name: "x", Type: arrow.PrimitiveTypes.Float32, Nullable: true},
		mixedSchema.Field(2),
		{Name: "n", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
	}, nil)
	half := func(vals, out any) error {
		for i, v := range vals.([]float64) {
			out.([]float32)[i] = float32(v / 2)
		}
		return nil
	}
	plusOne := func(vals, out any) error {
		for i, v := range vals.([]int32) {
			out.([]float64)[i] = float64(v) + 1
		}
		return nil
	}
	maps := []ValueMap{nil, half, nil, plusOne}
	if !r.CanRewrite(out, maps) {
		t.Fatal("CanRewrite = false")
	}
	path := tempPath(t, "out.parquet")
	if _, err := RewriteParquetAtomic(context.Background(), path, r, out, maps, WriteOptions{BatchRows: 777}); err != nil {
		t.Fatal(err)
	}
	_, _, cols := independentRead(t, path)
	for i, row := range rows {
		switch got := cols[1][i]; {
		case row.x == nil && got != nil:
			t.Fatalf("row %d x = %v, want null", i, got)
		case row.x != nil:
			g, ok := got.(float32)
			if want := float32(*row.x / 2); !ok || math.Float32bits(g) != math.Float32bits(want) && !(math.IsNaN(float64(g)) && math.IsNaN(float64(want))) {
				t.Fatalf("row %d x = %v, want %v", i, got, want)
			}
		}
		if got, ok := cols[3][i].(float64); !ok || got != float64(row.n)+1 {
			t.Fatalf("row %d n = %v, want %v", i, cols[3][i], float64(row.n)+1)
		}
		if row.site == nil && cols[2][i] != nil || row.site != nil && cols[2][i] != *row.site {
			t.Fatalf("row %d site = %#v, want %#v", i, cols[2][i], deref(row.site))
		}
	}
}

// TestRewriteRefuses: nested columns, a mapped column that cannot be
// scanned, a copied column whose type changes, or a map count that does
// not match make CanRewrite false and RewriteParquetAtomic an error that
// names the output, with nothing written.
func TestRewriteRefuses(t *testing.T) {
	in, _ := rewriteInput(t, 100, 0)
	r := openT(t, in)
	noop := func(vals, out any) error { return nil }
	changed := arrow.NewSchema([]arrow.Field{
		{Name: "id", Type: arrow.PrimitiveTypes.Int32, Nullable: true}, mixedSchema.Field(1), mixedSchema.Field(2), mixedSchema.Field(3),
	}, nil)
	for name, c := range map[string]struct {
		schema *arrow.Schema
		maps   []ValueMap
	}{
		"string mapped":       {mixedSchema, []ValueMap{nil, nil, noop, nil}},
		"copied type changes": {changed, make([]ValueMap, 4)},
		"too few maps":        {mixedSchema, make([]ValueMap, 3)},
	} {
		if r.CanRewrite(c.schema, c.maps) {
			t.Errorf("%s: CanRewrite = true", name)
		}
		out := tempPath(t, "out.parquet")
		_, err := RewriteParquetAtomic(context.Background(), out, r, c.schema, c.maps, WriteOptions{})
		if !errors.Is(err, ErrNotRewritable) || !strings.Contains(err.Error(), out) {
			t.Errorf("%s: %v, want ErrNotRewritable naming %s", name, err, out)
		}
		if _, serr := os.Stat(out); !os.IsNotExist(serr) {
			t.Errorf("%s: output exists", name)
		}
	}

	nested := tempPath(t, "all.parquet")
	_, err := WriteParquetAtomic(context.Background(), nested, allTypesSchema, WriteOptions{}, func(w *pqarrow.FileWriter) error {
		rec := allTypesRecord(memory.DefaultAllocator, 0, 100)
		defer rec.Release()
		return w.Write(rec)
	})
	if err != nil {
		t.Fatal(err)
	}
	if openT(t, nested).CanRewrite(allTypesSchema, make([]ValueMap, 12)) {
		t.Error("CanRewrite = true for a file with a list column")
	}
}

// TestRewriteFailures: an error from a map, a cancelled context and a
// corrupt input column each stop the rewrite with nothing at the output
// path and no temporary file left; the map's error and the cause come
// back, the corruption is named by column.
func TestRewriteFailures(t *testing.T) {
	in, _ := rewriteInput(t, 20000, 0)
	mine := errors.New("map says no")
	fails := func(vals, out any) error { return mine }
	dir := t.TempDir()
	out := dir + "/out.parquet"
	_, err := RewriteParquetAtomic(context.Background(), out, openT(t, in), mixedSchema, []ValueMap{nil, fails, nil, nil}, WriteOptions{})
	if !errors.Is(err, mine) || !strings.Contains(err.Error(), "column x") || !strings.Contains(err.Error(), out) {
		t.Errorf("map error: %v", err)
	}
	cause := errors.New("stop")
	ctx, cancel := context.WithCancelCause(context.Background())
	stopNow := func(vals, out any) error { cancel(cause); return nil }
	_, err = RewriteParquetAtomic(ctx, out, openT(t, in), mixedSchema, []ValueMap{nil, nil, nil, nil}, WriteOptions{BatchRows: 100})
	if err != nil {
		t.Fatalf("uncancelled rewrite: %v", err)
	}
	if err := os.Remove(out); err != nil {
		t.Fatal(err)
	}
	x := arrow.NewSchema([]arrow.Field{mixedSchema.Field(0), {Name: "x", Type: arrow.PrimitiveTypes.Float64, Nullable: true}, mixedSchema.Field(2), mixedSchema.Field(3)}, nil)
	copyX := func(vals, out any) error { copy(out.([]float64), vals.([]float64)); return stopNow(vals, out) }
	_, err = RewriteParquetAtomic(ctx, out, openT(t, in), x, []ValueMap{nil, copyX, nil, nil}, WriteOptions{BatchRows: 100})
	if err != cause {
		t.Errorf("cancelled rewrite: %v, want the cause", err)
	}

	raw, err := os.ReadFile(in)
	if err != nil {
		t.Fatal(err)
	}
	off := openT(t, in)
	cc, err := off.pr.MetaData().RowGroup(0).ColumnChunk(2)
	if err != nil {
		t.Fatal(err)
	}
	for i := cc.DataPageOffset(); i < cc.DataPageOffset()+24; i++ {
		raw[i] = 0xff
	}
	bad := dir + "/bad.parquet"
	if err := os.WriteFile(bad, raw, 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = RewriteParquetAtomic(context.Background(), out, openT(t, bad), mixedSchema, make([]ValueMap, 4), WriteOptions{})
	if err == nil || !strings.Contains(err.Error(), "column site") {
		t.Errorf("corrupt input: %v, want an error naming column site", err)
	}
	if got := listDir(t, dir); len(got) != 1 || got[0] != "bad.parquet" {
		t.Errorf("left behind: %v", got)
	}
}

// fakeChunk is a column chunk reader that serves scripted batches, for
// the failures Parquet's own reader lets through.
type fakeChunk struct {
	batches []fakeBatch
	err     error // what Err reports once the batches are used up
}

type fakeBatch struct {
	vals []int32
	defs []int16
}

func (f *fakeChunk) HasNext() bool { return len(f.batches) > 0 }

func (f *fakeChunk) Err() error {
	if len(f.batches) == 0 {
		return f.err
	}
	return nil
}

func (f *fakeChunk) ReadBatch(n int64, vals []int32, defs, _ []int16) (int64, int, error) {
	b := f.batches[0]
	f.batches = f.batches[1:]
	copy(vals, b.vals)
	copy(defs, b.defs)
	return int64(max(len(b.defs), len(b.vals))), len(b.vals), nil
}

// TestReadChunkChecks: readChunk reports an error the column reader met
// opening a later page though ReadBatch returned none (Parquet's reader
// would otherwise go on decoding with the previous page's decoder), keeps
// reporting it, and refuses a batch whose value count does not match its
// definition levels (or, for a required column, its rows).
func TestReadChunkChecks(t *testing.T) {
	buf, defs := make([]int32, 8), make([]int16, 8)
	broken := errors.New("bad page header")
	cr := &fakeChunk{batches: []fakeBatch{{vals: []int32{1, 2}, defs: []int16{1, 0, 1}}, {vals: []int32{3}, defs: []int16{1}}}, err: broken}
	vals, lv, n, err := readChunk[int32](cr, buf, defs)
	if err != nil || n != 3 || len(vals) != 2 || cap(vals) != 2 || len(lv) != 3 {
		t.Fatalf("first batch: %v %v %d %v", vals, lv, n, err)
	}
	// The second batch comes back while the reader has met an error
	// opening the page after it.
	for range 2 {
		if _, _, _, err := readChunk[int32](cr, buf, defs); !errors.Is(err, broken) {
			t.Errorf("after a page error: %v, want it", err)
		}
	}
	short := &fakeChunk{batches: []fakeBatch{{vals: []int32{1}, defs: []int16{1, 1, 0}}}}
	if _, _, _, err := readChunk[int32](short, buf, defs); !errors.Is(err, errCorruptData) {
		t.Errorf("1 value for 2 defined rows: %v, want errCorruptData", err)
	}
	required := &fakeChunk{batches: []fakeBatch{{vals: []int32{1, 2}, defs: []int16{0, 0, 0}}}}
	if _, _, _, err := readChunk[int32](required, buf, nil); !errors.Is(err, errCorruptData) {
		t.Errorf("2 values for 3 required rows: %v, want errCorruptData", err)
	}
}

// TestRewriteFollowsAbandonedDictionary: a copied column whose input
// writer gave up its dictionary (distinct int64 values overflowing a 4 KiB
// dictionary page) is copied without a dictionary; a column whose input
// kept one (three strings) keeps it. The independent reader
// github.com/xitongsys/parquet-go reads the same values from both files.
func TestRewriteFollowsAbandonedDictionary(t *testing.T) {
	mem := memory.DefaultAllocator
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "ts", Type: arrow.PrimitiveTypes.Int64},
		{Name: "site", Type: arrow.BinaryTypes.String},
	}, nil)
	b := array.NewRecordBuilder(mem, sc)
	defer b.Release()
	sites := []string{"cape-east", "high-moor", "salt-flats"}
	for i := range 50_000 {
		b.Field(0).(*array.Int64Builder).Append(1_700_000_000 + int64(i)*10)
		b.Field(1).(*array.StringBuilder).Append(sites[i%3])
	}
	rec := b.NewRecord()
	defer rec.Release()
	in := tempPath(t, "in.parquet")
	writeWithProps(t, in, rec, parquet.NewWriterProperties(parquet.WithDictionaryDefault(true), parquet.WithDictionaryPageSizeLimit(4<<10)))
	r := openT(t, in)
	if !r.dictionaryAbandoned(0) || r.dictionaryAbandoned(1) {
		t.Fatalf("abandoned dictionaries: ts %v, site %v; want true, false", r.dictionaryAbandoned(0), r.dictionaryAbandoned(1))
	}
	out := tempPath(t, "out.parquet")
	if _, err := RewriteParquetAtomic(context.Background(), out, r, r.Schema(), make([]ValueMap, 2), WriteOptions{}); err != nil {
		t.Fatal(err)
	}
	o := openT(t, out)
	for c, want := range []bool{false, true} {
		cc, err := o.pr.MetaData().RowGroup(0).ColumnChunk(c)
		if err != nil {
			t.Fatal(err)
		}
		if cc.HasDictionaryPage() != want {
			t.Errorf("output column %d: dictionary page %v, want %v", c, cc.HasDictionaryPage(), want)
		}
	}
	sameIndependentValues(t, in, out)
}
