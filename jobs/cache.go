package jobs

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"path"
	"strings"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/stats"
)

// The statistics cache keeps each input file's pass-one result, the
// canonical encoded accumulator state of every selected column, in one
// small file per input, so that a nightly run measures only new or
// changed files and merges the rest exactly (stats.Accumulator.Merge is
// exact, so the merged result is bit-identical to a full recompute).
//
// An entry is keyed by the file's relative path, size, modification time
// and the SHA-256 of its Parquet footer, and it records the selected
// columns' names and types. An entry that does not match all of them is
// stale; one that cannot be decoded, fails its checksum or belongs to
// another path is corrupt. Either way the file is measured again and the
// entry rewritten: an entry is never trusted on less than a full match.
//
// Entry layout (integers big-endian, strings and byte blocks preceded by
// their length as a uvarint):
//
//	magic "LSSTATS" and format version (1 byte)
//	relative path
//	size, modification time in ns since 1970 (int64 each)
//	footer SHA-256, file SHA-256 (32 bytes each)
//	rows (int64)
//	column count (uvarint), then per column: name, type, encoded state
//	SHA-256 of every byte before it (32 bytes)
const (
	cacheDirName  = "_cache" // default cache folder inside the output
	cacheExt      = ".stats"
	cacheMagic    = "LSSTATS"
	cacheVersion  = 1
	cacheMaxEntry = 64 << 20 // far above any real entry; larger is corrupt
)

// statsCache is a folder of cache entries. A nil *statsCache caches
// nothing.
type statsCache struct {
	dir   string
	trust bool // false with --no-cache: every file is measured, entries rewritten
}

// cacheState says what the cache had for a file.
type cacheState uint8

const (
	cacheOff     cacheState = iota // no cache in use
	cacheHit                       // a valid entry was used
	cacheMissing                   // no entry (a new file, or --no-cache)
	cacheStale                     // an entry for an older version of the file
	cacheCorrupt                   // an entry that failed to decode or belongs elsewhere
)

// fileSource says how pass one got a file's result.
type fileSource uint8

const (
	sourceMeasured  fileSource = iota // read and measured
	sourceCached                      // taken from the cache
	sourceDescribed                   // not selected by --fit: rows and hash only
	sourceElsewhere                   // another shard's file: not read here
)

// origin is where a fileResult came from, for the log and the cache.
type origin struct {
	Source fileSource
	Cache  cacheState
	Footer string // footer checksum (the cache key; run's pass two checks it)
}

// openCache returns the cache a command uses: dir when given, else
// def (which may be empty for none).
func openCache(cfg *Config, def string) (*statsCache, error) {
	dir := cfg.CacheDir
	if dir == "" {
		dir = def
	}
	if dir == "" {
		return nil, nil
	}
	in, err := arrowio.ResolvePath(cfg.Input)
	if err != nil {
		return nil, err
	}
	abs, err := arrowio.ResolvePath(dir)
	if err != nil {
		return nil, err
	}
	if within(abs, in) {
		return nil, fmt.Errorf("%w: cache %s is inside input %s; inputs are never written", ErrUsage, dir, cfg.Input)
	}
	return &statsCache{dir: dir, trust: !cfg.NoCache}, nil
}

// entryPath is the entry file of an input, named by a hash of its
// relative path so that any path gives a short, safe name.
func (c *statsCache) entryPath(rel string) string {
	sum := sha256.Sum256([]byte(rel))
	return arrowio.Join(c.dir, hex.EncodeToString(sum[:])+cacheExt)
}

// cacheKey is everything an entry must match to be used.
type cacheKey struct {
	Rel       string
	Size      int64
	ModTimeNS int64
	Footer    [32]byte
	Columns   []column
}

func keyOf(p *plan, i int, footer string) (cacheKey, error) {
	f := p.Files[i]
	k := cacheKey{Rel: f.Rel, Size: f.Size, ModTimeNS: f.ModTime.UnixNano(), Columns: p.Columns}
	b, err := hex.DecodeString(footer)
	if err != nil || len(b) != len(k.Footer) {
		return cacheKey{}, fmt.Errorf("%s: footer checksum %q is not SHA-256 hex", f.Rel, footer)
	}
	copy(k.Footer[:], b)
	return k, nil
}

// lookup returns the cached result for a file, or the reason there is none.
func (c *statsCache) lookup(k cacheKey) (fileResult, cacheState) {
	if c == nil {
		return fileResult{}, cacheOff
	}
	if !c.trust {
		return fileResult{}, cacheMissing
	}
	path := c.entryPath(k.Rel)
	ok, err := arrowio.Exists(path)
	if err != nil || !ok {
		return fileResult{}, cacheMissing
	}
	data, err := arrowio.ReadFile(path)
	if err != nil {
		return fileResult{}, cacheCorrupt
	}
	res, state := decodeEntry(data, k)
	return res, state
}

