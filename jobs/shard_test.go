package jobs

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"regexp"
	"strings"
	"testing"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// createdAt matches the one per-invocation field of a statistics file or
// manifest.
var createdAt = regexp.MustCompile(`(?m)^  "created_at": "[^"]*"\n`)

// withoutCreatedAt reads a statistics file or manifest without created_at.
func withoutCreatedAt(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if !createdAt.Match(b) {
		t.Fatalf("%s has no created_at line", path)
	}
	return createdAt.ReplaceAll(b, nil)
}

// shardFixture is a demo lake with a single-process measure and apply to
// compare sharded runs with.
type shardFixture struct {
	tmp, lake, stats, out string
}

func newShardFixture(t *testing.T, fit string) shardFixture {
	t.Helper()
	tmp := t.TempDir()
	f := shardFixture{tmp: tmp, lake: filepath.Join(tmp, "lake"), stats: filepath.Join(tmp, "single.json"), out: filepath.Join(tmp, "single")}
	writeDemoLake(t, f.lake)
	cfg := f.measureConfig(t, fit)
	cfg.StatsPath = f.stats
	if err := Measure(context.Background(), cfg); err != nil {
		t.Fatal(err)
	}
	if err := Apply(context.Background(), f.applyConfig(t, f.out)); err != nil {
		t.Fatal(err)
	}
	return f
}

func (f shardFixture) measureConfig(t *testing.T, fit string) Config {
	t.Helper()
	cfg := testConfig(t, f.lake, "", 2)
	if fit != "" {
		var err error
		if cfg.Fit, err = ParseFit(fit); err != nil {
			t.Fatal(err)
		}
	}
	return cfg
}

func (f shardFixture) applyConfig(t *testing.T, out string) Config {
	t.Helper()
	cfg := testConfig(t, f.lake, out, 2)
	cfg.ParamsPath = f.stats
	return cfg
}

// measureShards runs every measure shard, last first, and merges them.
func (f shardFixture) measureShards(t *testing.T, cfg Config, n int, work, stats string) error {
	t.Helper()
	for i := n - 1; i >= 0; i-- {
		if err := MeasureShard(context.Background(), cfg, Shard{Index: i, Count: n, Work: work}); err != nil {
			t.Fatalf("measure shard %d of %d: %v", i, n, err)
		}
	}
	cfg.StatsPath = stats
	return MergeShards(context.Background(), cfg, work)
}

// applyShards runs every apply shard, last first, and commits them.
func (f shardFixture) applyShards(t *testing.T, n int, work, out string) error {
	t.Helper()
	for i := n - 1; i >= 0; i-- {
		if err := ApplyShard(context.Background(), f.applyConfig(t, out), Shard{Index: i, Count: n, Work: work}); err != nil {
			t.Fatalf("apply shard %d of %d: %v", i, n, err)
		}
	}
	return CommitShards(context.Background(), f.applyConfig(t, out), work)
}

// sameDataset asserts that a sharded apply committed the same files and
// manifest entries as the single-process apply.
func (f shardFixture) sameDataset(t *testing.T, out string) {
	t.Helper()
	a := readManifestT(t, filepath.Join(f.out, ManifestName))
	b := readManifestT(t, filepath.Join(out, ManifestName))
	for _, field := range []struct {
		name string
		x, y any
	}{{"inputs", a.Inputs, b.Inputs}, {"outputs", a.Outputs, b.Outputs}, {"columns", a.Columns, b.Columns},
		{"params_source", a.ParamsSource, b.ParamsSource}, {"tool", a.Tool, b.Tool}, {"kind", a.Kind, b.Kind}} {
		if !sameJSON(field.x, field.y) {
			t.Errorf("%s: manifest %s differs from the single run's", out, field.name)
		}
	}
	// The job differs only in the output location.
	sa, sb := a.Job.Settings, b.Job.Settings
	sa.Output, sb.Output = "", ""
	if !reflect.DeepEqual(sa, sb) {
		t.Errorf("%s: job settings differ beyond the output: %+v vs %+v", out, sa, sb)
	}
	for _, o := range a.Outputs {
		x, _ := os.ReadFile(filepath.Join(f.out, o.Path))
		y, err := os.ReadFile(filepath.Join(out, o.Path))
		if err != nil || len(x) == 0 || !bytes.Equal(x, y) {
			t.Fatalf("%s: %s differs from the single run's (%v)", out, o.Path, err)
		}
	}
	if ok, _ := arrowio.Exists(filepath.Join(out, markerName)); ok {
		t.Errorf("%s: the commit left the uncommitted marker", out)
	}
	if err := Verify(context.Background(), &bytes.Buffer{}, out); err != nil {
		t.Fatal(err)
	}
}

