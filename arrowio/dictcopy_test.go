package arrowio

import (
	"bytes"
	"context"
	"encoding/binary"
	"fmt"
	"maps"
	"os"
	"slices"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/metadata"
)

// dictTestRecord is 40,000 rows of a nullable string column "tag" (the
// empty string every 7th row, null every 11th, else one of 3,000 values),
// a required string column "site", a float column, a nullable string
// column "note" that holds only the empty string and nulls, and a nullable
// string column "fault" that holds only nulls.
func dictTestRecord(t *testing.T) arrow.Record {
	t.Helper()
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "tag", Type: arrow.BinaryTypes.String, Nullable: true},
		{Name: "site", Type: arrow.BinaryTypes.String},
		{Name: "power_kw", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
		{Name: "note", Type: arrow.BinaryTypes.String, Nullable: true},
		{Name: "fault", Type: arrow.BinaryTypes.String, Nullable: true},
	}, nil)
	b := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer b.Release()
	for i := range 40_000 {
		tag := b.Field(0).(*array.StringBuilder)
		switch {
		case i%11 == 3:
			tag.AppendNull()
		case i%7 == 2:
			tag.Append("")
		default:
			tag.Append(fmt.Sprintf("blade-%04d", (i*7919)%3000))
		}
		b.Field(1).(*array.StringBuilder).Append([]string{"high-moor", "cape-east", "north-ridge"}[i/5000%3])
		b.Field(2).(*array.Float64Builder).Append(float64(i%97) * 1.5)
		if i%5 == 0 {
			b.Field(3).(*array.StringBuilder).AppendNull()
		} else {
			b.Field(3).(*array.StringBuilder).Append("")
		}
		b.Field(4).(*array.StringBuilder).AppendNull()
	}
	return b.NewRecord()
}

// smallOutputPages makes outputs' data pages 2 KiB for the test.
func smallOutputPages(t *testing.T) {
	old := outputPageBytes
	outputPageBytes = 2 << 10
	t.Cleanup(func() { outputPageBytes = old })
}

// TestCopyIndicesKeepsValuesAndStatistics: dictionary-encoded string
// columns are copied by their indices, in three row groups. The values
// read back by the independent reader github.com/xitongsys/parquet-go
// equal the input's and the value-by-value copy's; each column chunk's
// statistics, as that reader decodes them from the footer, are the
// minimum (the empty string where present), maximum and null count of the
// chunk's rows; every data page's statistics are those of the rows it
// holds; the column metadata says what the value copy's says; and the
// output can be copied by its indices again.
func TestCopyIndicesKeepsValuesAndStatistics(t *testing.T) {
	smallOutputPages(t)
	rec := dictTestRecord(t)
	defer rec.Release()
	in := tempPath(t, "in.parquet")
	const groupRows = 15_000
	writeWithProps(t, in, rec, parquet.NewWriterProperties(parquet.WithDictionaryDefault(true), parquet.WithMaxRowGroupLength(groupRows),
		parquet.WithDataPageSize(1<<10), parquet.WithCompression(compress.Codecs.Zstd)))
	strCols := []int{0, 1, 3, 4} // tag, site, note, fault
	chunks := int64(3 * len(strCols))

	opts := WriteOptions{BatchRows: 3000}
	copyByIndices = false
	t.Cleanup(func() { copyByIndices = true })
	byValue, n := rewriteCopy(t, in, "by-value.parquet", opts)
	copyByIndices = true
	if n != 0 {
		t.Fatalf("%d chunks copied by indices with copying by indices off", n)
	}
	byIndex, n := rewriteCopy(t, in, "by-index.parquet", opts)
	if n != chunks {
		t.Fatalf("%d chunks copied by indices, want %d (4 string columns, 3 row groups)", n, chunks)
	}
	sameIndependentValues(t, byValue, byIndex)
	sameIndependentValues(t, in, byIndex)
	again, n := rewriteCopy(t, byIndex, "again.parquet", opts)
	if n != chunks {
		t.Fatalf("%d chunks of the copy copied by indices, want %d", n, chunks)
	}
	sameIndependentValues(t, in, again)

	_, _, cols := independentRead(t, in)
	if want := stringStats(cols[0]); want.min != "" {
		t.Fatalf("test data: the smallest tag is %q, want the empty string", want.min)
	}
	pr := openIndependent(t, byIndex)
	if len(pr.Footer.RowGroups) != 3 {
		t.Fatalf("%d row groups, want 3", len(pr.Footer.RowGroups))
	}
	for rg := range 3 {
		lo, hi := rg*groupRows, min((rg+1)*groupRows, len(cols[0]))
		for _, c := range strCols {
			want := stringStats(cols[c][lo:hi])
			st := pr.Footer.RowGroups[rg].Columns[c].MetaData.Statistics
			hasMinMax := want.present > 0
			if st == nil || (st.MinValue != nil) != hasMinMax || (st.MaxValue != nil) != hasMinMax ||
				string(st.MinValue) != want.min || string(st.MaxValue) != want.max || st.GetNullCount() != want.nulls {
				t.Errorf("row group %d column %d statistics %+v, want min %q max %q nulls %d", rg, c, st, want.min, want.max, want.nulls)
			}
			minPages := 1
			if c == 0 {
				minPages = 3
			}
			checkPageStatistics(t, byIndex, rg, c, cols[c][lo:hi], minPages)
		}
	}
	sameColumnMetadata(t, byValue, byIndex, strCols)
}

