package jobs

import (
	"bufio"
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
)

// writeDemoFile writes demo partition (site s, day d) at rel under dir.
func writeDemoFile(t *testing.T, dir, rel string, s, d int) {
	t.Helper()
	rec := demoRecord(s, d)
	defer rec.Release()
	_, err := arrowio.WriteParquetAtomic(context.Background(), filepath.Join(dir, filepath.FromSlash(rel)), rec.Schema(),
		arrowio.WriteOptions{}, func(w *pqarrow.FileWriter) error { return w.Write(rec) })
	if err != nil {
		t.Fatal(err)
	}
}

func demoRel(s, d int) string {
	return "site=" + demoSites[s] + "/day=" + demoDays[d] + "/part-0.parquet"
}

// logLines runs fn with a JSON log and returns the decoded lines by msg
// ("summary") or phase ("pass_one").
func logLines(t *testing.T, cfg Config, fn func(context.Context, Config) error) (map[string]map[string]any, error) {
	t.Helper()
	var buf bytes.Buffer
	cfg.LogFormat, cfg.Log = "json", &buf
	err := fn(context.Background(), cfg)
	lines := map[string]map[string]any{}
	sc := bufio.NewScanner(&buf)
	for sc.Scan() {
		var m map[string]any
		if err := json.Unmarshal(sc.Bytes(), &m); err != nil {
			t.Fatalf("log line %q is not JSON: %v", sc.Text(), err)
		}
		key, _ := m["msg"].(string)
		if p, ok := m["phase"].(string); ok {
			key = p
		}
		lines[key] = m
	}
	return lines, err
}

// count reads an integer attribute of a log line.
func count(t *testing.T, lines map[string]map[string]any, line, attr string) int {
	t.Helper()
	v, ok := lines[line][attr].(float64)
	if !ok {
		t.Fatalf("log line %s has no %s: %v", line, attr, lines[line])
	}
	return int(v)
}

func mustRun(t *testing.T, cfg Config) map[string]map[string]any {
	t.Helper()
	lines, err := logLines(t, cfg, Run)
	if err != nil {
		t.Fatal(err)
	}
	return lines
}

// sameResult asserts that two runs committed the same statistics,
// parameters and output bytes (the manifests' exact float encoding makes
// equal JSON equal bits).
func sameResult(t *testing.T, outA, outB string) {
	t.Helper()
	a := readManifestT(t, filepath.Join(outA, ManifestName))
	b := readManifestT(t, filepath.Join(outB, ManifestName))
	ja, _ := json.Marshal(a.Columns)
	jb, _ := json.Marshal(b.Columns)
	if !bytes.Equal(ja, jb) {
		t.Fatalf("columns differ:\n%s\n%s", ja, jb)
	}
	if len(a.Outputs) != len(b.Outputs) {
		t.Fatalf("%d outputs vs %d", len(a.Outputs), len(b.Outputs))
	}
	for i := range a.Outputs {
		if a.Outputs[i] != b.Outputs[i] || a.Inputs[i].SHA256 != b.Inputs[i].SHA256 || a.Inputs[i].Rows != b.Inputs[i].Rows {
			t.Fatalf("output %s differs: %+v vs %+v", a.Outputs[i].Path, a.Outputs[i], b.Outputs[i])
		}
	}
}

// fullRecompute runs the job without the cache into a fresh output.
func fullRecompute(t *testing.T, lake, out string) {
	t.Helper()
	cfg := testConfig(t, lake, out, 2)
	cfg.NoCache = true
	lines := mustRun(t, cfg)
	if n := count(t, lines, "summary", "files_cached"); n != 0 {
		t.Fatalf("--no-cache took %d files from the cache", n)
	}
}

func cacheEntries(t *testing.T, dir string) []string {
	t.Helper()
	names, _ := filepath.Glob(filepath.Join(dir, "*"+cacheExt))
	return names
}