// Measure shards merged give the single measure's statistics file byte
// for byte (but created_at), and apply shards committed give its output
// files and manifest, for 1, 3 and 7 shards (9 inputs: with 7 shards
// some have two and some one).
func TestShardedMatchesSingleProcess(t *testing.T) {
	f := newShardFixture(t, "")
	want := withoutCreatedAt(t, f.stats)
	for _, n := range []int{1, 3, 7} {
		work := filepath.Join(f.tmp, fmt.Sprintf("work-%d", n))
		merged := filepath.Join(f.tmp, fmt.Sprintf("merged-%d.json", n))
		if err := f.measureShards(t, f.measureConfig(t, ""), n, work, merged); err != nil {
			t.Fatalf("%d shards: merge: %v", n, err)
		}
		if got := withoutCreatedAt(t, merged); !bytes.Equal(got, want) {
			t.Fatalf("%d shards: merged statistics differ from the single measure's:\n%s\nwant:\n%s", n, got, want)
		}
		out := filepath.Join(f.tmp, fmt.Sprintf("out-%d", n))
		if err := f.applyShards(t, n, work, out); err != nil {
			t.Fatalf("%d shards: commit: %v", n, err)
		}
		f.sameDataset(t, out)
		// A second commit of the same shards (a retried commit pod) is
		// done already and changes nothing; the manifest of another run
		// is refused.
		before, _ := os.ReadFile(filepath.Join(out, ManifestName))
		// As a commit killed between the manifest and the marker leaves it.
		writeText(t, filepath.Join(out, markerName), markerSharded+"\n")
		if err := CommitShards(context.Background(), f.applyConfig(t, out), work); err != nil {
			t.Fatalf("%d shards: second commit of the same shards: %v", n, err)
		}
		if _, err := os.Stat(filepath.Join(out, markerName)); !os.IsNotExist(err) {
			t.Fatalf("%d shards: the repeated commit left the marker: %v", n, err)
		}
		if after, _ := os.ReadFile(filepath.Join(out, ManifestName)); !bytes.Equal(after, before) {
			t.Fatalf("%d shards: the repeated commit rewrote the manifest", n)
		}
		m := readManifestT(t, filepath.Join(out, ManifestName))
		m.Outputs[0].SHA256 = strings.Repeat("0", 64)
		var buf bytes.Buffer
		if err := manifests.Encode(&buf, m); err != nil {
			t.Fatal(err)
		}
		writeText(t, filepath.Join(out, ManifestName), buf.String())
		err := CommitShards(context.Background(), f.applyConfig(t, out), work)
		if !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), "by another run") {
			t.Fatalf("%d shards: commit over another manifest: %v, want a refusal", n, err)
		}
		writeText(t, filepath.Join(out, ManifestName), string(before))
		// A shard into the committed output is refused.
		err = ApplyShard(context.Background(), f.applyConfig(t, out), Shard{Index: 0, Count: n, Work: work})
		if !errors.Is(err, ErrOutputNotEmpty) {
			t.Fatalf("%d shards: a shard into a committed output: %v, want ErrOutputNotEmpty", n, err)
		}
	}
}

