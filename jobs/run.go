package jobs

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"sort"
	"time"

	"github.com/apache/arrow/go/v17/arrow/memory"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// File names inside an output tree.
const (
	ManifestName = "_manifest.json"
	markerName   = "_uncommitted"
)

// Run makes both passes: statistics over every input (or those the fit
// filter selects, taking unchanged files from the cache), then scaled
// copies, then the manifest. It holds the output's lock throughout.
func Run(ctx context.Context, cfg Config) (err error) {
	ctx, cfg.stop = context.WithCancelCause(ctx)
	defer cfg.stop(nil)
	log, end, err := begin(&cfg, "run", true)
	if err != nil {
		return err
	}
	defer func() { err = end(err) }()
	p, results, cols, params, err := measureAll(ctx, &cfg, arrowio.Join(cfg.Output, cacheDirName), log)
	if err != nil {
		return err
	}
	// The states are merged and cached; pass two and the manifest need only
	// each input's rows, size, hash and version.
	for i := range results {
		results[i].Accs = nil
	}
	// The output is touched only once the statistics are known to be good.
	if err := prepareOutput(&cfg); err != nil {
		return err
	}
	if cfg.Fit != nil {
		p.bounds = boundsOf(cols) // files outside the fit slice may fall outside
	}
	m := cfg.newManifest(manifests.KindDataset, cols)
	outs, err := passTwo(ctx, &cfg, p, params, fileMeta(m), results)
	if err != nil {
		return err
	}
	log.passTwo(outs)
	for i := range outs {
		outs[i].In = results[i]
	}
	return p.commit(ctx, &cfg, m, outs, log)
}

// begin starts a command: it checks the paths and the required flags
// (pairs of value and flag name), opens the run log and, for commands
// that write a dataset, takes the output's lock and checks that the output
// tree may be written. The caller must pass its result through end, which
// releases the lock and writes the summary line.
func begin(cfg *Config, command string, writes bool, required ...string) (log *runLog, end func(error) error, err error) {
	if err := cfg.checkLocations(); err != nil {
		return nil, nil, err
	}
	if err := cfg.checkPaths(writes); err != nil {
		return nil, nil, err
	}
	for i := 0; i+1 < len(required); i += 2 {
		if required[i] == "" {
			return nil, nil, fmt.Errorf("%w: %s needs %s", ErrUsage, command, required[i+1])
		}
	}
	if log, err = newRunLog(cfg, command); err != nil {
		return nil, nil, err
	}
	if !writes {
		return log, log.done, nil
	}
	unlock, err := lockOutput(cfg, log)
	if err != nil {
		return nil, nil, log.done(err)
	}
	end = func(err error) error {
		unlock()
		return log.done(err)
	}
	if err := checkCommitSupport(cfg); err != nil {
		return nil, nil, end(err)
	}
	if err := checkOutput(cfg); err != nil {
		return nil, nil, end(err)
	}
	return log, end, nil
}

// skipCheckHint follows every failure of a create-only-if-absent write
// that the store cannot carry out.
const skipCheckHint = "; the output lock and the commit need create-only-if-absent writes (If-None-Match on S3, hard links on " +
	"local disk) so that two runs cannot both commit: use a store or file system that has them, or give --skip-commit-check " +
	"if only one run at a time writes this output"

// checkCommitSupport makes sure the output's store refuses a second
// create of the same object, on which the commit relies (writeManifest),
// unless the user opted out.
func checkCommitSupport(cfg *Config) error {
	if cfg.SkipCommitCheck {
		return nil
	}
	err := arrowio.CheckConditionalCreate(cfg.Output)
	if errors.Is(err, arrowio.ErrNoConditionalCreate) {
		return fmt.Errorf("%w%s", err, skipCheckHint)
	}
	return err
}

// measureAll is pass one of run and measure: discovery, the fit slice and
// cache, the statistics of every file, the fitted parameters, and the
// cache entries of the files measured (written once the statistics are
// known to be good). defCache is the cache folder used without --cache.
func measureAll(ctx context.Context, cfg *Config, defCache string, log *runLog) (*plan, []fileResult, []manifests.Column, []stats.Params, error) {
	p, results, err := measureFiles(ctx, cfg, defCache, log, nil)
	if err != nil {
		return nil, nil, nil, nil, err
	}
	cols, params, err := fitColumns(p, results)
	if err != nil {
		return nil, nil, nil, nil, err
	}
	log.phase("fit", "columns", len(cols))
	if err := p.saveCache(ctx, cfg, results, log); err != nil {
		return nil, nil, nil, nil, err
	}
	return p, results, cols, params, nil
}