// The nightly sequence: a full first run, a second with one new
// partition (one file measured, the statistics bit-identical to a full
// recompute), a changed file, a corrupt and a foreign cache entry, a
// change of column selection and a deleted input.
func TestNightlyIncrementalStatistics(t *testing.T) {
	tmp := t.TempDir()
	lake, out := filepath.Join(tmp, "lake"), filepath.Join(tmp, "out")
	for s := range 2 {
		for d := range 2 {
			writeDemoFile(t, lake, demoRel(s, d), s, d)
		}
	}
	cfg := testConfig(t, lake, out, 2)
	cfg.Overwrite = true

	// Day 1: everything measured, the cache filled.
	lines := mustRun(t, cfg)
	if n := count(t, lines, "summary", "files_measured"); n != 4 {
		t.Fatalf("day 1 measured %d files, want 4", n)
	}
	if got := cacheEntries(t, filepath.Join(out, cacheDirName)); len(got) != 4 {
		t.Fatalf("day 1 left %d cache entries, want 4", len(got))
	}

	// Day 2: one new partition.
	writeDemoFile(t, lake, demoRel(2, 0), 2, 0)
	lines = mustRun(t, cfg)
	if m, c := count(t, lines, "summary", "files_measured"), count(t, lines, "summary", "files_cached"); m != 1 || c != 4 {
		t.Fatalf("day 2 measured %d and took %d from the cache, want 1 and 4", m, c)
	}
	fullRecompute(t, lake, filepath.Join(tmp, "full2"))
	sameResult(t, out, filepath.Join(tmp, "full2"))

	// A changed file: its entry is stale.
	writeDemoFile(t, lake, demoRel(0, 1), 2, 2)
	lines = mustRun(t, cfg)
	if m, s := count(t, lines, "pass_one", "files_measured"), count(t, lines, "pass_one", "cache_stale"); m != 1 || s != 1 {
		t.Fatalf("changed file: measured %d, stale %d, want 1 and 1", m, s)
	}
	fullRecompute(t, lake, filepath.Join(tmp, "full3"))
	sameResult(t, out, filepath.Join(tmp, "full3"))

	// A corrupt entry (one byte flipped) and a foreign one (another
	// file's entry under this file's name) are recomputed.
	c := &statsCache{dir: filepath.Join(out, cacheDirName)}
	flip := c.entryPath(demoRel(1, 1))
	data, err := os.ReadFile(flip)
	if err != nil {
		t.Fatal(err)
	}
	data[len(data)/2] ^= 0x40
	if err := os.WriteFile(flip, data, 0o644); err != nil {
		t.Fatal(err)
	}
	other, err := os.ReadFile(c.entryPath(demoRel(0, 0)))
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(c.entryPath(demoRel(1, 0)), other, 0o644); err != nil {
		t.Fatal(err)
	}
	lines = mustRun(t, cfg)
	if m, k := count(t, lines, "pass_one", "files_measured"), count(t, lines, "pass_one", "cache_corrupt"); m != 2 || k != 2 {
		t.Fatalf("corrupt entries: measured %d, corrupt %d, want 2 and 2", m, k)
	}
	sameResult(t, out, filepath.Join(tmp, "full3"))
	// The entries were rewritten: the next run measures nothing.
	lines = mustRun(t, cfg)
	if m := count(t, lines, "summary", "files_measured"); m != 0 {
		t.Fatalf("after rewriting the cache %d files were measured, want 0", m)
	}
	sameResult(t, out, filepath.Join(tmp, "full3"))

	// Another column selection does not use entries made for this one.
	narrow := cfg
	if narrow.Rules, err = testRules(t, "power_kw"); err != nil {
		t.Fatal(err)
	}
	lines = mustRun(t, narrow)
	if s := count(t, lines, "pass_one", "cache_stale"); s != 5 {
		t.Fatalf("new column selection: %d stale entries, want 5", s)
	}
	mustRun(t, cfg) // back to every column

	// A deleted input drops out of the statistics and the cache.
	if err := os.Remove(filepath.Join(lake, filepath.FromSlash(demoRel(0, 0)))); err != nil {
		t.Fatal(err)
	}
	lines = mustRun(t, cfg)
	if m, p := count(t, lines, "pass_one", "files_measured"), count(t, lines, "cache", "entries_pruned"); m != 0 || p != 1 {
		t.Fatalf("deleted input: measured %d, pruned %d, want 0 and 1", m, p)
	}
	if got := cacheEntries(t, c.dir); len(got) != 4 {
		t.Fatalf("%d cache entries after a deletion, want 4", len(got))
	}
	fullRecompute(t, lake, filepath.Join(tmp, "full4"))
	sameResult(t, out, filepath.Join(tmp, "full4"))
}