// store writes a file's measured result as its entry.
func (c *statsCache) store(k cacheKey, res fileResult) error {
	if c == nil {
		return nil
	}
	data, err := encodeEntry(k, res)
	if err != nil {
		return fmt.Errorf("cache entry for %s: %w", k.Rel, err)
	}
	return arrowio.WriteFileAtomic(c.entryPath(k.Rel), func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	})
}

// prune removes the entries of files that are no longer inputs and
// reports how many it removed. Only names the cache writes are touched.
func (c *statsCache) prune(files []arrowio.File) (int, error) {
	if c == nil {
		return 0, nil
	}
	names, _, err := arrowio.ListDir(c.dir)
	if err != nil {
		return 0, err
	}
	keep := make(map[string]bool, len(files))
	for _, f := range files {
		keep[path.Base(c.entryPath(f.Rel))] = true
	}
	n := 0
	for _, name := range names {
		if !strings.HasSuffix(name, cacheExt) || keep[name] || !isEntryName(name) {
			continue
		}
		if err := arrowio.Remove(arrowio.Join(c.dir, name)); err != nil {
			return n, err
		}
		n++
	}
	return n, nil
}

func isEntryName(name string) bool {
	h := strings.TrimSuffix(name, cacheExt)
	_, err := hex.DecodeString(h)
	return len(h) == 2*sha256.Size && err == nil
}

func appendBytes(b, s []byte) []byte {
	b = binary.AppendUvarint(b, uint64(len(s)))
	return append(b, s...)
}

func encodeEntry(k cacheKey, res fileResult) ([]byte, error) {
	if len(res.Accs) != len(k.Columns) {
		return nil, fmt.Errorf("%d states for %d columns", len(res.Accs), len(k.Columns))
	}
	fileSum, err := hex.DecodeString(res.SHA256)
	if err != nil || len(fileSum) != sha256.Size {
		return nil, fmt.Errorf("file sha256 %q is not SHA-256 hex", res.SHA256)
	}
	b := append([]byte(cacheMagic), cacheVersion)
	b = appendBytes(b, []byte(k.Rel))
	b = binary.BigEndian.AppendUint64(b, uint64(k.Size))
	b = binary.BigEndian.AppendUint64(b, uint64(k.ModTimeNS))
	b = append(b, k.Footer[:]...)
	b = append(b, fileSum...)
	b = binary.BigEndian.AppendUint64(b, uint64(res.Rows))
	b = binary.AppendUvarint(b, uint64(len(k.Columns)))
	for j, c := range k.Columns {
		state, err := res.Accs[j].MarshalBinary()
		if err != nil {
			return nil, fmt.Errorf("column %s: %w", c.Name, err)
		}
		b = appendBytes(b, []byte(c.Name))
		b = appendBytes(b, []byte(c.Type.String()))
		b = appendBytes(b, state)
	}
	sum := sha256.Sum256(b)
	return append(b, sum[:]...), nil
}

// errEntry marks an entry that cannot be decoded.
var errEntry = errors.New("malformed cache entry")

// entryReader reads the fields of an entry, failing with errEntry.
type entryReader struct {
	b   []byte
	err error
}

func (r *entryReader) bytes(n int) []byte {
	if r.err != nil || n < 0 || n > len(r.b) {
		r.err = errEntry
		return nil
	}
	out := r.b[:n]
	r.b = r.b[n:]
	return out
}

func (r *entryReader) uvarint() uint64 {
	if r.err != nil {
		return 0
	}
	v, n := binary.Uvarint(r.b)
	if n <= 0 {
		r.err = errEntry
		return 0
	}
	r.b = r.b[n:]
	return v
}

func (r *entryReader) block() []byte {
	n := r.uvarint()
	if n > uint64(len(r.b)) {
		r.err = errEntry
		return nil
	}
	return r.bytes(int(n))
}

func (r *entryReader) int64() int64 {
	b := r.bytes(8)
	if b == nil {
		return 0
	}
	return int64(binary.BigEndian.Uint64(b))
}