// rewriteCopy copies src unchanged with RewriteParquetAtomic into a
// temporary file named name and returns its path and the number of column
// chunks copied by their dictionary indices.
func rewriteCopy(t *testing.T, src, name string, opts WriteOptions) (string, int64) {
	t.Helper()
	r := openT(t, src)
	out := tempPath(t, name)
	before := indexCopies.Load()
	if _, err := RewriteParquetAtomic(context.Background(), out, r, r.Schema(), make([]ValueMap, r.Schema().NumFields()), opts); err != nil {
		t.Fatal(err)
	}
	return out, indexCopies.Load() - before
}

// sameColumnMetadata checks that the given columns of files a and b have,
// chunk by chunk, the same value counts, encodings, and kinds of pages in
// their page encoding statistics (the page counts may differ: a
// dictionary taken whole makes the first page's indices wider than a
// dictionary that grows).
func sameColumnMetadata(t *testing.T, a, b string, cols []int) {
	t.Helper()
	fa, err := file.OpenParquetFile(a, false)
	if err != nil {
		t.Fatal(err)
	}
	defer fa.Close()
	fb, err := file.OpenParquetFile(b, false)
	if err != nil {
		t.Fatal(err)
	}
	defer fb.Close()
	kinds := func(cc *metadata.ColumnChunkMetaData) map[string]bool {
		m := map[string]bool{}
		for _, s := range cc.EncodingStats() {
			m[fmt.Sprint(s.PageType, s.Encoding)] = true
		}
		return m
	}
	for rg := range fa.NumRowGroups() {
		for _, c := range cols {
			ca, err := fa.MetaData().RowGroup(rg).ColumnChunk(c)
			if err != nil {
				t.Fatal(err)
			}
			cb, err := fb.MetaData().RowGroup(rg).ColumnChunk(c)
			if err != nil {
				t.Fatal(err)
			}
			if ca.NumValues() != cb.NumValues() || !slices.Equal(ca.Encodings(), cb.Encodings()) ||
				ca.HasDictionaryPage() != cb.HasDictionaryPage() || !maps.Equal(kinds(ca), kinds(cb)) {
				t.Errorf("row group %d column %d: %d values, encodings %v, pages %v; the value copy: %d, %v, %v",
					rg, c, cb.NumValues(), cb.Encodings(), kinds(cb), ca.NumValues(), ca.Encodings(), kinds(ca))
			}
		}
	}
}

type stringStat struct {
	min, max       string
	nulls, present int64
}

// stringStats is the minimum, maximum (byte order) and null count of
// string column values read by the independent reader (nil for null).
func stringStats(vals []any) (s stringStat) {
	first := true
	for _, v := range vals {
		if v == nil {
			s.nulls++
			continue
		}
		s.present++
		x := v.(string)
		if first || x < s.min {
			s.min = x
		}
		if first || x > s.max {
			s.max = x
		}
		first = false
	}
	return s
}

