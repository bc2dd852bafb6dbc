package jobs

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/stats"
)

// TestScanAndRecordsAgree: pass one's two ways of reading a row group, by
// column scans (scanRowGroup) and by Arrow record batches (addRowGroup, for
// columns that cannot be scanned), leave byte-identical accumulator states
// for every numeric column of the demo lake, with the columns selected in
// reverse file order.
func TestScanAndRecordsAgree(t *testing.T) {
	dir := t.TempDir()
	writeDemoLake(t, dir)
	files, err := filepath.Glob(filepath.Join(dir, "site=*", "day=*", "*.parquet"))
	if err != nil || len(files) == 0 {
		t.Fatalf("demo lake: %d files, %v", len(files), err)
	}
	cfg := Config{BatchRows: 700}
	for _, path := range files {
		r, err := arrowio.Open(path, memory.DefaultAllocator)
		if err != nil {
			t.Fatal(err)
		}
		var idx []int
		var kinds []stats.Kind
		for k, f := range r.Schema().Fields() {
			if kind, ok := stats.KindOf(f.Type); ok {
				idx, kinds = append(idx, k), append(kinds, kind)
			}
		}
		slices.Reverse(idx)
		slices.Reverse(kinds)
		if len(idx) < 5 || !scannable(r, idx) {
			t.Fatalf("%s: %d numeric columns, scannable %v", path, len(idx), scannable(r, idx))
		}
		fresh := func() []*stats.Accumulator {
			accs := make([]*stats.Accumulator, len(kinds))
			for j, k := range kinds {
				accs[j] = stats.NewAccumulator(k)
			}
			return accs
		}
		scanned, recorded := fresh(), fresh()
		for rg := range r.NumRowGroups() {
			if err := scanRowGroup(context.Background(), &cfg, r, rg, idx, scanned); err != nil {
				t.Fatal(err)
			}
			if err := addRowGroup(context.Background(), &cfg, r, rg, idx, recorded); err != nil {
				t.Fatal(err)
			}
		}
		r.Close()
		for j := range idx {
			a, _ := scanned[j].MarshalBinary()
			b, _ := recorded[j].MarshalBinary()
			if !bytes.Equal(a, b) {
				t.Errorf("%s column %d: scanned %+v, from records %+v", path, idx[j], scanned[j].Summary(), recorded[j].Summary())
			}
		}
	}
}

// TestRewriteAndRecordPathsAgree: pass two's two ways of writing a scaled
// file (column chunk rewrite for flat files, Arrow record batches for the
// rest) give the same schema and the same values, bit for bit, in every
// column of every file of the demo lake, and the same statistics.
func TestRewriteAndRecordPathsAgree(t *testing.T) {
	lake := t.TempDir()
	writeDemoLake(t, lake)
	outs := map[bool]string{}
	for _, records := range []bool{false, true} {
		recordPathOnly = records
		out := filepath.Join(t.TempDir(), "out")
		err := Run(context.Background(), testConfig(t, lake, out, 2))
		recordPathOnly = false
		if err != nil {
			t.Fatal(err)
		}
		outs[records] = out
	}
	files, err := filepath.Glob(filepath.Join(outs[false], "site=*", "day=*", "*.parquet"))
	if err != nil || len(files) == 0 {
		t.Fatalf("%d outputs, %v", len(files), err)
	}
	for _, a := range files {
		rel, _ := filepath.Rel(outs[false], a)
		ta, tb := readTable(t, a), readTable(t, filepath.Join(outs[true], rel))
		if !ta.Schema().Equal(tb.Schema()) {
			t.Fatalf("%s: schemas differ: %s vs %s", rel, ta.Schema(), tb.Schema())
		}
		for c := range ta.NumCols() {
			x, y := ta.Column(int(c)).Data(), tb.Column(int(c)).Data()
			if !array.ChunkedEqual(x, y) {
				t.Errorf("%s column %s differs between the two paths", rel, ta.Schema().Field(int(c)).Name)
			}
		}
		ta.Release()
		tb.Release()
	}
	ma := readManifestT(t, filepath.Join(outs[false], "_manifest.json"))
	mb := readManifestT(t, filepath.Join(outs[true], "_manifest.json"))
	for j := range ma.Columns {
		if ma.Columns[j].Stats != mb.Columns[j].Stats || ma.Columns[j].Params != mb.Columns[j].Params {
			t.Errorf("column %s: statistics or parameters differ", ma.Columns[j].Name)
		}
	}
}

// readTable reads a whole Parquet file with Arrow's reader.
func readTable(t *testing.T, path string) arrow.Table {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	tbl, err := pqarrow.ReadTable(context.Background(), f, nil, pqarrow.ArrowReadProperties{}, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	return tbl
}