// With a fit filter the inputs carry their fit flags, and the states of
// inputs outside the slice are left out of the results; with a shared
// statistics cache the shards' second measure takes every file from it.
func TestShardedFitAndCache(t *testing.T) {
	const fit = "site=north-ridge|cape-east"
	f := newShardFixture(t, fit)
	want := withoutCreatedAt(t, f.stats)
	cfg := f.measureConfig(t, fit)
	cfg.CacheDir = filepath.Join(f.tmp, "cache")
	work := filepath.Join(f.tmp, "work")
	for round := range 2 {
		merged := filepath.Join(f.tmp, fmt.Sprintf("merged-%d.json", round))
		if err := f.measureShards(t, cfg, 3, work, merged); err != nil {
			t.Fatal(err)
		}
		if got := withoutCreatedAt(t, merged); !bytes.Equal(got, want) {
			t.Fatalf("round %d: merged statistics differ from the single measure's:\n%s\nwant:\n%s", round, got, want)
		}
	}
	if n := len(cacheEntries(t, cfg.CacheDir)); n != 6 {
		t.Fatalf("the shards left %d cache entries, want one per fitted input (6)", n)
	}
	lines, err := logLines(t, cfg, func(ctx context.Context, c Config) error {
		return MeasureShard(ctx, c, Shard{Index: 1, Count: 3, Work: work})
	})
	if err != nil {
		t.Fatal(err)
	}
	if m, c := count(t, lines, "summary", "files_measured"), count(t, lines, "summary", "files_cached"); m != 0 || c == 0 {
		t.Fatalf("a shard's second measure measured %d and took %d files from the cache; want 0 and all of its fitted files", m, c)
	}
	raw, err := os.ReadFile(filepath.Join(work, workMeasure, partialName(1, 3)))
	if err != nil {
		t.Fatal(err)
	}
	part, err := manifests.DecodeMeasurePartial(bytes.NewReader(raw))
	if err != nil {
		t.Fatal(err)
	}
	for _, mf := range part.Files {
		if mf.Input.Fit == nil || *mf.Input.Fit != (len(mf.States) > 0) {
			t.Fatalf("%s: fit %v with %d states", mf.Input.Path, mf.Input.Fit, len(mf.States))
		}
	}
}