// checkPageStatistics reads the data page headers of string column c of
// row group rg of path with Arrow's page reader and checks each page's
// minimum, maximum and null count against the rows the page holds, taken
// from vals (the independent reader's values of the column chunk). It
// wants at least minPages data pages.
func checkPageStatistics(t *testing.T, path string, rg, c int, vals []any, minPages int) {
	t.Helper()
	f, err := file.OpenParquetFile(path, false)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	pages, err := f.RowGroup(rg).GetColumnPageReader(c)
	if err != nil {
		t.Fatal(err)
	}
	row, n := 0, 0
	for pages.Next() {
		dp, ok := pages.Page().(file.DataPage)
		if !ok {
			continue
		}
		rows := int(dp.NumValues())
		if row+rows > len(vals) {
			t.Fatalf("pages hold more than %d rows", len(vals))
		}
		want := stringStats(vals[row : row+rows])
		st := dp.Statistics()
		hasMinMax := want.present > 0
		if !st.HasNullCount || st.NullCount != want.nulls || st.HasMin != hasMinMax || st.HasMax != hasMinMax || string(st.Min) != want.min || string(st.Max) != want.max {
			t.Errorf("row group %d column %d page %d (rows %d-%d): statistics min %q max %q nulls %d, want %q %q %d",
				rg, c, n, row, row+rows, st.Min, st.Max, st.NullCount, want.min, want.max, want.nulls)
		}
		row += rows
		n++
	}
	if err := pages.Err(); err != nil {
		t.Fatal(err)
	}
	if row != len(vals) || n < minPages {
		t.Fatalf("row group %d column %d: %d data pages holding %d rows, want at least %d holding %d", rg, c, n, row, minPages, len(vals))
	}
}

// TestCopyIndicesRepeatedDictionaryValue: a dictionary that holds a value
// twice (legal, though Arrow's writer never writes one) cannot be copied
// by its indices (the output's dictionary, and Arrow's dictionary record
// reader, keep each value once); the chunk is copied value by value, after
// its dictionary page was read ahead, and its values read back unchanged
// by the independent reader github.com/xitongsys/parquet-go.
func TestCopyIndicesRepeatedDictionaryValue(t *testing.T) {
	sc := arrow.NewSchema([]arrow.Field{{Name: "tag", Type: arrow.BinaryTypes.String, Nullable: true}}, nil)
	b := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer b.Release()
	for i := range 1000 {
		if i%9 == 0 {
			b.Field(0).(*array.StringBuilder).AppendNull()
			continue
		}
		b.Field(0).(*array.StringBuilder).Append([]string{"gust-a", "gust-b", "gust-c"}[i%3])
	}
	rec := b.NewRecord()
	defer rec.Release()
	in := tempPath(t, "in.parquet")
	writeWithProps(t, in, rec, parquet.NewWriterProperties(parquet.WithDictionaryDefault(true), parquet.WithCompression(compress.Codecs.Uncompressed)))

	// The dictionary page comes first: its "gust-b" becomes a second
	// "gust-a", so rows that held "gust-b" now read "gust-a".
	raw, err := os.ReadFile(in)
	if err != nil {
		t.Fatal(err)
	}
	at := bytes.Index(raw, []byte("gust-b"))
	if at < 0 || at > bytes.Index(raw, []byte("gust-c")) {
		t.Fatalf("gust-b not found in the dictionary page")
	}
	raw[at+5] = 'a'
	if err := os.WriteFile(in, raw, 0o644); err != nil {
		t.Fatal(err)
	}

	out, n := rewriteCopy(t, in, "out.parquet", WriteOptions{})
	if n != 0 {
		t.Fatalf("%d chunks copied by indices, want none", n)
	}
	_, _, cols := independentRead(t, in)
	for i, v := range cols[0] {
		var want any = []string{"gust-a", "gust-a", "gust-c"}[i%3]
		if i%9 == 0 {
			want = nil
		}
		if v != want {
			t.Fatalf("patched input row %d reads %v, want %v", i, v, want)
		}
	}
	sameIndependentValues(t, in, out)
	st := openIndependent(t, out).Footer.RowGroups[0].Columns[0].MetaData.Statistics
	if st == nil || string(st.MinValue) != "gust-a" || string(st.MaxValue) != "gust-c" || st.GetNullCount() != 112 {
		t.Errorf("statistics %+v, want min gust-a max gust-c nulls 112", st)
	}
}