// Measure makes pass one only and writes the statistics file.
func Measure(ctx context.Context, cfg Config) (err error) {
	log, end, err := begin(&cfg, "measure", false, cfg.StatsPath, "--stats")
	if err != nil {
		return err
	}
	defer func() { err = end(err) }()
	p, results, cols, _, err := measureAll(ctx, &cfg, "", log)
	if err != nil {
		return err
	}
	m := cfg.newManifest(manifests.KindStatistics, cols)
	for i := range p.Files {
		m.Inputs = append(m.Inputs, p.input(i, results[i]))
	}
	log.sum.Warnings = countWarnings(m.Columns)
	if err := writeStatistics(cfg.StatsPath, m); err != nil {
		return err
	}
	fmt.Fprintf(cfg.Out, "measured %d columns over %d of %d files; statistics in %s\n",
		len(cols), p.fittedCount(), len(p.Files), cfg.StatsPath)
	return nil
}

// Apply makes pass two only, with parameters from a manifest or a
// statistics file; nothing is re-measured. Values outside the fitted
// [min, max] are counted per column and raise a warning.
func Apply(ctx context.Context, cfg Config) (err error) {
	ctx, cfg.stop = context.WithCancelCause(ctx)
	defer cfg.stop(nil)
	log, end, err := begin(&cfg, "apply", true, cfg.ParamsPath, "--params")
	if err != nil {
		return err
	}
	defer func() { err = end(err) }()
	p, params, m, err := applyPlan(&cfg)
	if err != nil {
		return err
	}
	return p.writeAndCommit(ctx, &cfg, params, m, log)
}

// applyPlan reads apply's parameters document and discovers the inputs:
// the plan (columns from the parameters, and their fitted bounds to count
// values outside of), the parameters, and the manifest started with the
// parameters' columns, rules and source.
func applyPlan(cfg *Config) (*plan, []stats.Params, *manifests.Manifest, error) {
	src, raw, err := readManifest(cfg.ParamsPath)
	if err != nil {
		return nil, nil, nil, err
	}
	files, err := arrowio.Discover(cfg.Input)
	if err != nil {
		return nil, nil, nil, err
	}
	p := &plan{Files: files, bounds: boundsOf(src.Columns)}
	params := make([]stats.Params, len(src.Columns))
	if err := p.columnsFrom(src); err != nil {
		return nil, nil, nil, err
	}
	for j, c := range src.Columns {
		params[j] = paramsOf(c)
	}
	m := cfg.newManifest(manifests.KindDataset, src.Columns)
	cfg.inheritParams(m, src, raw)
	return p, params, m, nil
}

// inheritParams records in m where its parameters came from: the rules,
// std and fit filter they were fitted with (part of the job's digest) and
// the path, kind and SHA-256 of the document raw read from
// cfg.ParamsPath.
func (c *Config) inheritParams(m, src *manifests.Manifest, raw []byte) {
	m.Job.Settings.Rules = src.Job.Settings.Rules
	m.Job.Settings.Std = src.Job.Settings.Std
	m.Job.Settings.Fit = src.Job.Settings.Fit
	m.Job.SHA256 = m.Job.Settings.Digest()
	sum := sha256.Sum256(raw)
	m.ParamsSource = &manifests.ParamsSource{Path: filepath.ToSlash(c.ParamsPath), Kind: src.Kind, SHA256: hex.EncodeToString(sum[:])}
}

// writeAndCommit is pass two of apply and invert with the parameters
// given: the output prepared, every file written (inputs hashed on the
// way), the manifest m committed.
func (p *plan) writeAndCommit(ctx context.Context, cfg *Config, params []stats.Params, m *manifests.Manifest, log *runLog) error {
	if err := prepareOutput(cfg); err != nil {
		return err
	}
	outs, err := passTwo(ctx, cfg, p, params, fileMeta(m), nil)
	if err != nil {
		return err
	}
	log.passTwo(outs)
	log.inputsOf(outs)
	return p.commit(ctx, cfg, m, outs, log)
}

