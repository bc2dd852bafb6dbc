package jobs

import (
	"bytes"
	"context"
	"errors"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

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
	fit := "site=north-ridge" // the other sites fall partly outside its range
	for _, records := range []bool{false, true} {
		recordPathOnly = records
		out := filepath.Join(t.TempDir(), "out")
		cfg, err := Load("", Overrides{Input: &lake, Output: &out, Fit: &fit})
		if err != nil {
			t.Fatal(err)
		}
		cfg.BatchRows = 500
		err = Run(context.Background(), cfg)
		recordPathOnly = false
		if err != nil {
			t.Fatal(err)
		}
		outs[records] = out
	}
	// Every demo file takes the rewrite path when it is allowed to.
	m := readManifestT(t, filepath.Join(outs[false], "_manifest.json"))
	inputs, err := filepath.Glob(filepath.Join(lake, "site=*", "day=*", "*.parquet"))
	if err != nil || len(inputs) == 0 {
		t.Fatalf("%d inputs, %v", len(inputs), err)
	}
	for _, in := range inputs {
		r, err := arrowio.Open(in, memory.DefaultAllocator)
		if err != nil {
			t.Fatal(err)
		}
		maps := make([]arrowio.ValueMap, r.Schema().NumFields())
		var idx []int
		for _, c := range m.Columns {
			k := r.Schema().FieldIndices(c.Name)[0]
			idx, maps[k] = append(idx, k), func(vals, out any) error { return nil }
		}
		if !r.CanRewrite(outputSchema(r.Schema(), idx, false), maps) {
			t.Errorf("%s: CanRewrite = false", in)
		}
		r.Close()
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
	outside := uint64(0)
	for j := range ma.Columns {
		a, b := ma.Columns[j], mb.Columns[j]
		if a.Stats != b.Stats || a.Params != b.Params || a.OutOfRange == nil || b.OutOfRange == nil || *a.OutOfRange != *b.OutOfRange {
			t.Errorf("column %s: statistics, parameters or out-of-range counts differ: %+v %+v", a.Name, a.OutOfRange, b.OutOfRange)
		} else {
			outside += a.OutOfRange.Below + a.OutOfRange.Above
		}
	}
	if outside == 0 {
		t.Error("no value fell outside the fitted range; the counts were not compared")
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

// TestRunRefusesInputChangedBetweenPasses: run's pass two does not hash
// inputs again but checks each against pass one (version, size, rows,
// footer); a file replaced, or changed in place with its size and footer
// kept, after its statistics were computed stops the run with
// ErrInputChanged naming it, and no manifest is written.
func TestRunRefusesInputChangedBetweenPasses(t *testing.T) {
	victim := filepath.Join("site="+demoSites[2], "day="+demoDays[2], "part-0.parquet")
	for name, change := range map[string]func(t *testing.T, path string){
		"replaced": func(t *testing.T, path string) {
			rec := demoRecord(0, 0) // other rows, same schema
			defer rec.Release()
			_, err := arrowio.WriteParquetAtomic(context.Background(), path, rec.Schema(), arrowio.WriteOptions{},
				func(w *pqarrow.FileWriter) error { return w.Write(rec) })
			if err != nil {
				t.Error(err)
			}
		},
		"one byte in place": func(t *testing.T, path string) {
			time.Sleep(20 * time.Millisecond) // past the file system's timestamp granularity
			f, err := os.OpenFile(path, os.O_WRONLY, 0)
			if err != nil {
				t.Fatal(err)
			}
			defer f.Close()
			if _, err := f.WriteAt([]byte{0x5a}, 100); err != nil {
				t.Error(err)
			}
		},
	} {
		t.Run(name, func(t *testing.T) {
			lake := t.TempDir()
			writeDemoLake(t, lake)
			defer func(h func(string)) { hookFileWritten = h }(hookFileWritten)
			changed := false
			hookFileWritten = func(rel string) {
				if !changed {
					changed = true
					change(t, filepath.Join(lake, victim))
				}
			}
			out := filepath.Join(t.TempDir(), "out")
			err := Run(context.Background(), testConfig(t, lake, out, 1))
			if !errors.Is(err, ErrInputChanged) || !strings.Contains(err.Error(), victim) {
				t.Fatalf("Run: %v, want ErrInputChanged naming %s", err, victim)
			}
			if _, err := os.Stat(filepath.Join(out, "_manifest.json")); !os.IsNotExist(err) {
				t.Errorf("manifest written after a failed run: %v", err)
			}
		})
	}
}

// TestWorkersTakeLargestFilesFirst: the worker pool starts files largest
// first, equal sizes by path, so that a pass ends with the smallest files
// (the list schedule of Graham, SIAM J. Appl. Math. 17(2), 1969).
func TestWorkersTakeLargestFilesFirst(t *testing.T) {
	files := []arrowio.File{
		{Rel: "site=a/part.parquet", Size: 5},
		{Rel: "site=b/part.parquet", Size: 90},
		{Rel: "site=c/part.parquet", Size: 1},
		{Rel: "site=d/part.parquet", Size: 5},
		{Rel: "site=e/part.parquet", Size: 40},
	}
	want := []int{1, 4, 0, 3, 2}
	if got := largestFirst(files); !slices.Equal(got, want) {
		t.Fatalf("largestFirst = %v, want %v", got, want)
	}
	var started []int
	err := forEachFile(context.Background(), 1, largestFirst(files), func(_ context.Context, i int) error {
		started = append(started, i)
		return nil
	})
	if err != nil || !slices.Equal(started, want) {
		t.Fatalf("one worker started %v (err %v), want %v", started, err, want)
	}
}

// TestMeasuredStatesAreCompact: pass one keeps every file's states until
// all files are measured, so each must be compacted (stats.Accumulator.
// Compact) when its file is done: a few hundred bytes per column, not the
// 128 KiB of live float slots, or memory would grow with the number of
// files.
func TestMeasuredStatesAreCompact(t *testing.T) {
	p, res := measureOneDemoFile(t)
	floats := 0
	for j, a := range res.Accs {
		if a.Kind() == stats.KindFloat {
			floats++
		}
		if n := a.Footprint(); n > 4096 {
			t.Errorf("column %s: a measured state holds %d bytes", p.Columns[j].Name, n)
		}
	}
	if floats == 0 {
		t.Fatal("test data: no float column")
	}
}