func testRules(t *testing.T, cols ...string) ([]Rule, error) {
	t.Helper()
	cfg, err := Load("", Overrides{Columns: cols})
	return cfg.Rules, err
}

// writeFloats writes one float64 column x.
func writeFloats(t *testing.T, path string, vals ...float64) {
	t.Helper()
	b := array.NewFloat64Builder(memory.DefaultAllocator)
	defer b.Release()
	b.AppendValues(vals, nil)
	arr := b.NewArray()
	defer arr.Release()
	schema := arrow.NewSchema([]arrow.Field{{Name: "x", Type: arrow.PrimitiveTypes.Float64}}, nil)
	rec := array.NewRecord(schema, []arrow.Array{arr}, int64(len(vals)))
	defer rec.Release()
	if _, err := arrowio.WriteParquetAtomic(context.Background(), path, schema, arrowio.WriteOptions{},
		func(w *pqarrow.FileWriter) error { return w.Write(rec) }); err != nil {
		t.Fatal(err)
	}
}

// A cached state with infinities, stored by a run that skipped them,
// still fails a run whose policy is to reject them.
func TestNightlyCacheKeepsInfinityPolicy(t *testing.T) {
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeFloats(t, filepath.Join(lake, "d=1", "a.parquet"), 1, 2, 3)
	writeFloats(t, filepath.Join(lake, "d=2", "a.parquet"), 4, posInf(), 6)
	cfg := testConfig(t, lake, filepath.Join(tmp, "out"), 1)
	cfg.CacheDir = filepath.Join(tmp, "cache")
	cfg.InfPolicy = InfSkip
	mustRun(t, cfg)
	cfg.InfPolicy, cfg.Output = InfError, filepath.Join(tmp, "out2")
	lines, err := logLines(t, cfg, Run)
	// The cached state fails the check ("row group" is only in the message
	// of a file measured again).
	if !errors.Is(err, ErrInfinite) || !strings.Contains(err.Error(), "d=2/a.parquet") || strings.Contains(err.Error(), "row group") {
		t.Fatalf("got %v, want an infinite-value error naming the file", err)
	}
	if lines["summary"]["status"] != "failed" || !strings.Contains(lines["summary"]["error"].(string), "infinite") {
		t.Fatalf("summary %v, want a failure", lines["summary"])
	}
	if _, err := os.Stat(cfg.Output); !os.IsNotExist(err) {
		t.Fatalf("failed run left its output folder: %v", err)
	}
}

func posInf() float64 { return 1 / zero }

var zero = 0.0

// Fit on a slice: only the selected partitions define the statistics,
// every input is written, and the manifest says which inputs contributed;
// values of the other inputs outside the fitted range are counted.
func TestNightlyFitFilter(t *testing.T) {
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeFloats(t, filepath.Join(lake, "split=train", "day=1", "a.parquet"), 1, 2, 3)
	writeFloats(t, filepath.Join(lake, "split=train", "day=2", "a.parquet"), 4, 5)
	writeFloats(t, filepath.Join(lake, "split=test", "day=1", "a.parquet"), 0, 2, 9, 10, 11)
	cfg := testConfig(t, lake, filepath.Join(tmp, "out"), 2)
	var err error
	if cfg.Fit, err = ParseFit("split=train"); err != nil {
		t.Fatal(err)
	}
	lines := mustRun(t, cfg)
	if m, d := count(t, lines, "summary", "files_measured"), count(t, lines, "pass_one", "files_not_fitted"); m != 2 || d != 1 {
		t.Fatalf("measured %d, not fitted %d, want 2 and 1", m, d)
	}
	m := readManifestT(t, filepath.Join(cfg.Output, ManifestName))
	if m.Job.Settings.Fit != "split=train" {
		t.Fatalf("settings.fit %q", m.Job.Settings.Fit)
	}
	want := map[string]bool{"split=test/day=1/a.parquet": false, "split=train/day=1/a.parquet": true, "split=train/day=2/a.parquet": true}
	for _, in := range m.Inputs {
		if in.Fit == nil || *in.Fit != want[in.Path] || in.SHA256 == "" || in.Rows == 0 {
			t.Fatalf("input %+v, want fit %v with rows and hash", in, want[in.Path])
		}
	}
	if len(m.Outputs) != 3 {
		t.Fatalf("%d outputs, want every input written", len(m.Outputs))
	}
	c := m.Columns[0]
	// Mean of 1..5 is 3 and its population std sqrt(2), both exact here.
	if c.Stats.Count != 5 || c.Stats.Mean != 3 || c.Stats.Min != 1 || c.Stats.Max != 5 {
		t.Fatalf("stats %+v, want those of 1..5 only", c.Stats)
	}
	if c.OutOfRange == nil || *c.OutOfRange != (manifests.OutOfRange{Below: 1, Above: 3}) {
		t.Fatalf("out of range %+v, want 1 below (0) and 3 above (9, 10, 11)", c.OutOfRange)
	}
	if !strings.Contains(strings.Join(c.Warnings, ","), WarnOutsideFittedRange) {
		t.Fatalf("warnings %v", c.Warnings)
	}

	// A filter that selects nothing is an error naming the filter.
	cfg.Output = filepath.Join(tmp, "out2")
	cfg.Fit, _ = ParseFit("split=valid")
	if err := Run(context.Background(), cfg); err == nil || !strings.Contains(err.Error(), "split=valid") {
		t.Fatalf("got %v, want an error naming the filter", err)
	}
}