// columnsFrom selects the columns a parameters document names, checking
// that the first input has them with the recorded types.
func (p *plan) columnsFrom(src *manifests.Manifest) error {
	r, err := arrowio.Open(p.Files[0].Abs, memory.DefaultAllocator)
	if err != nil {
		return err
	}
	defer r.Close()
	sc := r.Schema()
	for _, c := range src.Columns {
		fi := sc.FieldIndices(c.Name)
		if len(fi) != 1 {
			return fmt.Errorf("%s: %w: column %s from the parameters is missing", p.Files[0].Rel, ErrColumn, c.Name)
		}
		f := sc.Field(fi[0])
		kind, ok := stats.KindOf(f.Type)
		if !ok || f.Type.String() != c.Type {
			return fmt.Errorf("%s: %w: column %s is %s, the parameters were fitted on %s", p.Files[0].Rel, ErrSchemaMismatch, c.Name, f.Type, c.Type)
		}
		p.Columns = append(p.Columns, column{Name: c.Name, Type: f.Type, Kind: kind})
	}
	return nil
}

// fitColumns merges the per-file states and fits each column's method.
func fitColumns(p *plan, results []fileResult) ([]manifests.Column, []stats.Params, error) {
	totals, err := merge(p, results, p.Fit)
	if err != nil {
		return nil, nil, err
	}
	cols := make([]manifests.Column, len(p.Columns))
	params := make([]stats.Params, len(p.Columns))
	for j, c := range p.Columns {
		s := totals[j].Summary()
		prm, warns, err := stats.Fit(c.Rule.Method, c.Rule.Options, s)
		if err != nil {
			return nil, nil, fmt.Errorf("column %s: %w", c.Name, err)
		}
		params[j] = prm
		cols[j] = manifests.Column{
			Name:     c.Name,
			Type:     c.Type.String(),
			Method:   string(prm.Method),
			Options:  options(prm),
			Stats:    wireStats(s),
			Params:   manifests.Params{Center: manifests.Float(prm.Center), Scale: manifests.Float(prm.Scale)},
			Warnings: make([]string, len(warns)),
		}
		for k, w := range warns {
			cols[j].Warnings[k] = string(w)
		}
	}
	return cols, params, nil
}

func options(p stats.Params) manifests.Options {
	var o manifests.Options
	switch p.Method {
	case stats.ZScore:
		o.Std = string(p.Options.Std)
	case stats.MinMax:
		lo, hi := manifests.Float(p.Options.RangeMin), manifests.Float(p.Options.RangeMax)
		o.RangeMin, o.RangeMax = &lo, &hi
	}
	return o
}

func wireStats(s stats.Summary) manifests.Stats {
	return manifests.Stats{
		Rows: s.Rows, Count: s.Count, Nulls: s.Nulls, NaNs: s.NaNs, PosInf: s.PosInf, NegInf: s.NegInf,
		Mean: manifests.Float(s.Mean), StdSample: manifests.Float(s.StdSample), StdPopulation: manifests.Float(s.StdPopulation),
		Min: manifests.Float(s.Min), Max: manifests.Float(s.Max),
	}
}

func input(f arrowio.File, r fileResult) manifests.Input {
	part := make(map[string]string, len(f.Partition))
	for _, kv := range f.Partition {
		part[kv.Key] = kv.Value
	}
	return manifests.Input{Path: f.Rel, Partition: part, Rows: r.Rows, Bytes: r.Bytes, SHA256: r.SHA256}
}

// newManifest starts a document with the tool, job and columns filled in.
func (c *Config) newManifest(kind string, cols []manifests.Column) *manifests.Manifest {
	m := &manifests.Manifest{
		ManifestVersion: manifests.Version,
		Kind:            kind,
		Tool:            toolInfo(c.Version),
		Job:             manifests.Job{Settings: c.settings()},
		Columns:         cols,
		Inputs:          []manifests.Input{},
		CreatedAt:       c.Now().UTC().Format(time.RFC3339),
	}
	m.Job.SHA256 = m.Job.Settings.Digest()
	return m
}