// Merge refuses a missing shard, a duplicated one, and a result of
// another job or another listing, naming them.
func TestMergeRefusesIncompleteShards(t *testing.T) {
	f := newShardFixture(t, "")
	work := filepath.Join(f.tmp, "work")
	cfg := f.measureConfig(t, "")
	if err := f.measureShards(t, cfg, 3, work, filepath.Join(f.tmp, "ok.json")); err != nil {
		t.Fatal(err)
	}
	dir := filepath.Join(work, workMeasure)
	one := filepath.Join(dir, partialName(1, 3))
	saved, err := os.ReadFile(one)
	if err != nil {
		t.Fatal(err)
	}
	merge := func() error {
		c := cfg
		c.StatsPath = filepath.Join(f.tmp, "merged.json")
		return MergeShards(context.Background(), c, work)
	}
	restore := func() {
		t.Helper()
		if err := os.WriteFile(one, saved, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	refused := func(what, want string) {
		t.Helper()
		err := merge()
		if !errors.Is(err, ErrShards) || !strings.Contains(err.Error(), want) {
			t.Fatalf("%s: got %v, want ErrShards mentioning %q", what, err, want)
		}
		if ok, _ := arrowio.Exists(filepath.Join(f.tmp, "merged.json")); ok {
			t.Fatalf("%s: merge wrote the statistics file", what)
		}
	}

	if err := os.Remove(one); err != nil {
		t.Fatal(err)
	}
	refused("missing shard", "measure shard 1 of 3 missing")

	zero, _ := os.ReadFile(filepath.Join(dir, partialName(0, 3)))
	if err := os.WriteFile(one, zero, 0o644); err != nil {
		t.Fatal(err)
	}
	refused("duplicated shard", "measure shard 0 of 3 is present 2 times")
	restore()

	other := cfg
	other.Std = stats.StdSample
	if err := MeasureShard(context.Background(), other, Shard{Index: 1, Count: 3, Work: work}); err != nil {
		t.Fatal(err)
	}
	refused("another job", one+": job settings")
	restore()

	if err := MeasureShard(context.Background(), cfg, Shard{Index: 1, Count: 4, Work: work}); err != nil {
		t.Fatal(err)
	}
	refused("another shard count", "mixes runs")
	if err := os.Remove(filepath.Join(dir, partialName(1, 4))); err != nil {
		t.Fatal(err)
	}

	// A new input after two shards ran: the third saw another listing.
	writeDemoFile(t, f.lake, "site=extra/day=2026-03-04/part-0.parquet", 0, 0)
	if err := MeasureShard(context.Background(), cfg, Shard{Index: 2, Count: 3, Work: work}); err != nil {
		t.Fatal(err)
	}
	refused("another listing", "every shard must see the same input")
}

// Commit refuses a missing apply shard, a missing or changed output and
// a Parquet file no shard listed; a shard stopped midway and run again
// repairs the run.
func TestCommitRefusesAndRepair(t *testing.T) {
	f := newShardFixture(t, "")
	work := filepath.Join(f.tmp, "work")
	out := filepath.Join(f.tmp, "out")
	const n = 3
	commit := func() error { return CommitShards(context.Background(), f.applyConfig(t, out), work) }
	refused := func(what, want string) {
		t.Helper()
		err := commit()
		if !errors.Is(err, ErrShards) || !strings.Contains(err.Error(), want) {
			t.Fatalf("%s: got %v, want ErrShards mentioning %q", what, err, want)
		}
		if ok, _ := arrowio.Exists(filepath.Join(out, ManifestName)); ok {
			t.Fatalf("%s: commit wrote the manifest", what)
		}
	}

	// Shard 1 is stopped after its first output, as a killed pod would be.
	ctx, cancel := context.WithCancelCause(context.Background())
	stop := errors.New("test stops the shard after one output")
	hookFileWritten = func(string) { cancel(stop) }
	err := ApplyShard(ctx, f.applyConfig(t, out), Shard{Index: 1, Count: n, Work: work})
	hookFileWritten = func(string) {}
	if !errors.Is(err, stop) {
		t.Fatalf("stopped shard: %v, want the cancellation cause", err)
	}
	for _, i := range []int{0, 2} {
		if err := ApplyShard(context.Background(), f.applyConfig(t, out), Shard{Index: i, Count: n, Work: work}); err != nil {
			t.Fatal(err)
		}
	}
	refused("stopped shard", "apply shard 1 of 3 missing")

	// Run again, shard 1 completes the run.
	if err := ApplyShard(context.Background(), f.applyConfig(t, out), Shard{Index: 1, Count: n, Work: work}); err != nil {
		t.Fatal(err)
	}
	list := filepath.Join(work, workApply, partialName(1, n))
	before, _ := os.ReadFile(list)

	// A lost output, then one of another size.
	part, err := manifests.DecodeApplyPartial(bytes.NewReader(before))
	if err != nil {
		t.Fatal(err)
	}
	victim := filepath.Join(out, part.Files[0].Output.Path)
	good, _ := os.ReadFile(victim)
	if err := os.Remove(victim); err != nil {
		t.Fatal(err)
	}
	refused("lost output", "is missing, though "+list+" lists it")
	if err := os.WriteFile(victim, append(good, 0), 0o644); err != nil {
		t.Fatal(err)
	}
	refused("changed output", fmt.Sprintf("has %d bytes", len(good)+1))
	// Repair by running the shard again: the same bytes and list.
	if err := ApplyShard(context.Background(), f.applyConfig(t, out), Shard{Index: 1, Count: n, Work: work}); err != nil {
		t.Fatal(err)
	}
	if after, _ := os.ReadFile(list); !bytes.Equal(before, after) {
		t.Fatal("running a shard again wrote another list")
	}

	// A Parquet file no shard wrote.
	stray := filepath.Join(out, "site=stray", "part-0.parquet")
	writeDemoFile(t, out, "site=stray/part-0.parquet", 0, 0)
	refused("stray file", "site=stray/part-0.parquet, which no apply shard listed")
	if err := os.RemoveAll(filepath.Dir(stray)); err != nil {
		t.Fatal(err)
	}

	// Another output location than the shards wrote to.
	err = CommitShards(context.Background(), f.applyConfig(t, filepath.Join(f.tmp, "elsewhere")), work)
	if !errors.Is(err, ErrShards) || !strings.Contains(err.Error(), "the shards wrote into") {
		t.Fatalf("commit of another output: %v", err)
	}

	if err := commit(); err != nil {
		t.Fatal(err)
	}
	f.sameDataset(t, out)
}

// A sharded apply refuses a folder lakescale did not write and
// --overwrite; it shares an output with other shards and earlier runs.
func TestApplyShardOutputChecks(t *testing.T) {
	f := newShardFixture(t, "")
	work := filepath.Join(f.tmp, "work")
	out := filepath.Join(f.tmp, "foreign")
	writeText(t, filepath.Join(out, "notes.txt"), "mine")
	err := ApplyShard(context.Background(), f.applyConfig(t, out), Shard{Index: 0, Count: 2, Work: work})
	if !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), "notes.txt") {
		t.Fatalf("foreign output: %v", err)
	}
	cfg := f.applyConfig(t, filepath.Join(f.tmp, "new"))
	cfg.Overwrite = true
	if err := ApplyShard(context.Background(), cfg, Shard{Index: 0, Count: 2, Work: work}); !errors.Is(err, ErrUsage) {
		t.Fatalf("--overwrite: %v, want ErrUsage", err)
	}
	if err := ApplyShard(context.Background(), f.applyConfig(t, out), Shard{Index: 0, Count: 2}); !errors.Is(err, ErrUsage) {
		t.Fatalf("no work folder: %v, want ErrUsage", err)
	}
	// An output that a run holds the lock of (in pass one: no marker yet)
	// is not shared.
	busy := filepath.Join(f.tmp, "busy")
	writeText(t, filepath.Join(busy, lockName), foreignLock)
	err = ApplyShard(context.Background(), f.applyConfig(t, busy), Shard{Index: 0, Count: 2, Work: work})
	if !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), "locked by pid 1 on host elsewhere") {
		t.Fatalf("locked output: %v", err)
	}
	// Once that lease has ended the shard goes ahead.
	writeText(t, filepath.Join(busy, lockName), `{"pid":1,"host":"elsewhere","started":"2026-01-02T03:04:05Z","expires":"2026-01-01T00:00:00Z"}`+"\n")
	if err := ApplyShard(context.Background(), f.applyConfig(t, busy), Shard{Index: 0, Count: 2, Work: work}); err != nil {
		t.Fatalf("output with an expired lock: %v", err)
	}
	// A run does not take over a sharded apply's output (its shards may
	// still be writing), and a shard does not join a run's.
	rcfg := f.applyConfig(t, busy)
	if err := Apply(context.Background(), rcfg); !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), "sharded apply") {
		t.Fatalf("apply into a sharded apply's output: %v", err)
	}
	runs := filepath.Join(f.tmp, "runs")
	writeText(t, filepath.Join(runs, markerName), markerRun+" 2026-01-02T03:04:05Z\n")
	err = ApplyShard(context.Background(), f.applyConfig(t, runs), Shard{Index: 0, Count: 2, Work: work})
	if !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), "of a run") {
		t.Fatalf("shard into a run's uncommitted output: %v", err)
	}
	mcfg := f.measureConfig(t, "")
	mcfg.StatsPath = filepath.Join(f.tmp, "x.json")
	if err := MeasureShard(context.Background(), mcfg, Shard{Index: 0, Count: 2, Work: work}); !errors.Is(err, ErrUsage) {
		t.Fatalf("measure shard with --stats: %v, want ErrUsage", err)
	}
}

