package jobs

import (
	"bytes"
	"context"
	"path/filepath"
	"slices"
	"testing"

	"github.com/apache/arrow/go/v17/arrow/memory"

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