// decodeEntry checks an entry against the key and returns its result.
func decodeEntry(data []byte, k cacheKey) (fileResult, cacheState) {
	if len(data) < len(cacheMagic)+1+sha256.Size || len(data) > cacheMaxEntry {
		return fileResult{}, cacheCorrupt
	}
	body, trailer := data[:len(data)-sha256.Size], data[len(data)-sha256.Size:]
	if sum := sha256.Sum256(body); !bytes.Equal(sum[:], trailer) {
		return fileResult{}, cacheCorrupt
	}
	r := &entryReader{b: body}
	if hdr := r.bytes(len(cacheMagic) + 1); r.err != nil || string(hdr) != cacheMagic+string(rune(cacheVersion)) {
		return fileResult{}, cacheCorrupt
	}
	if string(r.block()) != k.Rel {
		return fileResult{}, cacheCorrupt // another file's entry
	}
	size, mtime := r.int64(), r.int64()
	footer := r.bytes(sha256.Size)
	fileSum := r.bytes(sha256.Size)
	rows := r.int64()
	ncols := r.uvarint()
	if r.err != nil || ncols > uint64(len(r.b)) {
		return fileResult{}, cacheCorrupt
	}
	type col struct{ name, typ, state []byte }
	cols := make([]col, ncols)
	for j := range cols {
		cols[j] = col{r.block(), r.block(), r.block()}
	}
	if r.err != nil || len(r.b) != 0 || rows < 0 {
		return fileResult{}, cacheCorrupt
	}
	// The entry is well formed; now does it describe this file and job?
	if size != k.Size || mtime != k.ModTimeNS || !bytes.Equal(footer, k.Footer[:]) || len(cols) != len(k.Columns) {
		return fileResult{}, cacheStale
	}
	for j, c := range k.Columns {
		if string(cols[j].name) != c.Name || string(cols[j].typ) != c.Type.String() {
			return fileResult{}, cacheStale
		}
	}
	res := fileResult{Rows: rows, Bytes: size, SHA256: hex.EncodeToString(fileSum), Accs: make([]*stats.Accumulator, len(cols))}
	for j, c := range k.Columns {
		a := new(stats.Accumulator)
		if err := a.UnmarshalBinary(cols[j].state); err != nil || a.Kind() != c.Kind {
			return fileResult{}, cacheCorrupt
		}
		res.Accs[j] = a
	}
	return res, cacheHit
}

// reuse is pass one's shortcut for file i, whose footer r has read: a
// valid cache entry, or for a file the fit filter leaves out, just its
// rows and hash. done is false when the file must be measured; res then
// carries the cache state for the log.
func (p *plan) reuse(cfg *Config, i int, r *arrowio.Reader) (res fileResult, done bool, err error) {
	f := p.Files[i]
	state, footer := cacheOff, r.FooterChecksum()
	if p.cache != nil {
		k, err := keyOf(p, i, footer)
		if err != nil {
			return fileResult{}, false, err
		}
		res, state = p.cache.lookup(k)
	}
	switch {
	case state == cacheHit:
		if cfg.InfPolicy == InfError && p.fits(i) {
			for j, a := range res.Accs {
				if pos, neg := a.Infinities(); pos+neg > 0 {
					return fileResult{}, false, fmt.Errorf("%w: %s: column %s has %d +Inf and %d -Inf values (want finite values; --on-infinity skip leaves them out of the statistics)",
						ErrInfinite, f.Rel, p.Columns[j].Name, pos, neg)
				}
			}
		}
		if res.Rows != r.NumRows() {
			return fileResult{}, false, fmt.Errorf("%s: cache entry has %d rows, the footer %d", f.Rel, res.Rows, r.NumRows())
		}
		res.Origin = origin{Source: sourceCached, Cache: cacheHit, Footer: footer}
		return res, true, nil
	case !p.fits(i):
		size, sum, err := r.Checksum()
		if err != nil {
			return fileResult{}, false, err
		}
		return fileResult{Rows: r.NumRows(), Bytes: size, SHA256: sum, Origin: origin{Source: sourceDescribed, Footer: footer}}, true, nil
	}
	return fileResult{Origin: origin{Source: sourceMeasured, Cache: state, Footer: footer}}, false, nil
}

// saveCache writes the entries of the files pass one measured and removes
// those of files that are no longer inputs. It runs only once the
// statistics are known to be good, so that a run that fails on bad input
// writes nothing.
func (p *plan) saveCache(ctx context.Context, cfg *Config, results []fileResult, log *runLog) error {
	if p.cache == nil {
		return nil
	}
	stored := 0
	for _, r := range results {
		if r.Origin.Source == sourceMeasured {
			stored++
		}
	}
	err := forEachFile(ctx, cfg.Workers, largestFirst(p.Files), func(ctx context.Context, i int) error {
		if results[i].Origin.Source != sourceMeasured {
			return nil
		}
		k, err := keyOf(p, i, results[i].Origin.Footer)
		if err != nil {
			return err
		}
		return p.cache.store(k, results[i])
	})
	if err != nil {
		return err
	}
	pruned, err := p.cache.prune(p.Files)
	if err != nil {
		return err
	}
	log.cacheSaved(stored, pruned)
	return nil
}

// fits reports whether file i's statistics go into the parameters.
func (p *plan) fits(i int) bool { return p.Fit == nil || p.Fit[i] }