func fileMeta(m *manifests.Manifest) string {
	s, err := manifests.EncodeFileParams(m.FileParams())
	if err != nil {
		// Parameters are finite by construction (stats.Fit).
		panic(err)
	}
	return s
}

// toolInfo describes this binary from its build information.
func toolInfo(version string) manifests.Tool {
	t := manifests.Tool{Name: "lakescale", Version: version, GoVersion: runtime.Version(), Dependencies: map[string]string{}}
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return t
	}
	if t.Version == "" {
		t.Version = bi.Main.Version
	}
	for _, s := range bi.Settings {
		switch s.Key {
		case "vcs.revision":
			t.VCSRevision = s.Value
		case "vcs.modified":
			if s.Value == "true" && t.VCSRevision != "" {
				t.VCSRevision += "+modified"
			}
		}
	}
	for _, d := range bi.Deps {
		t.Dependencies[d.Path] = d.Version
	}
	return t
}

// Version reports the program version string for `lakescale version`.
func Version(version string) string {
	t := toolInfo(version)
	s := fmt.Sprintf("lakescale %s", t.Version)
	if t.VCSRevision != "" {
		s += " (" + t.VCSRevision + ")"
	}
	return s + " " + t.GoVersion
}

// checkOutput makes sure the output tree may be written: absent, empty,
// an uncommitted earlier run, or (with Overwrite) a committed dataset.
// The lock file and the statistics cache do not count.
func checkOutput(cfg *Config) error {
	state, _, sharded, err := outputStateMarker(cfg.Output)
	if err != nil {
		return err
	}
	switch {
	case sharded && !cfg.committingShards:
		// Its shards may still be writing: a run must not take their files
		// over (nor abort their uploads).
		return fmt.Errorf("%w: %s holds the uncommitted outputs of a sharded apply; finish it with lakescale commit, or remove them with lakescale clean first", ErrOutputNotEmpty, cfg.Output)
	case state == outCommitted && !cfg.Overwrite:
		return fmt.Errorf("%w: %s holds a committed dataset (%s); give --overwrite to replace it", ErrOutputNotEmpty, cfg.Output, ManifestName)
	case state == outForeign:
		// Not a lakescale tree: never written into, even with --overwrite,
		// so that no user file can be replaced or removed.
		return fmt.Errorf("%w: %s holds files lakescale did not write; want an absent or empty directory, a lakescale output, or another output path", ErrOutputNotEmpty, cfg.Output)
	}
	return nil
}

// noteOwnedOutputs records which Parquet files in the output tree the
// commit may remove when this run no longer writes them: those the old
// manifest lists, or every one in an uncommitted tree (which lakescale
// created empty).
func noteOwnedOutputs(cfg *Config) error {
	cfg.owned = map[string]bool{}
	path := arrowio.Join(cfg.Output, ManifestName)
	if ok, err := arrowio.Exists(path); err != nil || !ok {
		cfg.ownAll = err == nil
		return err
	}
	old, _, err := readManifest(path)
	if err != nil {
		return fmt.Errorf("%w: %s: the dataset to be replaced has an unreadable manifest: %w", ErrOutputNotEmpty, cfg.Output, err)
	}
	for _, o := range old.Outputs {
		cfg.owned[o.Path] = true
	}
	return nil
}

// prepareOutput checks the output tree (checkOutput), marks it
// uncommitted and removes leftover temporary files.
func prepareOutput(cfg *Config) error {
	if err := cfg.checkLock(); err != nil {
		return err
	}
	if err := checkOutput(cfg); err != nil {
		return err
	}
	if err := noteOwnedOutputs(cfg); err != nil {
		return err
	}
	if err := arrowio.MkdirAll(cfg.Output); err != nil {
		return err
	}
	// From here until commit the tree is uncommitted: first the marker,
	// then drop the old manifest so the old dataset no longer claims to be
	// complete.
	if err := writeMarker(cfg, markerRun, ManifestName+" exists"); err != nil {
		return err
	}
	if err := arrowio.Remove(arrowio.Join(cfg.Output, ManifestName)); err != nil {
		return err
	}
	_, err := arrowio.RemoveTemps(cfg.Output)
	return err
}