// apply with frozen parameters: values outside the fitted range are
// counted per column and warned about, and the manifest names the
// parameters' file and its SHA-256.
func TestNightlyApplyFrozen(t *testing.T) {
	tmp := t.TempDir()
	day1, day2 := filepath.Join(tmp, "day1"), filepath.Join(tmp, "day2")
	writeFloats(t, filepath.Join(day1, "d=1", "a.parquet"), 1, 2, 3, 4)
	writeFloats(t, filepath.Join(day2, "d=2", "a.parquet"), -1, 0, 2, 5, 6, 7, math.NaN())
	cfg := testConfig(t, day1, filepath.Join(tmp, "out1"), 1)
	mustRun(t, cfg)
	params := filepath.Join(cfg.Output, ManifestName)

	cfg = testConfig(t, day2, filepath.Join(tmp, "out2"), 1)
	cfg.ParamsPath = params
	lines, err := logLines(t, cfg, Apply)
	if err != nil {
		t.Fatal(err)
	}
	if w := count(t, lines, "summary", "warnings"); w != 1 {
		t.Fatalf("summary warnings %d, want 1", w)
	}
	m := readManifestT(t, filepath.Join(cfg.Output, ManifestName))
	raw, err := os.ReadFile(params)
	if err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256(raw)
	if m.ParamsSource == nil || m.ParamsSource.SHA256 != hex.EncodeToString(sum[:]) || m.ParamsSource.Path != filepath.ToSlash(params) {
		t.Fatalf("params source %+v, want %s with sha256 %x", m.ParamsSource, params, sum)
	}
	c := m.Columns[0]
	// Fitted on 1..4: -1 and 0 are below, 5, 6 and 7 above; NaN is neither.
	if c.OutOfRange == nil || *c.OutOfRange != (manifests.OutOfRange{Below: 2, Above: 3}) {
		t.Fatalf("out of range %+v, want 2 below and 3 above", c.OutOfRange)
	}
	if len(c.Warnings) != 1 || c.Warnings[0] != WarnOutsideFittedRange {
		t.Fatalf("warnings %v", c.Warnings)
	}
	// The parameters are the frozen ones, bit for bit.
	src := readManifestT(t, params)
	if c.Params != src.Columns[0].Params {
		t.Fatalf("params %+v, frozen %+v", c.Params, src.Columns[0].Params)
	}
}

