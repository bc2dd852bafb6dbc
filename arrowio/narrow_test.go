package arrowio

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/schema"
)

// writeNarrow writes one required INT32 column annotated INT(bits,
// signed) holding vals, which need not fit the annotation (the Apache
// Parquet format specification, "Logical Types": INT(8) and INT(16)
// annotate INT32, and writers must keep values in range).
func writeNarrow(t *testing.T, path string, bits int, signed bool, vals []int32) {
	t.Helper()
	node, err := schema.NewPrimitiveNodeLogical("v", parquet.Repetitions.Required,
		schema.NewIntLogicalType(int8(bits), signed), parquet.Types.Int32, -1, -1)
	if err != nil {
		t.Fatal(err)
	}
	root, err := schema.NewGroupNode("schema", parquet.Repetitions.Required, schema.FieldList{node}, -1)
	if err != nil {
		t.Fatal(err)
	}
	f, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	w := file.NewParquetWriter(f, root)
	rg := w.AppendRowGroup()
	cw, err := rg.NextColumn()
	if err != nil {
		t.Fatal(err)
	}
	if _, err := cw.(*file.Int32ColumnChunkWriter).WriteBatch(vals, nil, nil); err != nil {
		t.Fatal(err)
	}
	for _, c := range []interface{ Close() error }{cw, rg, w} {
		if err := c.Close(); err != nil {
			t.Fatal(err)
		}
	}
}

// TestNarrowIntegersOutOfRange: the scan, the record reader (which Arrow
// would let truncate) and the rewrite refuse an INT(8) or INT(16) column
// holding a value its annotation cannot hold, naming the value, and accept
// the extremes of each range.
func TestNarrowIntegersOutOfRange(t *testing.T) {
	for _, tc := range []struct {
		bits   int
		signed bool
		vals   []int32
		bad    string // the value the error names; "" for a valid column
	}{
		{8, true, []int32{-128, 127, 5}, ""},
		{8, true, []int32{1, 300}, "300"},
		{8, true, []int32{-129}, "-129"},
		{16, true, []int32{-32768, 32767}, ""},
		{16, true, []int32{0, -40000}, "-40000"},
		{16, true, []int32{32768}, "32768"},
		{16, true, []int32{-32769}, "-32769"},
		{8, false, []int32{0, 255}, ""},
		{8, false, []int32{256}, "256"},
		{8, false, []int32{-1}, "4294967295"},
		{16, false, []int32{65535}, ""},
		{16, false, []int32{65536}, "65536"},
	} {
		t.Run(fmt.Sprintf("int%d-signed=%v-%v", tc.bits, tc.signed, tc.vals), func(t *testing.T) {
			dir := t.TempDir()
			in := filepath.Join(dir, "in.parquet")
			writeNarrow(t, in, tc.bits, tc.signed, tc.vals)
			r, err := Open(in, memory.DefaultAllocator)
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			if !r.CanScan(0) {
				t.Fatalf("column of type %s cannot be scanned", r.Schema().Field(0).Type)
			}
			// The scan names the input; the rewrite names its output and the
			// column (pass two adds the input's name).
			check := func(what, in string, err error) {
				t.Helper()
				if tc.bad == "" {
					if err != nil {
						t.Fatalf("%s: %v", what, err)
					}
					return
				}
				if !errors.Is(err, errCorruptData) || !strings.Contains(err.Error(), "value "+tc.bad+" ") || !strings.Contains(err.Error(), in) || !strings.Contains(err.Error(), "column v") {
					t.Fatalf("%s: %v; want an error naming %s, column v and value %s", what, err, in, tc.bad)
				}
			}
			var seen int
			check("scan", in, r.ScanColumn(context.Background(), 0, 0, 0, func(v any, _ int) error {
				switch v := v.(type) {
				case []int32:
					seen += len(v)
				case []uint32:
					seen += len(v)
				default:
					t.Errorf("scan handed out %T", v)
				}
				return nil
			}))
			if tc.bad == "" && seen != len(tc.vals) {
				t.Fatalf("scan saw %d values, want %d", seen, len(tc.vals))
			}
			rr, err := r.Records(context.Background(), 0, nil, 0)
			if err == nil {
				rr.Release()
			}
			check("records", in, err)
			out := filepath.Join(dir, "out", "o.parquet")
			_, err = RewriteParquetAtomic(context.Background(), out, r, r.Schema(), make([]ValueMap, 1), WriteOptions{})
			check("rewrite", out, err)
			if tc.bad != "" {
				assertNothingLeft(t, filepath.Dir(out))
			}
		})
	}
}
