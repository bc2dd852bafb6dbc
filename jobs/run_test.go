package jobs

import (
	"bytes"
	"context"
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"sync/atomic"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// writeDemoLake writes the demo's invented partitions under dir.
func writeDemoLake(t *testing.T, dir string) {
	t.Helper()
	for s, site := range demoSites {
		for d, day := range demoDays {
			rec := demoRecord(s, d)
			path := filepath.Join(dir, "site="+site, "day="+day, "part-0.parquet")
			_, err := arrowio.WriteParquetAtomic(context.Background(), path, rec.Schema(), arrowio.WriteOptions{},
				func(w *pqarrow.FileWriter) error { return w.Write(rec) })
			rec.Release()
			if err != nil {
				t.Fatal(err)
			}
		}
	}
}

func testConfig(t *testing.T, in, out string, workers int) Config {
	t.Helper()
	cfg, err := Load("", Overrides{Input: &in, Output: &out, Workers: &workers})
	if err != nil {
		t.Fatal(err)
	}
	cfg.Now = func() time.Time { return time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC) }
	cfg.BatchRows = 500 // several batches per row group
	return cfg
}

func readManifestT(t *testing.T, path string) *manifests.Manifest {
	t.Helper()
	m, _, err := readManifest(path)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// The same job at 1 and 3 workers gives byte-identical outputs and equal
// manifests apart from the output path.
func TestRunDeterministicAcrossWorkers(t *testing.T) {
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeDemoLake(t, lake)
	var ms []*manifests.Manifest
	for _, w := range []int{1, 3} {
		out := filepath.Join(tmp, "out", string(rune('0'+w)))
		if err := Run(context.Background(), testConfig(t, lake, out, w)); err != nil {
			t.Fatal(err)
		}
		if err := Verify(context.Background(), &bytes.Buffer{}, out); err != nil {
			t.Fatal(err)
		}
		ms = append(ms, readManifestT(t, filepath.Join(out, ManifestName)))
	}
	a, b := ms[0], ms[1]
	if !reflect.DeepEqual(a.Columns, b.Columns) || !reflect.DeepEqual(a.Inputs, b.Inputs) || !reflect.DeepEqual(a.Outputs, b.Outputs) {
		t.Fatal("manifests differ between --workers 1 and 3")
	}
	for _, o := range a.Outputs {
		x, _ := os.ReadFile(filepath.Join(tmp, "out", "1", o.Path))
		y, _ := os.ReadFile(filepath.Join(tmp, "out", "3", o.Path))
		if len(x) == 0 || !bytes.Equal(x, y) {
			t.Fatalf("%s differs between worker counts", o.Path)
		}
	}
	if len(a.Columns) != 9 { // every numeric demo column: the default rule
		t.Errorf("%d columns scaled, want 9", len(a.Columns))
	}
}

// Pass one's merged statistics equal one accumulator fed every value of
// every file in one go, for every column.
func TestRunStatisticsMatchSingleAccumulator(t *testing.T) {
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeDemoLake(t, lake)
	out := filepath.Join(tmp, "out")
	if err := Run(context.Background(), testConfig(t, lake, out, 2)); err != nil {
		t.Fatal(err)
	}
	m := readManifestT(t, filepath.Join(out, ManifestName))
	for _, c := range m.Columns {
		var acc *stats.Accumulator
		for s := range demoSites {
			for d := range demoDays {
				rec := demoRecord(s, d)
				col := rec.Column(rec.Schema().FieldIndices(c.Name)[0])
				if acc == nil {
					k, _ := stats.KindOf(col.DataType())
					acc = stats.NewAccumulator(k)
				}
				if err := acc.Add(col); err != nil {
					t.Fatal(err)
				}
				rec.Release()
			}
		}
		if want := wireStats(acc.Summary()); !sameStats(c.Stats, want) {
			t.Errorf("column %s: manifest %+v, single accumulator %+v", c.Name, c.Stats, want)
		}
	}
}

func sameStats(a, b manifests.Stats) bool {
	var x, y bytes.Buffer
	enc := func(buf *bytes.Buffer, s manifests.Stats) {
		m := &manifests.Manifest{ManifestVersion: manifests.Version, Kind: manifests.KindStatistics,
			Columns: []manifests.Column{{Name: "c", Stats: s, Params: manifests.Params{Scale: 1}}}}
		_ = manifests.Encode(buf, m)
	}
	enc(&x, a)
	enc(&y, b)
	return bytes.Equal(x.Bytes(), y.Bytes())
}

// A run cancelled in the middle of pass two leaves no manifest and no
// temporary files; the same command then succeeds.
func TestRunCancelledThenRerun(t *testing.T) {
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeDemoLake(t, lake)
	out := filepath.Join(tmp, "out")
	ctx, cancel := context.WithCancelCause(context.Background())
	stop := errors.New("test cancels after the second output is written")
	// With one worker, one commit runs at a time: the second file is
	// handed over only once the first is in place. The second, written
	// but not yet renamed when the run is cancelled, is abandoned.
	var written atomic.Int32 // the re-run below has two workers
	hookFileWritten = func(string) {
		if written.Add(1) == 2 {
			cancel(stop)
		}
	}
	defer func() { hookFileWritten = func(string) {} }()
	err := Run(ctx, testConfig(t, lake, out, 1))
	if !errors.Is(err, stop) {
		t.Fatalf("got %v, want the cancellation cause", err)
	}
	if files, _ := arrowio.Discover(out); len(files) != 1 {
		t.Fatalf("%d outputs before the cancellation took effect, want 1 (the test is not exercising a mid-pass-two stop)", len(files))
	}
	if ok, _ := arrowio.Exists(filepath.Join(out, ManifestName)); ok {
		t.Fatal("cancelled run left a manifest")
	}
	if n, _ := arrowio.RemoveTemps(out); n != 0 {
		t.Fatalf("cancelled run left %d temporary files", n)
	}
	if err := Run(context.Background(), testConfig(t, lake, out, 2)); err != nil {
		t.Fatalf("re-run: %v", err)
	}
	if err := Verify(context.Background(), &bytes.Buffer{}, out); err != nil {
		t.Fatal(err)
	}
}