func TestParseShard(t *testing.T) {
	three, zero := 3, 0
	env := func(vars map[string]string) func(string) string { return func(k string) string { return vars[k] } }
	none := env(nil)
	for _, tc := range []struct {
		spec   string
		shards *int
		work   string
		getenv func(string) string
		want   Shard
		err    string // "" for success
	}{
		{"0/1", nil, "w", none, Shard{0, 1, "w"}, ""},
		{"2/3", nil, "w", none, Shard{2, 3, "w"}, ""},
		{"0006/0007", nil, "w", none, Shard{6, 7, "w"}, ""},
		{"env", &three, "w", env(map[string]string{EnvJobCompletionIndex: "2"}), Shard{2, 3, "w"}, ""},
		{"env", &three, "w", env(map[string]string{EnvSlurmArrayTaskID: "1"}), Shard{1, 3, "w"}, ""},
		{"env", &three, "w", env(map[string]string{EnvJobCompletionIndex: "0", EnvSlurmArrayTaskID: "2"}), Shard{0, 3, "w"}, ""},
		{"3/3", nil, "w", none, Shard{}, `--shard "3/3": want i/n`},
		{"1/0", nil, "w", none, Shard{}, "want i/n"},
		{"-1/3", nil, "w", none, Shard{}, "want i/n"},
		{"+1/3", nil, "w", none, Shard{}, "want i/n"},
		{"a/b", nil, "w", none, Shard{}, "want i/n"},
		{"1", nil, "w", none, Shard{}, "want i/n"},
		{"1/3/5", nil, "w", none, Shard{}, "want i/n"},
		{"1/3", &three, "w", none, Shard{}, "--shards goes with --shard env"},
		{"1/3", nil, "", none, Shard{}, "--shard needs --work"},
		{"", &three, "w", none, Shard{}, "go with --shard"},
		{"", nil, "w", none, Shard{}, "go with --shard"},
		{"env", nil, "w", none, Shard{}, "--shard env needs --shards"},
		{"env", &zero, "w", none, Shard{}, "--shards 0"},
		{"env", &three, "w", none, Shard{}, "neither JOB_COMPLETION_INDEX"},
		{"env", &three, "w", env(map[string]string{EnvJobCompletionIndex: "3"}), Shard{}, "JOB_COMPLETION_INDEX=3 is not below --shards 3"},
		{"env", &three, "w", env(map[string]string{EnvSlurmArrayTaskID: "x"}), Shard{}, `SLURM_ARRAY_TASK_ID="x" is not a shard index`},
	} {
		got, err := ParseShard(tc.spec, tc.shards, tc.work, tc.getenv)
		switch {
		case tc.err == "" && (err != nil || got != tc.want):
			t.Errorf("ParseShard(%q): %+v, %v; want %+v", tc.spec, got, err, tc.want)
		case tc.err != "" && (!errors.Is(err, ErrUsage) || !strings.Contains(err.Error(), tc.err)):
			t.Errorf("ParseShard(%q): %v; want a usage error with %q", tc.spec, err, tc.err)
		}
	}
	// The real environment, as the CLI passes it.
	t.Setenv(EnvJobCompletionIndex, "")
	t.Setenv(EnvSlurmArrayTaskID, "4")
	seven := 7
	if got, err := ParseShard("env", &seven, "w", os.Getenv); err != nil || got != (Shard{4, 7, "w"}) {
		t.Fatalf("SLURM_ARRAY_TASK_ID=4: %+v, %v", got, err)
	}
	t.Setenv(EnvJobCompletionIndex, "5")
	if got, err := ParseShard("env", &seven, "w", os.Getenv); err != nil || got != (Shard{5, 7, "w"}) {
		t.Fatalf("JOB_COMPLETION_INDEX=5: %+v, %v", got, err)
	}
}

