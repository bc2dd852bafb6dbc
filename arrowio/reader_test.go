package arrowio

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"io"
	"io/fs"
	"math"
	"os"
	"slices"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// TestOpenBadFiles checks that files which are not Parquet fail to open
// with an error that names the path, keeps the library's "parquet:" text
// and wraps ErrNotParquet; a missing file is the operating system's error.
func TestOpenBadFiles(t *testing.T) {
	good := tempPath(t, "good.parquet")
	writeRows(t, memory.DefaultAllocator, good, mixedRows(500), 500, WriteOptions{})
	data, err := os.ReadFile(good)
	if err != nil {
		t.Fatal(err)
	}
	// Corrupt the footer but keep its length field and the magic, so the
	// thrift decoder itself meets garbage.
	footerLen := int(binary.LittleEndian.Uint32(data[len(data)-8:]))
	garbled := slices.Clone(data)
	for i := len(data) - 8 - footerLen; i < len(data)-8; i++ {
		garbled[i] = 0xff
	}
	cases := map[string][]byte{
		"text.parquet":      []byte("site,x\na,1.5\nb,2.5\n"),
		"empty.parquet":     nil,
		"tiny.parquet":      []byte("PAR1"),
		"truncated.parquet": data[:len(data)/2],
		"nofooter.parquet":  data[:len(data)-1],
		"garbled.parquet":   garbled,
	}
	for name, b := range cases {
		t.Run(name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			path := tempPath(t, name)
			if err := os.WriteFile(path, b, 0o644); err != nil {
				t.Fatal(err)
			}
			r, err := Open(path, mem)
			if err == nil {
				r.Close()
				t.Fatal("Open succeeded")
			}
			if !errors.Is(err, ErrNotParquet) {
				t.Errorf("err = %v, want ErrNotParquet", err)
			}
			if prefix := "open " + path + ": parquet: "; !strings.HasPrefix(err.Error(), prefix) {
				t.Errorf("err = %q, want prefix %q", err, prefix)
			}
			_, _, _, err = ReadFooter(path)
			if prefix := "read " + path + ": parquet: "; !errors.Is(err, ErrNotParquet) || !strings.HasPrefix(err.Error(), prefix) {
				t.Errorf("ReadFooter err = %v, want ErrNotParquet with prefix %q", err, prefix)
			}
		})
	}
	missing := tempPath(t, "missing.parquet")
	if _, err := Open(missing, memory.DefaultAllocator); !errors.Is(err, fs.ErrNotExist) || errors.Is(err, ErrNotParquet) ||
		err.Error() != "open "+missing+": no such file or directory" {
		t.Errorf("missing file: err = %v", err)
	}
}

// TestRecords reads two of the four columns of every row group in small
// batches and compares them with the rows that were written.
func TestRecords(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rows := mixedRows(2500)
	path := tempPath(t, "r.parquet")
	writeRows(t, mem, path, rows, 400, WriteOptions{RowGroupRows: 1000})
	r, err := Open(path, mem)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if r.NumRows() != 2500 || r.NumRowGroups() != 3 {
		t.Fatalf("rows %d, groups %d; want 2500, 3", r.NumRows(), r.NumRowGroups())
	}
	want := arrow.NewSchema([]arrow.Field{mixedSchema.Field(1), mixedSchema.Field(3)}, nil)
	next := 0
	for rg := 0; rg < r.NumRowGroups(); rg++ {
		rr, err := r.Records(context.Background(), rg, []int{1, 3}, 128)
		if err != nil {
			t.Fatal(err)
		}
		if !rr.Schema().Equal(want) {
			t.Errorf("schema %v, want %v", rr.Schema(), want)
		}
		got := int64(0)
		for rr.Next() {
			rec := rr.Record()
			if rec.NumRows() > 128 {
				t.Fatalf("batch of %d rows, asked for at most 128", rec.NumRows())
			}
			if !rec.Schema().Equal(want) {
				t.Fatalf("record schema %v", rec.Schema())
			}
			xs := rec.Column(0).(*array.Float64)
			ns := rec.Column(1).(*array.Int32)
			for i := 0; i < int(rec.NumRows()); i++ {
				w := rows[next]
				if (w.x == nil) != xs.IsNull(i) || w.x != nil && math.Float64bits(*w.x) != math.Float64bits(xs.Value(i)) {
					t.Fatalf("row %d: x = %v, want %v", next, xs.ValueStr(i), deref(w.x))
				}
				if ns.Value(i) != w.n {
					t.Fatalf("row %d: n = %d, want %d", next, ns.Value(i), w.n)
				}
				next++
			}
			got += rec.NumRows()
		}
		if err := rr.Err(); err != nil {
			t.Errorf("Err after a complete read = %v, want nil", err)
		}
		if got != r.RowGroupRows(rg) {
			t.Errorf("row group %d: read %d rows, footer says %d", rg, got, r.RowGroupRows(rg))
		}
		rr.Release()
	}
	if next != len(rows) {
		t.Errorf("read %d rows, wrote %d", next, len(rows))
	}

	// Read gives io.EOF at the end, and all columns when cols is nil.
	rr, err := r.Records(context.Background(), 2, nil, 0)
	if err != nil {
		t.Fatal(err)
	}
	defer rr.Release()
	rec, err := rr.Read()
	if err != nil || rec.NumRows() != 500 || rec.NumCols() != 4 {
		t.Fatalf("Read = %v rows, %v cols, %v; want 500 rows of 4 columns", rec.NumRows(), rec.NumCols(), err)
	}
	if _, err := rr.Read(); err != io.EOF {
		t.Errorf("Read at end = %v, want io.EOF", err)
	}
}