// A second run on an output whose lock is held fails at once, naming the
// holder; two runs started together never both fail, and what commits
// verifies.
func TestNightlyLock(t *testing.T) {
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeDemoFile(t, lake, demoRel(0, 0), 0, 0)
	writeDemoFile(t, lake, demoRel(1, 0), 1, 0)
	cfg := testConfig(t, lake, filepath.Join(tmp, "out"), 1)
	cfg.Overwrite = true

	held, _, err := arrowio.AcquireLock(filepath.Join(cfg.Output, lockName), cfg.Now(), false)
	if err != nil {
		t.Fatal(err)
	}
	err = Run(context.Background(), cfg)
	if !errors.Is(err, arrowio.ErrLocked) || !strings.Contains(err.Error(), "pid") {
		t.Fatalf("got %v, want ErrLocked naming the holder", err)
	}
	if ok, _ := arrowio.Exists(filepath.Join(cfg.Output, ManifestName)); ok {
		t.Fatal("a locked-out run committed")
	}
	if err := held.Release(); err != nil {
		t.Fatal(err)
	}

	errs := make(chan error, 2)
	for range 2 {
		go func() { errs <- Run(context.Background(), cfg) }()
	}
	ok := 0
	for range 2 {
		if err := <-errs; err == nil {
			ok++
		} else if !errors.Is(err, arrowio.ErrLocked) {
			t.Fatalf("concurrent run: %v", err)
		}
	}
	if ok == 0 {
		t.Fatal("neither concurrent run committed")
	}
	var buf bytes.Buffer
	if err := Verify(context.Background(), &buf, cfg.Output); err != nil {
		t.Fatalf("%v\n%s", err, buf.String())
	}
	if ok, _ := arrowio.Exists(filepath.Join(cfg.Output, lockName)); ok {
		t.Fatal("lock file left after the runs")
	}
}

// The job file's [fit] section, and --fit replacing it.
func TestNightlyFitJobFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "job.toml")
	writeText(t, path, "input = \"lake\"\n[fit]\nwhere = [\"split=train\", \"day>=2026-01-01\"]\n")
	cfg, err := Load(path, Overrides{})
	if err != nil {
		t.Fatal(err)
	}
	if got := cfg.settings().Fit; got != "split=train,day>=2026-01-01" {
		t.Fatalf("fit %q", got)
	}
	flag := "site=a"
	if cfg, err = Load(path, Overrides{Fit: &flag}); err != nil || cfg.Fit.String() != "site=a" {
		t.Fatalf("--fit: %v, %v", cfg.Fit, err)
	}
	bad := "site"
	if _, err := Load(path, Overrides{Fit: &bad}); !errors.Is(err, ErrUsage) {
		t.Fatalf("bad --fit: %v, want a usage error", err)
	}
	writeText(t, path, "input = \"lake\"\n[fit]\nwhere = [\"split\"]\n")
	if _, err := Load(path, Overrides{}); err == nil || errors.Is(err, ErrUsage) || !strings.Contains(err.Error(), path) {
		t.Fatalf("bad [fit]: %v, want an error naming the job file", err)
	}
}

// The metrics file is Prometheus text format: HELP and TYPE lines, then
// one sample per metric with its labels.
func TestNightlyMetrics(t *testing.T) {
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeFloats(t, filepath.Join(lake, "a.parquet"), 1, 2, 3)
	cfg := testConfig(t, lake, filepath.Join(tmp, "out\"x"), 1)
	cfg.MetricsPath = filepath.Join(tmp, "lakescale.prom")
	mustRun(t, cfg)
	data, err := os.ReadFile(cfg.MetricsPath)
	if err != nil {
		t.Fatal(err)
	}
	text := string(data)
	label := `{command="run",output="` + strings.ReplaceAll(cfg.Output, `"`, `\"`) + `"}`
	// testConfig's clock stands at 2026-01-02T03:04:05Z, Unix time
	// 1767323045 (date -u -d @1767323045); it does not move, so the
	// duration is 0.
	for _, want := range []string{
		"# TYPE lakescale_last_success_timestamp_seconds gauge\nlakescale_last_success_timestamp_seconds" + label + " 1767323045\n",
		"lakescale_last_run_rows" + label + " 3\n",
		"lakescale_last_run_warnings" + label + " 0\n",
		"lakescale_last_run_files_measured" + label + " 1\n",
		"lakescale_last_run_duration_seconds" + label + " 0\n",
	} {
		if !strings.Contains(text, want) {
			t.Errorf("metrics lack %q:\n%s", want, text)
		}
	}
	// A failed run leaves the last success's file as it was.
	cfg.Input = filepath.Join(tmp, "missing")
	if err := Run(context.Background(), cfg); err == nil {
		t.Fatal("run of a missing input succeeded")
	}
	if again, _ := os.ReadFile(cfg.MetricsPath); !bytes.Equal(again, data) {
		t.Fatal("a failed run rewrote the metrics")
	}
}