// The assignment is balanced by bytes (within the largest file), every
// file goes to exactly one shard, and it does not depend on the order of
// the listing.
func TestAssignBalancedByBytes(t *testing.T) {
	var files []arrowio.File
	for i := range 50 {
		files = append(files, arrowio.File{Rel: fmt.Sprintf("f%02d.parquet", i), Size: int64(1 + (i*37)%101)})
	}
	files = append(files, arrowio.File{Rel: "a.parquet", Size: 50}, arrowio.File{Rel: "b.parquet", Size: 50})
	for _, n := range []int{1, 2, 3, 7, 60} {
		owner := assign(files, n)
		loads := make([]int64, n)
		var largest int64
		for i, s := range owner {
			loads[s] += files[i].Size
			largest = max(largest, files[i].Size)
		}
		lo, hi := loads[0], loads[0]
		for _, l := range loads {
			lo, hi = min(lo, l), max(hi, l)
		}
		if hi-lo > largest {
			t.Errorf("%d shards: loads %v differ by more than the largest file (%d)", n, loads, largest)
		}
		rev := make([]arrowio.File, len(files))
		for i := range files {
			rev[len(files)-1-i] = files[i]
		}
		for i, s := range assign(rev, n) {
			if s != owner[len(files)-1-i] {
				t.Fatalf("%d shards: the assignment depends on the listing order", n)
			}
		}
	}
	// Ties: equal sizes go by path, each to the lowest-loaded, lowest index.
	eq := []arrowio.File{{Rel: "b", Size: 5}, {Rel: "a", Size: 5}, {Rel: "c", Size: 5}}
	if got := assign(eq, 2); !reflect.DeepEqual(got, []int{1, 0, 0}) {
		t.Fatalf("ties: %v, want a->0, b->1, c->0", got)
	}
}