// TestRecordsCancelAndBadArgs cancels between batches and asks for a row
// group and a column that do not exist.
func TestRecordsCancelAndBadArgs(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	path := tempPath(t, "c.parquet")
	writeRows(t, mem, path, mixedRows(1000), 1000, WriteOptions{})
	r, err := Open(path, mem)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()

	cause := errors.New("stop now")
	ctx, cancel := context.WithCancelCause(context.Background())
	defer cancel(nil)
	rr, err := r.Records(ctx, 0, nil, 100)
	if err != nil {
		t.Fatal(err)
	}
	batches := 0
	for rr.Next() {
		if batches++; batches == 2 {
			cancel(cause)
		}
	}
	if rr.Err() != cause || batches != 2 {
		t.Errorf("after cancel: Err = %v after %d batches, want the cause after 2", rr.Err(), batches)
	}
	rr.Release()
	if _, err := r.Records(ctx, 0, nil, 100); err != cause {
		t.Errorf("Records under a cancelled ctx = %v, want the cause", err)
	}

	for _, c := range []struct {
		rg   int
		cols []int
	}{{1, nil}, {-1, nil}, {0, []int{4}}, {0, []int{-1}}} {
		_, err := r.Records(context.Background(), c.rg, c.cols, 100)
		if !errors.Is(err, arrow.ErrIndex) || !strings.HasPrefix(err.Error(), "read "+path+": ") {
			t.Errorf("Records(%d, %v) = %v, want an index error naming the path", c.rg, c.cols, err)
		}
	}
}

// TestFooterMetadata checks the footer round trip: row count, schema and
// user metadata through ReadFooter and Reader, the key order in the file
// as seen by github.com/xitongsys/parquet-go, and FooterChecksum against
// crypto/sha256 over the footer located as the Apache Parquet format
// specification lays it out (metadata, 4-byte little-endian length, "PAR1").
func TestFooterMetadata(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	meta := map[string]string{"lakescale.version": "1", "b": "two", "a": "", "unicode": "µ ✓"}
	path := tempPath(t, "m.parquet")
	writeRows(t, mem, path, mixedRows(300), 300, WriteOptions{Metadata: meta})

	rows, schema, got, err := ReadFooter(path)
	if err != nil {
		t.Fatal(err)
	}
	if rows != 300 || !schema.Equal(mixedSchema) {
		t.Errorf("ReadFooter rows %d schema %v", rows, schema)
	}
	if !mapsEqual(got, meta) {
		t.Errorf("ReadFooter metadata %v, want %v", got, meta)
	}

	_, raw, _ := independentRead(t, path)
	if raw[arrowSchemaKey] == "" {
		t.Error("independent reader finds no stored Arrow schema")
	}
	delete(raw, arrowSchemaKey)
	if !mapsEqual(raw, meta) {
		t.Errorf("independent reader metadata %v, want %v", raw, meta)
	}

	r, err := Open(path, mem)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	if !mapsEqual(r.Metadata(), meta) {
		t.Errorf("Reader metadata %v", r.Metadata())
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if string(data[len(data)-4:]) != "PAR1" {
		t.Fatal("file does not end in PAR1")
	}
	n := int(binary.LittleEndian.Uint32(data[len(data)-8:])) + 8
	sum := sha256.Sum256(data[len(data)-n:])
	if want := hex.EncodeToString(sum[:]); r.FooterChecksum() != want {
		t.Errorf("FooterChecksum = %s, want %s", r.FooterChecksum(), want)
	}

	// Other metadata, other footer.
	other := tempPath(t, "o.parquet")
	writeRows(t, mem, other, mixedRows(300), 300, WriteOptions{Metadata: map[string]string{"b": "three"}})
	r2, err := Open(other, mem)
	if err != nil {
		t.Fatal(err)
	}
	defer r2.Close()
	if r2.FooterChecksum() == r.FooterChecksum() {
		t.Error("different footers have the same checksum")
	}
}

// TestFooterKeyOrder checks with the independent reader that user keys
// follow the stored schema in sorted order, whatever the map order.
func TestFooterKeyOrder(t *testing.T) {
	meta := map[string]string{}
	for _, k := range []string{"q", "c", "x", "a", "m", "b", "z", "k"} {
		meta[k] = strings.ToUpper(k)
	}
	path := tempPath(t, "k.parquet")
	writeRows(t, memory.DefaultAllocator, path, mixedRows(10), 10, WriteOptions{Metadata: meta})
	pr := openIndependent(t, path)
	var keys []string
	for _, kv := range pr.Footer.GetKeyValueMetadata() {
		keys = append(keys, kv.Key)
	}
	want := []string{arrowSchemaKey, "a", "b", "c", "k", "m", "q", "x", "z"}
	if !slices.Equal(keys, want) {
		t.Errorf("footer keys %v, want %v", keys, want)
	}
}

func mapsEqual(a, b map[string]string) bool {
	if len(a) != len(b) {
		return false
	}
	for k, v := range a {
		if w, ok := b[k]; !ok || w != v {
			return false
		}
	}
	return true
}