// commit checks every output, removes stale files of an earlier run,
// writes the manifest last and removes the uncommitted marker.
func (p *plan) commit(ctx context.Context, cfg *Config, m *manifests.Manifest, outs []written, log *runLog) error {
	want := make(map[string]bool, len(p.Files))
	var rows int64
	// Each output must carry the parameters being committed: a file left
	// by a run with other parameters (a shard re-run with another --params
	// and killed) is not committed as this run's.
	params := fileMeta(m)
	for i, f := range p.Files {
		dst := arrowio.Join(cfg.Output, f.Rel)
		n, _, meta, err := arrowio.ReadFooter(dst)
		if err != nil {
			return err
		}
		if n != outs[i].In.Rows {
			return fmt.Errorf("check %s: %d rows, want %d", dst, n, outs[i].In.Rows)
		}
		if got := meta[p.metaKey()]; got != params {
			return fmt.Errorf("check %s: the parameters in its footer (%s = %.80q) are not the ones being committed (%.80q); run the shard or job that writes it again", dst, p.metaKey(), got, params)
		}
		want[f.Rel] = true
		rows += n
		m.Inputs = append(m.Inputs, p.input(i, outs[i].In))
		m.Outputs = append(m.Outputs, manifests.Output{Path: f.Rel, Rows: outs[i].Out.Rows, Bytes: outs[i].Out.Bytes, SHA256: outs[i].Out.SHA256})
	}
	if err := context.Cause(ctx); err != nil {
		return err
	}
	// Nothing is removed once another run owns the output.
	if err := cfg.checkLock(); err != nil {
		return err
	}
	existing, err := arrowio.Discover(cfg.Output)
	if err != nil && !errors.Is(err, arrowio.ErrNoInputs) {
		return err // stale files could stay in the dataset unseen
	}
	for _, f := range existing {
		if err := context.Cause(ctx); err != nil {
			return err
		}
		if !want[f.Rel] && (cfg.ownAll || cfg.owned[f.Rel]) {
			if err := arrowio.Remove(f.Abs); err != nil {
				return err
			}
		}
	}
	sort.Slice(m.Outputs, func(i, j int) bool { return m.Outputs[i].Path < m.Outputs[j].Path })
	if p.bounds != nil {
		addOutside(m.Columns, outs)
	}
	log.sum.Warnings = countWarnings(m.Columns)
	manifestPath := arrowio.Join(cfg.Output, ManifestName)
	if err := cfg.checkLock(); err != nil {
		return err
	}
	if err := writeManifest(manifestPath, m, cfg.SkipCommitCheck); err != nil {
		return err
	}
	if err := arrowio.Remove(arrowio.Join(cfg.Output, markerName)); err != nil {
		return err
	}
	verb := "scaled"
	if p.inverted {
		verb = "mapped back"
	}
	fmt.Fprintf(cfg.Out, "%s %d columns in %d files (%d rows) into %s\nmanifest: %s\n",
		verb, len(m.Columns), len(m.Outputs), rows, cfg.Output, manifestPath)
	log.phase("commit", "manifest", manifestPath)
	return nil
}

// writeManifest commits a dataset: it creates path only if nothing is
// there (arrowio.CreateFile), so that of two runs that reach their commit
// at once only one succeeds. The earlier manifest of a dataset being
// replaced was removed by prepareOutput.
//
// With unchecked (--skip-commit-check) a store that cannot carry out the
// conditional create gets a check for an existing manifest and a plain
// write instead (arrowio.CreateFileUnchecked).
func writeManifest(path string, m *manifests.Manifest, unchecked bool) error {
	create := arrowio.CreateFile
	if unchecked {
		create = arrowio.CreateFileUnchecked
	}
	err := create(path, func(w io.Writer) error { return manifests.Encode(w, m) })
	if errors.Is(err, arrowio.ErrExist) {
		return fmt.Errorf("%w: %s appeared while this run was writing: another run committed this output first; nothing of this run is committed: %w", ErrOutputNotEmpty, path, err)
	}
	return err
}

// writeStatistics writes a statistics file (measure, merge), replacing
// an earlier one atomically.
func writeStatistics(path string, m *manifests.Manifest) error {
	return arrowio.WriteFileAtomic(path, func(w io.Writer) error { return manifests.Encode(w, m) })
}