// TestPlainByteArrays: PLAIN byte arrays are a 4-byte little-endian length
// and the bytes (Apache Parquet format specification, Encodings); data
// that holds more, less or other than n of them is refused.
func TestPlainByteArrays(t *testing.T) {
	enc := func(vals ...string) []byte {
		var b []byte
		for _, v := range vals {
			b = binary.LittleEndian.AppendUint32(b, uint32(len(v)))
			b = append(b, v...)
		}
		return b
	}
	good := enc("nacelle", "", "hub")
	if vals, ok := plainByteArrays(good, 3); !ok || len(vals) != 3 || string(vals[0]) != "nacelle" || len(vals[1]) != 0 || string(vals[2]) != "hub" {
		t.Fatalf("plainByteArrays(%q, 3) = %q, %v", good, vals, ok)
	}
	for name, c := range map[string]struct {
		data []byte
		n    int
	}{
		"too few values":   {good, 4},
		"trailing bytes":   {good, 2},
		"length too large": {append(enc("nacelle"), 0xff, 0xff, 0xff, 0x7f), 2},
		"cut header":       {append(enc("nacelle"), 1, 0), 2},
		"negative count":   {good, -1},
	} {
		if vals, ok := plainByteArrays(c.data, c.n); ok {
			t.Errorf("%s: plainByteArrays accepted %q as %q", name, c.data, vals)
		}
	}
}

// TestCopyIndicesDictionaryOverLimit: an input dictionary larger than the
// output writer's dictionary page size limit (Arrow's default, 1 MiB) is
// not copied whole: the chunk is copied value by value and the writer
// gives up its dictionary for plain encoding, as it does for any column
// whose dictionary outgrows the limit. Values are read back by the
// independent reader github.com/xitongsys/parquet-go.
func TestCopyIndicesDictionaryOverLimit(t *testing.T) {
	sc := arrow.NewSchema([]arrow.Field{{Name: "serial", Type: arrow.BinaryTypes.String, Nullable: true}}, nil)
	b := array.NewRecordBuilder(memory.DefaultAllocator, sc)
	defer b.Release()
	for i := range 60_000 {
		b.Field(0).(*array.StringBuilder).Append(fmt.Sprintf("gearbox-%06d-bearing-temperature", i))
	}
	rec := b.NewRecord()
	defer rec.Release()
	in := tempPath(t, "in.parquet")
	writeWithProps(t, in, rec, parquet.NewWriterProperties(parquet.WithDictionaryDefault(true),
		parquet.WithDictionaryPageSizeLimit(16<<20), parquet.WithCompression(compress.Codecs.Zstd)))
	r := openT(t, in)
	if cc, err := r.pr.MetaData().RowGroup(0).ColumnChunk(0); err != nil || !cc.HasDictionaryPage() || r.dictionaryAbandoned(0) {
		t.Fatalf("test data: the input does not keep its dictionary (%v)", err)
	}
	out, n := rewriteCopy(t, in, "out.parquet", WriteOptions{})
	if n != 0 {
		t.Fatalf("%d chunks copied by indices, want none", n)
	}
	sameIndependentValues(t, in, out)
	f, err := file.OpenParquetFile(out, false)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	cc, err := f.MetaData().RowGroup(0).ColumnChunk(0)
	if err != nil {
		t.Fatal(err)
	}
	plain := false
	for _, s := range cc.EncodingStats() {
		plain = plain || s.Encoding == parquet.Encodings.Plain && s.PageType.String() == "DATA_PAGE"
	}
	if !plain {
		t.Errorf("output pages %v, want plain data pages after the dictionary filled", cc.EncodingStats())
	}
}
