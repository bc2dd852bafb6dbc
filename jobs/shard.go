package jobs

import (
	"bytes"
	"container/heap"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"regexp"
	"sort"
	"strconv"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// A sharded job runs one measure or apply as n independent processes
// (shards), for example the pods of a Kubernetes indexed Job or the tasks
// of a Slurm job array. Every shard discovers the whole input, computes
// the same assignment of files to shards from the listing (assign), and
// works on its own share only; it leaves a partial result in the work
// folder:
//
//	WORK/measure/shard-IIII-of-NNNN.json  measure: per input, the manifest
//	                                      entry and the exact accumulator
//	                                      state of every column
//	WORK/apply/shard-IIII-of-NNNN.json    apply: per input, the input and
//	                                      output entries and out-of-range
//	                                      counts; the outputs themselves go
//	                                      into the output folder
//
// MergeShards then combines the n measure results exactly (integer
// addition of the states, so the order cannot matter) into the statistics
// file a single measure would write, and CommitShards checks the n apply
// results and the outputs and writes the manifest a single apply would
// write. Both refuse a set of results that is incomplete (a shard
// missing) or inconsistent (a shard of another job, listing or shard
// count). A shard that failed is repaired by running it again: its files
// and its result are deterministic.

// Shard is one share of a sharded job: shard Index of Count (counted from
// 0), and the work folder (a location) the shards leave their results in.
type Shard struct {
	Index, Count int
	Work         string
}

// Environment variables --shard env takes the shard index from, in this
// order of preference.
const (
	EnvJobCompletionIndex = "JOB_COMPLETION_INDEX" // a Kubernetes Job with completionMode Indexed
	EnvSlurmArrayTaskID   = "SLURM_ARRAY_TASK_ID"  // a Slurm job array
)

// ErrShards marks a set of shard results that is incomplete or
// inconsistent, or outputs that do not match them.
var ErrShards = errors.New("sharded run incomplete or inconsistent")

// Folders of the work folder.
const (
	workMeasure = "measure"
	workApply   = "apply"
)

var partialNameRE = regexp.MustCompile(`^shard-([0-9]+)-of-([0-9]+)\.json$`)

// partialName is the file name of shard i of n's result.
func partialName(i, n int) string { return fmt.Sprintf("shard-%04d-of-%04d.json", i, n) }

// ParseShard resolves the --shard, --shards and --work flags. spec is
// "i/n" (shard i of n, 0 <= i < n) or "env", in which case shards (nil
// when --shards was not given) is n and the index comes from
// JOB_COMPLETION_INDEX or else SLURM_ARRAY_TASK_ID, read with getenv.
// Every mistake wraps ErrUsage.
func ParseShard(spec string, shards *int, work string, getenv func(string) string) (Shard, error) {
	usage := func(format string, a ...any) (Shard, error) {
		return Shard{}, fmt.Errorf("%w: %s", ErrUsage, fmt.Sprintf(format, a...))
	}
	var sh Shard
	switch spec {
	case "":
		return usage("--shards and --work go with --shard i/n or --shard env")
	case "env":
		if shards == nil {
			return usage("--shard env needs --shards N, the number of shards")
		}
		if *shards < 1 || *shards > manifests.MaxShards {
			return usage("--shards %d: want 1 to %d", *shards, manifests.MaxShards)
		}
		name, val := EnvJobCompletionIndex, getenv(EnvJobCompletionIndex)
		if val == "" {
			name, val = EnvSlurmArrayTaskID, getenv(EnvSlurmArrayTaskID)
		}
		if val == "" {
			return usage("--shard env: neither %s (Kubernetes indexed Job) nor %s (Slurm job array) is set; give --shard i/n instead",
				EnvJobCompletionIndex, EnvSlurmArrayTaskID)
		}
		i, ok := shardNumber(val)
		if !ok {
			return usage("--shard env: %s=%q is not a shard index (want 0, 1, 2, ...)", name, val)
		}
		if i >= *shards {
			return usage("--shard env: %s=%d is not below --shards %d (shards are numbered from 0)", name, i, *shards)
		}
		sh = Shard{Index: i, Count: *shards}
	default:
		if shards != nil {
			return usage("--shards goes with --shard env; --shard %s carries its count", spec)
		}
		a, b, found := strings.Cut(spec, "/")
		i, okI := shardNumber(a)
		n, okN := shardNumber(b)
		if !found || !okI || !okN || n < 1 || i >= n {
			return usage("--shard %q: want i/n, shard i of n with 0 <= i < n (or env)", spec)
		}
		if n > manifests.MaxShards {
			return usage("--shard %s: at most %d shards", spec, manifests.MaxShards)
		}
		sh = Shard{Index: i, Count: n}
	}
	if work == "" {
		return usage("--shard needs --work DIR, the folder where the shards leave their results")
	}
	sh.Work = work
	return sh, nil
}

// shardNumber parses a decimal shard number (digits only).
func shardNumber(s string) (int, bool) {
	n, err := strconv.ParseUint(s, 10, 31)
	return int(n), err == nil
}

// check validates a Shard built without ParseShard.
func (sh Shard) check() error {
	if sh.Count < 1 || sh.Count > manifests.MaxShards || sh.Index < 0 || sh.Index >= sh.Count {
		return fmt.Errorf("%w: shard %d of %d: want 0 <= i < n <= %d", ErrUsage, sh.Index, sh.Count, manifests.MaxShards)
	}
	if sh.Work == "" {
		return fmt.Errorf("%w: --shard needs --work DIR, the folder where the shards leave their results", ErrUsage)
	}
	if err := arrowio.CheckLocation(sh.Work); err != nil {
		return fmt.Errorf("%w: %w", ErrUsage, err)
	}
	return nil
}

// of marks the files of this shard's share.
func (sh Shard) of(files []arrowio.File) []bool {
	mine := make([]bool, len(files))
	for i, s := range assign(files, sh.Count) {
		mine[i] = s == sh.Index
	}
	return mine
}

// mine reports whether file i is in this run's share.
func (p *plan) mine(i int) bool { return p.share == nil || p.share[i] }

// assign gives every file a shard. It depends only on the files' relative
// paths and sizes, so every shard computes the same assignment: files in
// order of size, largest first (equal sizes by path), each to the shard
// with the fewest bytes so far (equal loads: the lowest index). This is
// the "largest processing time first" list schedule of R. L. Graham,
// "Bounds on multiprocessing timing anomalies", SIAM J. Appl. Math. 17(2),
// 1969; the shards' byte counts differ by at most the largest file.
func assign(files []arrowio.File, n int) []int {
	order := largestFirst(files)
	h := make(shardLoads, n)
	for i := range h {
		h[i].index = i // all zero: already a heap
	}
	owner := make([]int, len(files))
	for _, i := range order {
		owner[i] = h[0].index
		h[0].bytes += files[i].Size
		heap.Fix(&h, 0)
	}
	return owner
}

type shardLoad struct {
	bytes int64
	index int
}

// shardLoads is a min-heap of shards by bytes, then index.
type shardLoads []shardLoad

func (h shardLoads) Len() int { return len(h) }
func (h shardLoads) Less(a, b int) bool {
	if h[a].bytes != h[b].bytes {
		return h[a].bytes < h[b].bytes
	}
	return h[a].index < h[b].index
}
func (h shardLoads) Swap(a, b int) { h[a], h[b] = h[b], h[a] }
func (h *shardLoads) Push(x any)   { *h = append(*h, x.(shardLoad)) }
func (h *shardLoads) Pop() any {
	old := *h
	x := old[len(old)-1]
	*h = old[:len(old)-1]
	return x
}

// listingOf identifies a complete input listing: its file count, total
// size, and the SHA-256 of, for every file in order, its relative path
// (preceded by its length as a uvarint) and its size (8 bytes,
// big-endian). Contents are not read here; each input's own SHA-256 is
// recorded with its entry.
func listingOf(files []arrowio.File) manifests.Listing {
	h := sha256.New()
	l := manifests.Listing{Files: len(files)}
	var b []byte
	for _, f := range files {
		b = binary.AppendUvarint(b[:0], uint64(len(f.Rel)))
		b = append(b, f.Rel...)
		b = binary.BigEndian.AppendUint64(b, uint64(f.Size))
		h.Write(b)
		l.Bytes += f.Size
	}
	l.SHA256 = hex.EncodeToString(h.Sum(nil))
	return l
}

// partialHeader starts a shard's result.
func (c *Config) partialHeader(kind string, job manifests.Job, sh Shard, files []arrowio.File) manifests.PartialHeader {
	return manifests.PartialHeader{
		PartialVersion: manifests.PartialVersion,
		Kind:           kind,
		Tool:           toolInfo(c.Version),
		Job:            job,
		Shard:          manifests.Shard{Index: sh.Index, Count: sh.Count},
		Listing:        listingOf(files),
	}
}

// checkUnchanged fails when an input's size when read differs from its
// size when listed (the assignment and the listing used the latter).
func checkUnchanged(f arrowio.File, read int64) error {
	if read != f.Size {
		return fmt.Errorf("%s: listed with %d bytes, read %d: the input changed while the shard ran", f.Rel, f.Size, read)
	}
	return nil
}

// MeasureShard is one shard of a sharded measure: pass one over the
// inputs of its share, written with every column's exact state into
// WORK/measure/shard-IIII-of-NNNN.json. MergeShards fits the parameters.
func MeasureShard(ctx context.Context, cfg Config, sh Shard) (err error) {
	if err := sh.check(); err != nil {
		return err
	}
	if cfg.StatsPath != "" {
		return fmt.Errorf("%w: a measure shard writes its partial result into --work; give --stats to lakescale merge", ErrUsage)
	}
	path := arrowio.Join(sh.Work, workMeasure, partialName(sh.Index, sh.Count))
	cfg.StatsPath = path // what the metrics name as the output
	log, end, err := begin(&cfg, "measure", false)
	if err != nil {
		return err
	}
	defer func() { err = end(err) }()
	p, results, err := measureFiles(ctx, &cfg, "", log, &sh)
	if err != nil {
		return err
	}
	s := cfg.settings()
	part := manifests.MeasurePartial{
		PartialHeader: cfg.partialHeader(manifests.KindMeasureShard, manifests.Job{Settings: s, SHA256: s.Digest()}, sh, p.Files),
		Columns:       make([]manifests.MeasuredColumn, len(p.Columns)),
		Files:         []manifests.MeasuredFile{},
	}
	for j, c := range p.Columns {
		o := c.Rule.Options
		part.Columns[j] = manifests.MeasuredColumn{Name: c.Name, Type: c.Type.String(), Method: string(c.Rule.Method),
			Std: string(o.Std), RangeMin: manifests.Float(o.RangeMin), RangeMax: manifests.Float(o.RangeMax)}
	}
	for i, f := range p.Files {
		if !p.mine(i) {
			continue
		}
		if err := checkUnchanged(f, results[i].Bytes); err != nil {
			return err
		}
		mf := manifests.MeasuredFile{Input: p.input(i, results[i])}
		if p.fits(i) {
			for j, a := range results[i].Accs {
				state, err := a.MarshalBinary()
				if err != nil {
					return fmt.Errorf("%s: column %s: %w", f.Rel, p.Columns[j].Name, err)
				}
				mf.States = append(mf.States, state)
			}
		}
		part.Files = append(part.Files, mf)
	}
	if err := p.saveCache(ctx, &cfg, results, log); err != nil {
		return err
	}
	if err := arrowio.WriteFileAtomic(path, func(w io.Writer) error { return manifests.EncodeMeasurePartial(w, &part) }); err != nil {
		return err
	}
	log.phase("shard", "shard", sh.Index, "shards", sh.Count, "files", len(part.Files), "result", path)
	fmt.Fprintf(cfg.Out, "measure shard %d of %d: measured %d of %d files; partial result in %s\n",
		sh.Index, sh.Count, len(part.Files), len(p.Files), path)
	return nil
}

// ApplyShard is one shard of a sharded apply: pass two over the inputs
// of its share, into the output folder, and the list of what it wrote in
// WORK/apply/shard-IIII-of-NNNN.json. It takes no lock (the shards run at
// once) and never writes the manifest: CommitShards does.
func ApplyShard(ctx context.Context, cfg Config, sh Shard) (err error) {
	if err := sh.check(); err != nil {
		return err
	}
	if cfg.Overwrite {
		return fmt.Errorf("%w: --overwrite: a sharded apply writes into a fresh output and never replaces a committed dataset", ErrUsage)
	}
	log, end, err := begin(&cfg, "apply", false, cfg.ParamsPath, "--params")
	if err != nil {
		return err
	}
	defer func() { err = end(err) }()
	if err := cfg.checkPaths(true); err != nil {
		return err
	}
	p, params, m, err := applyPlan(&cfg)
	if err != nil {
		return err
	}
	p.share = sh.of(p.Files)
	if err := openShardOutput(&cfg); err != nil {
		return err
	}
	outs, err := passTwo(ctx, &cfg, p, params, fileMeta(m), nil)
	if err != nil {
		return err
	}
	part := manifests.ApplyPartial{
		PartialHeader: cfg.partialHeader(manifests.KindApplyShard, m.Job, sh, p.Files),
		ParamsSource:  *m.ParamsSource,
		Columns:       m.Columns,
		Files:         []manifests.AppliedFile{},
	}
	var mine []written
	var rows int64
	for i, f := range p.Files {
		if !p.mine(i) {
			continue
		}
		o := outs[i]
		if err := checkUnchanged(f, o.In.Bytes); err != nil {
			return err
		}
		mine = append(mine, o)
		rows += o.In.Rows
		part.Files = append(part.Files, manifests.AppliedFile{
			Input:      p.input(i, o.In),
			Output:     manifests.Output{Path: f.Rel, Rows: o.Out.Rows, Bytes: o.Out.Bytes, SHA256: o.Out.SHA256},
			OutOfRange: o.Outside,
		})
	}
	log.passTwo(mine)
	log.inputsOf(mine)
	path := arrowio.Join(sh.Work, workApply, partialName(sh.Index, sh.Count))
	if err := arrowio.WriteFileAtomic(path, func(w io.Writer) error { return manifests.EncodeApplyPartial(w, &part) }); err != nil {
		return err
	}
	log.phase("shard", "shard", sh.Index, "shards", sh.Count, "files", len(part.Files), "result", path)
	fmt.Fprintf(cfg.Out, "apply shard %d of %d: scaled %d columns in %d of %d files (%d rows) into %s; list in %s\n",
		sh.Index, sh.Count, len(m.Columns), len(part.Files), len(p.Files), rows, cfg.Output, path)
	return nil
}

// openShardOutput readies the output folder for one apply shard without
// the lock: it refuses a committed dataset and a folder lakescale did not
// write, and marks the folder uncommitted unless another shard (or an
// earlier run) already did. Other shards' files are left alone.
func openShardOutput(cfg *Config) error {
	state, foreign, sharded, err := outputStateMarker(cfg.Output)
	if err != nil {
		return err
	}
	switch state {
	case outCommitted:
		return fmt.Errorf("%w: %s holds a committed dataset (%s); a sharded apply writes into a fresh output: give another --output", ErrOutputNotEmpty, cfg.Output, ManifestName)
	case outForeign:
		return fmt.Errorf("%w: %s holds %s but no %s marker, so lakescale did not write it; want an absent or empty directory, or the output of this sharded apply", ErrOutputNotEmpty, cfg.Output, foreign, markerName)
	}
	// Shards share the output with each other, not with a run or commit
	// holding its lock (a run in pass one has not written its marker yet).
	lock := arrowio.Join(cfg.Output, lockName)
	h, err := arrowio.HeldLock(lock, cfg.Now())
	if err != nil {
		return err
	}
	if h != nil {
		holder := "an unreadable lock file"
		if h.PID != 0 {
			holder = fmt.Sprintf("pid %d on host %s since %s", h.PID, h.Host, h.Started)
		}
		return fmt.Errorf("%w: %s is locked by %s (%s): a sharded apply does not write into an output that a run, commit or clean is working on; wait for it, or for its lease to end if it died",
			ErrOutputNotEmpty, cfg.Output, holder, lock)
	}
	if state == outUncommitted && !sharded {
		return fmt.Errorf("%w: %s holds the uncommitted files of a run that stopped, not of a sharded apply; remove them with lakescale clean first", ErrOutputNotEmpty, cfg.Output)
	}
	// Commit will need the store to refuse a second create; find out now,
	// before the shards do all their work (and only once the output is
	// known to be this sharded apply's to write).
	if err := checkCommitSupport(cfg); err != nil {
		return err
	}
	if state == outUncommitted {
		return nil
	}
	if err := arrowio.MkdirAll(cfg.Output); err != nil {
		return err
	}
	return writeMarker(cfg, markerSharded, "lakescale commit writes "+ManifestName)
}

// readPartials reads the results in dir (WORK/measure or WORK/apply) and
// checks that they are one complete set: results of the same shard
// count, each index exactly once, under its own name, all of the same job
// and input listing. It returns them, and their locations, by index.
func readPartials[T any](dir, command string, decode func(io.Reader) (*T, error), head func(*T) *manifests.PartialHeader) ([]*T, []string, error) {
	listed, _, err := arrowio.ListDir(dir)
	if err != nil {
		return nil, nil, err
	}
	var docs []*T
	var paths []string
	var names []string
	for _, name := range listed {
		if !partialNameRE.MatchString(name) {
			continue
		}
		path := arrowio.Join(dir, name)
		raw, err := arrowio.ReadFile(path)
		if err != nil {
			return nil, nil, err
		}
		d, err := decode(bytes.NewReader(raw))
		if err != nil {
			return nil, nil, fmt.Errorf("%s: %w", path, err)
		}
		docs = append(docs, d)
		paths = append(paths, path)
		names = append(names, name)
	}
	if len(docs) == 0 {
		return nil, nil, fmt.Errorf("%w: %s holds no shard results (shard-IIII-of-NNNN.json); run lakescale %s --shard i/n --work DIR for every shard first",
			ErrShards, dir, command)
	}
	n := head(docs[0]).Shard.Count
	for k, d := range docs {
		if c := head(d).Shard.Count; c != n {
			return nil, nil, fmt.Errorf("%w: %s is a result of %d shards, %s of %d: the work folder mixes runs; remove the results of the other run",
				ErrShards, paths[0], n, paths[k], c)
		}
	}
	// Results by index; a map, as n comes from the documents.
	byIndex := map[int][]int{}
	for k, d := range docs {
		i := head(d).Shard.Index
		byIndex[i] = append(byIndex[i], k)
	}
	var problems []string
	present := make([]int, 0, len(byIndex))
	for i := range byIndex {
		present = append(present, i)
	}
	sort.Ints(present)
	for _, i := range present {
		if ks := byIndex[i]; len(ks) > 1 {
			var where []string
			for _, k := range ks {
				where = append(where, paths[k])
			}
			problems = append(problems, fmt.Sprintf("%s shard %d of %d is present %d times (%s)", command, i, n, len(ks), strings.Join(where, ", ")))
		}
	}
	if absent := n - len(byIndex); absent > 0 {
		const named = 20
		var missing []string
		for i := 0; i < n && len(missing) < named; i++ {
			if len(byIndex[i]) == 0 {
				missing = append(missing, strconv.Itoa(i))
			}
		}
		s, list := "", strings.Join(missing, ", ")
		if absent > 1 {
			s = "s"
		}
		if absent > len(missing) {
			list += fmt.Sprintf(" and %d more", absent-len(missing))
		}
		problems = append(problems, fmt.Sprintf("%s shard%s %s of %d missing", command, s, list, n))
	}
	if len(problems) > 0 {
		return nil, nil, fmt.Errorf("%w: %s: %s", ErrShards, dir, strings.Join(problems, "; "))
	}
	outDocs, outPaths := make([]*T, n), make([]string, n)
	for i := range n {
		ks := byIndex[i]
		outDocs[i], outPaths[i] = docs[ks[0]], paths[ks[0]]
		// Names and contents must agree, so that a result copied over
		// another shard's name is caught.
		if names[ks[0]] != partialName(i, n) {
			return nil, nil, fmt.Errorf("%w: %s holds shard %d of %d, not the shard its name says", ErrShards, outPaths[i], i, n)
		}
	}
	first := head(outDocs[0])
	for i := 1; i < n; i++ {
		h := head(outDocs[i])
		if h.Job.SHA256 != first.Job.SHA256 {
			return nil, nil, fmt.Errorf("%w: %s: job settings (sha256 %.12s) differ from those of %s (sha256 %.12s); every shard must run the same job",
				ErrShards, outPaths[i], h.Job.SHA256, outPaths[0], first.Job.SHA256)
		}
		if !sameTool(h.Tool, first.Tool) {
			return nil, nil, fmt.Errorf("%w: %s was written by %s, %s by %s; run every shard with the same build",
				ErrShards, outPaths[i], toolName(h.Tool), outPaths[0], toolName(first.Tool))
		}
		if h.Listing != first.Listing {
			return nil, nil, fmt.Errorf("%w: %s saw an input listing of %d files, %d bytes (sha256 %.12s), %s one of %d files, %d bytes (sha256 %.12s); every shard must see the same input",
				ErrShards, outPaths[i], h.Listing.Files, h.Listing.Bytes, h.Listing.SHA256, outPaths[0], first.Listing.Files, first.Listing.Bytes, first.Listing.SHA256)
		}
	}
	return outDocs, outPaths, nil
}

// shardInput is one input as a shard result lists it.
type shardInput struct {
	in    manifests.Input
	shard int // index of the result that lists it
	k     int // position in that result's list
}

// gatherInputs checks that the shards' inputs are exactly the listing
// they were assigned from, each in the shard the assignment gives it,
// and returns them in path order (the order of a single-process run).
func gatherInputs(paths []string, listing manifests.Listing, lists [][]manifests.Input) ([]shardInput, error) {
	var all []shardInput
	where := map[string]int{}
	for s, list := range lists {
		for k, in := range list {
			if t, dup := where[in.Path]; dup {
				return nil, fmt.Errorf("%w: input %s is in both %s and %s", ErrShards, in.Path, paths[t], paths[s])
			}
			where[in.Path] = s
			all = append(all, shardInput{in: in, shard: s, k: k})
		}
	}
	sort.Slice(all, func(a, b int) bool { return all[a].in.Path < all[b].in.Path })
	files := make([]arrowio.File, len(all))
	for i, x := range all {
		files[i] = arrowio.File{Rel: x.in.Path, Size: x.in.Bytes}
	}
	if got := listingOf(files); got != listing {
		return nil, fmt.Errorf("%w: the shards list %d inputs of %d bytes in all, not the listing they were assigned from (%d files, %d bytes, sha256 %.12s); an input changed while they ran, or a result was edited",
			ErrShards, got.Files, got.Bytes, listing.Files, listing.Bytes, listing.SHA256)
	}
	for i, s := range assign(files, len(lists)) {
		if s != all[i].shard {
			return nil, fmt.Errorf("%w: input %s is in %s, but the assignment gives it to shard %d", ErrShards, files[i].Rel, paths[all[i].shard], s)
		}
	}
	return all, nil
}

// numericType is the Arrow type of a selected column from its name.
func numericType(name string) (arrow.DataType, bool) {
	for _, t := range []arrow.DataType{
		arrow.PrimitiveTypes.Int8, arrow.PrimitiveTypes.Int16, arrow.PrimitiveTypes.Int32, arrow.PrimitiveTypes.Int64,
		arrow.PrimitiveTypes.Uint8, arrow.PrimitiveTypes.Uint16, arrow.PrimitiveTypes.Uint32, arrow.PrimitiveTypes.Uint64,
		arrow.PrimitiveTypes.Float32, arrow.PrimitiveTypes.Float64,
	} {
		if t.String() == name {
			return t, true
		}
	}
	return nil, false
}

// shardColumns rebuilds the plan's columns from a measure result.
func shardColumns(path string, mcs []manifests.MeasuredColumn) ([]column, error) {
	cols := make([]column, len(mcs))
	for j, mc := range mcs {
		t, ok := numericType(mc.Type)
		if !ok {
			return nil, fmt.Errorf("%s: column %s: type %q is not an integer or float type", path, mc.Name, mc.Type)
		}
		kind, _ := stats.KindOf(t)
		method, err := stats.ParseMethod(mc.Method)
		if err != nil {
			return nil, fmt.Errorf("%s: column %s: %w", path, mc.Name, err)
		}
		opts := stats.Options{RangeMin: float64(mc.RangeMin), RangeMax: float64(mc.RangeMax)}
		if mc.Std != "" {
			if opts.Std, err = stats.ParseStdKind(mc.Std); err != nil {
				return nil, fmt.Errorf("%s: column %s: %w", path, mc.Name, err)
			}
		}
		cols[j] = column{Name: mc.Name, Type: t, Kind: kind, Rule: Rule{Method: method, Options: opts}}
	}
	return cols, nil
}

// MergeShards reads the n results of a sharded measure from
// WORK/measure, merges every input's states exactly in path order, fits
// the parameters and writes cfg.StatsPath: the statistics file a single
// measure of the same job would write, apart from created_at. The inputs
// are not read again.
func MergeShards(ctx context.Context, cfg Config, work string) (err error) {
	if work == "" {
		return fmt.Errorf("%w: merge needs --work DIR", ErrUsage)
	}
	if cfg.StatsPath == "" {
		return fmt.Errorf("%w: merge needs --stats", ErrUsage)
	}
	if err := cfg.checkLocations(work); err != nil {
		return err
	}
	log, err := newRunLog(&cfg, "merge")
	if err != nil {
		return err
	}
	defer func() { err = log.done(err) }()
	dir := arrowio.Join(work, workMeasure)
	parts, paths, err := readPartials(dir, "measure", manifests.DecodeMeasurePartial,
		func(p *manifests.MeasurePartial) *manifests.PartialHeader { return &p.PartialHeader })
	if err != nil {
		return err
	}
	if err := cfg.sameBuild(parts[0].Tool, paths[0]); err != nil {
		return err
	}
	first := parts[0]
	lists := make([][]manifests.Input, len(parts))
	for s, part := range parts {
		if !sameJSON(part.Columns, first.Columns) {
			return fmt.Errorf("%w: %s selected other columns than %s", ErrShards, paths[s], paths[0])
		}
		for _, f := range part.Files {
			lists[s] = append(lists[s], f.Input)
		}
	}
	all, err := gatherInputs(paths, first.Listing, lists)
	if err != nil {
		return err
	}
	cols, err := shardColumns(paths[0], first.Columns)
	if err != nil {
		return err
	}
	p := &plan{Files: make([]arrowio.File, len(all)), Columns: cols}
	if first.Job.Settings.Fit != "" {
		p.Fit = make([]bool, len(all))
	}
	results := make([]fileResult, len(all))
	for i, x := range all {
		if err := context.Cause(ctx); err != nil {
			return err
		}
		p.Files[i] = arrowio.File{Rel: x.in.Path, Size: x.in.Bytes}
		if p.Fit != nil {
			p.Fit[i] = *x.in.Fit
		}
		res := fileResult{Rows: x.in.Rows, Bytes: x.in.Bytes, SHA256: x.in.SHA256}
		for j, state := range parts[x.shard].Files[x.k].States {
			a := new(stats.Accumulator)
			if err := a.UnmarshalBinary(state); err != nil {
				return fmt.Errorf("%s: input %s: column %s: %w", paths[x.shard], x.in.Path, cols[j].Name, err)
			}
			if a.Kind() != cols[j].Kind {
				return fmt.Errorf("%s: input %s: column %s: a state of kind %s for a %s column", paths[x.shard], x.in.Path, cols[j].Name, a.Kind(), cols[j].Type)
			}
			res.Accs = append(res.Accs, a)
		}
		log.sum.Rows += res.Rows
		log.sum.Bytes += res.Bytes
		results[i] = res
	}
	log.phase("merge", "shards", len(parts), "files", len(all))
	mcols, _, err := fitColumns(p, results)
	if err != nil {
		return err
	}
	log.phase("fit", "columns", len(mcols))
	m := cfg.newManifest(manifests.KindStatistics, mcols)
	m.Job = first.Job
	for _, x := range all {
		m.Inputs = append(m.Inputs, x.in)
	}
	log.sum.Warnings = countWarnings(m.Columns)
	if err := writeStatistics(cfg.StatsPath, m); err != nil {
		return err
	}
	fmt.Fprintf(cfg.Out, "merged %d measure shards: %d columns over %d of %d files; statistics in %s\n",
		len(parts), len(mcols), p.fittedCount(), len(p.Files), cfg.StatsPath)
	return nil
}

// CommitShards commits a sharded apply: it reads the n lists from
// WORK/apply, checks that they are complete and consistent and that every
// listed output is in the output folder with its recorded size (and, in
// the commit, row count), and writes the manifest a single apply of the
// same job would write, apart from created_at. It holds the output's lock
// while it does so. Nothing in the output is removed but the uncommitted
// marker and temporary files.
func CommitShards(ctx context.Context, cfg Config, work string) (err error) {
	if work == "" {
		return fmt.Errorf("%w: commit needs --work DIR", ErrUsage)
	}
	if cfg.Output == "" {
		return fmt.Errorf("%w: commit needs --output DIR", ErrUsage)
	}
	if err := cfg.checkLocations(work); err != nil {
		return err
	}
	// The lists name the input, which begin checks the output against;
	// until then failures go to a log of their own.
	pre, err := newRunLog(&cfg, "commit")
	if err != nil {
		return err
	}
	parts, paths, err := readApplyPartials(&cfg, work)
	if err != nil {
		return pre.done(err)
	}
	if done, err := committedAlready(&cfg, parts); done || err != nil {
		return pre.done(err)
	}
	first := parts[0]
	cfg.Input = first.Job.Settings.Input
	cfg.committingShards = true
	ctx, cfg.stop = context.WithCancelCause(ctx)
	defer cfg.stop(nil)
	log, end, err := begin(&cfg, "commit", true)
	if err != nil {
		return err
	}
	defer func() { err = end(err) }()
	lists := make([][]manifests.Input, len(parts))
	for s, part := range parts {
		if part.ParamsSource != first.ParamsSource {
			return fmt.Errorf("%w: %s applied parameters from %s (sha256 %.12s), %s from %s (sha256 %.12s); every shard must apply the same parameters",
				ErrShards, paths[s], part.ParamsSource.Path, part.ParamsSource.SHA256, paths[0], first.ParamsSource.Path, first.ParamsSource.SHA256)
		}
		if !sameJSON(part.Columns, first.Columns) {
			return fmt.Errorf("%w: %s applied other columns than %s", ErrShards, paths[s], paths[0])
		}
		for _, f := range part.Files {
			lists[s] = append(lists[s], f.Input)
		}
	}
	all, err := gatherInputs(paths, first.Listing, lists)
	if err != nil {
		return err
	}
	p := &plan{Files: make([]arrowio.File, len(all)), bounds: boundsOf(first.Columns)}
	outs := make([]written, len(all))
	for i, x := range all {
		f := parts[x.shard].Files[x.k]
		kvs := make([]arrowio.KV, 0, len(f.Input.Partition))
		for k, v := range f.Input.Partition {
			kvs = append(kvs, arrowio.KV{Key: k, Value: v})
		}
		p.Files[i] = arrowio.File{Rel: f.Input.Path, Partition: kvs, Size: f.Input.Bytes}
		outs[i] = written{
			In:      fileResult{Rows: f.Input.Rows, Bytes: f.Input.Bytes, SHA256: f.Input.SHA256},
			Out:     arrowio.Written{Rows: f.Output.Rows, Bytes: f.Output.Bytes, SHA256: f.Output.SHA256},
			Outside: f.OutOfRange,
		}
		log.sum.Rows += f.Input.Rows
		log.sum.Bytes += f.Input.Bytes
		log.sum.FilesWritten++
		log.sum.BytesWritten += f.Output.Bytes
	}
	if err := checkShardOutputs(&cfg, paths, parts, all); err != nil {
		return err
	}
	if err := cfg.checkLock(); err != nil {
		return err
	}
	if _, err := arrowio.RemoveTemps(cfg.Output); err != nil {
		return err
	}
	m := cfg.newManifest(manifests.KindDataset, first.Columns)
	m.Job = first.Job
	src := first.ParamsSource
	m.ParamsSource = &src
	return p.commit(ctx, &cfg, m, outs, log)
}

// readApplyPartials reads the apply results and checks that they belong
// to this output and that it is not committed yet.
func readApplyPartials(cfg *Config, work string) ([]*manifests.ApplyPartial, []string, error) {
	parts, paths, err := readPartials(arrowio.Join(work, workApply), "apply", manifests.DecodeApplyPartial,
		func(p *manifests.ApplyPartial) *manifests.PartialHeader { return &p.PartialHeader })
	if err != nil {
		return nil, nil, err
	}
	if err := cfg.sameBuild(parts[0].Tool, paths[0]); err != nil {
		return nil, nil, err
	}
	if got, want := parts[0].Job.Settings.Output, cfg.settings().Output; got != want {
		return nil, nil, fmt.Errorf("%w: %s: the shards wrote into %s, not %s", ErrShards, paths[0], got, cfg.Output)
	}
	return parts, paths, nil
}

// checkShardOutputs checks that every listed output is in the output
// folder with its recorded size, and that the folder holds no other
// Parquet file (which the committed dataset would not account for).
func checkShardOutputs(cfg *Config, paths []string, parts []*manifests.ApplyPartial, all []shardInput) error {
	found, err := arrowio.Discover(cfg.Output)
	if err != nil && !errors.Is(err, arrowio.ErrNoInputs) {
		return err
	}
	size := make(map[string]int64, len(found))
	for _, f := range found {
		size[f.Rel] = f.Size
	}
	for _, x := range all {
		o := parts[x.shard].Files[x.k].Output
		n, ok := size[o.Path]
		switch {
		case !ok:
			return fmt.Errorf("%w: %s is missing, though %s lists it; run that shard again", ErrShards, arrowio.Join(cfg.Output, o.Path), paths[x.shard])
		case n != o.Bytes:
			return fmt.Errorf("%w: %s has %d bytes, %s recorded %d; run that shard again", ErrShards, arrowio.Join(cfg.Output, o.Path), n, paths[x.shard], o.Bytes)
		}
		delete(size, o.Path)
	}
	if len(size) > 0 {
		var extra []string
		for rel := range size {
			extra = append(extra, rel)
		}
		sort.Strings(extra)
		return fmt.Errorf("%w: %s holds %s, which no apply shard listed; remove what this run did not write, or apply into a fresh output",
			ErrShards, cfg.Output, strings.Join(extra, ", "))
	}
	return nil
}

// sameTool reports whether two tool records name the same build.
func sameTool(a, b manifests.Tool) bool {
	return a.Name == b.Name && a.Version == b.Version && a.VCSRevision == b.VCSRevision && a.GoVersion == b.GoVersion
}

// toolName renders a tool record for messages.
func toolName(t manifests.Tool) string {
	s := t.Name + " " + t.Version
	if t.VCSRevision != "" {
		s += " (" + t.VCSRevision + ")"
	}
	return s + " " + t.GoVersion
}

// sameBuild checks that the shards (whose result at path recorded t) ran
// the build that merges or commits them, which the statistics file or
// manifest names as the tool.
func (c *Config) sameBuild(t manifests.Tool, path string) error {
	if me := toolInfo(c.Version); !sameTool(t, me) {
		return fmt.Errorf("%w: %s was written by %s, this is %s; merge and commit with the build the shards ran", ErrShards, path, toolName(t), toolName(me))
	}
	return nil
}

// committedAlready handles an output whose manifest exists. When it is the
// manifest these shard lists commit (same job, parameters and outputs,
// byte for byte by SHA-256), commit did its work before, perhaps in a pod
// killed before it could report: done, without an error, so that a
// scheduler's retry succeeds. Any other manifest is refused.
func committedAlready(cfg *Config, parts []*manifests.ApplyPartial) (bool, error) {
	path := arrowio.Join(cfg.Output, ManifestName)
	ok, err := arrowio.Exists(path)
	if err != nil || !ok {
		return false, err
	}
	refuse := fmt.Errorf("%w: %s is committed already (%s exists) by another run than these shards'", ErrOutputNotEmpty, cfg.Output, ManifestName)
	m, _, err := readManifest(path)
	if err != nil {
		return false, refuse
	}
	first := parts[0]
	if m.Job.SHA256 != first.Job.SHA256 || m.ParamsSource == nil || *m.ParamsSource != first.ParamsSource {
		return false, refuse
	}
	want := map[string]manifests.Output{}
	for _, part := range parts {
		for _, f := range part.Files {
			want[f.Output.Path] = f.Output
		}
	}
	if len(m.Outputs) != len(want) {
		return false, refuse
	}
	for _, o := range m.Outputs {
		if w, ok := want[o.Path]; !ok || w != o {
			return false, refuse
		}
	}
	// A commit killed after its manifest left the sharded marker; it goes
	// now. (A run's marker beside the manifest belongs to a run replacing
	// the dataset, and stays.)
	marker := arrowio.Join(cfg.Output, markerName)
	if b, err := arrowio.ReadFile(marker); err == nil && bytes.HasPrefix(b, []byte(markerSharded)) {
		if err := arrowio.Remove(marker); err != nil {
			return false, err
		}
	}
	fmt.Fprintf(cfg.Out, "already committed: %s lists exactly the outputs of these shards\n", path)
	return true, nil
}