// Shards of different builds are not merged (a rolling upgrade in the
// middle of an array), nor by another build than theirs.
func TestMergeRefusesMixedBuilds(t *testing.T) {
	f := newShardFixture(t, "")
	work := filepath.Join(f.tmp, "work")
	for i, v := range []string{"v1.0.0", "v1.0.1"} {
		cfg := f.measureConfig(t, "")
		cfg.Version = v
		if err := MeasureShard(context.Background(), cfg, Shard{Index: i, Count: 2, Work: work}); err != nil {
			t.Fatal(err)
		}
	}
	cfg := f.measureConfig(t, "")
	cfg.Version = "v1.0.0"
	cfg.StatsPath = filepath.Join(f.tmp, "merged.json")
	err := MergeShards(context.Background(), cfg, work)
	if !errors.Is(err, ErrShards) || !strings.Contains(err.Error(), "v1.0.1") || !strings.Contains(err.Error(), "same build") {
		t.Fatalf("mixed builds: %v", err)
	}
	other := f.measureConfig(t, "")
	other.Version = "v1.0.1"
	if err := MeasureShard(context.Background(), other, Shard{Index: 0, Count: 2, Work: work}); err != nil {
		t.Fatal(err)
	}
	err = MergeShards(context.Background(), cfg, work) // shards v1.0.1, merge v1.0.0
	if !errors.Is(err, ErrShards) || !strings.Contains(err.Error(), "merge and commit with the build the shards ran") {
		t.Fatalf("merge by another build: %v", err)
	}
	cfg.Version = "v1.0.1"
	if err := MergeShards(context.Background(), cfg, work); err != nil {
		t.Fatalf("same build: %v", err)
	}
}
