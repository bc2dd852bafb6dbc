package arrowio

import (
	"context"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/metadata"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"github.com/lakescale/lakescale/internal/invariants"
)

// DefaultBatchRows is the batch size Records uses when given batchRows <= 0.
const DefaultBatchRows = 64 << 10

// bufferedStreams selects how column chunks are read. When false, pqarrow
// reads each whole column chunk into memory before decoding it; when true
// it reads through a buffer of streamBufferSize bytes. For a 1M-row
// float64 column on local disk, buffered reads allocated a third less (29
// against 45 MB) for the same or less CPU (BenchmarkReadFloat64). This is
// the record reader's path; scans and rewrites read the chunks of a
// buffered Reader through a chunkStream (chunkread.go).
var bufferedStreams = true

const streamBufferSize = 1 << 20

// arrowSchemaKey is the footer key under which pqarrow stores the
// serialized Arrow schema; it is an encoding detail, not user metadata.
const arrowSchemaKey = "ARROW:schema"

// Reader streams one Parquet file. A Reader is not safe for concurrent use;
// open one per goroutine.
type Reader struct {
	path   string
	obj    Object
	hasher *seqHasher
	pr     *file.Reader
	fr     *pqarrow.FileReader
	schema *arrow.Schema
	meta   map[string]string
	footer string

	mem       memory.Allocator // the file reader's
	ownChunks bool             // columnReader may open chunks with parts (chunkread.go)
	parts     *chunkParts      // from partsPool
}

// Open opens a Parquet file (a path or location) and reads its footer.
// Column data is read later, by Records, with mem. A file that is not
// Parquet (too short, no magic bytes, undecodable footer) gives an error
// wrapping ErrNotParquet that reads "open path: parquet: ...".
func Open(path string, mem memory.Allocator) (*Reader, error) {
	return OpenContext(background, path, mem)
}

// OpenContext is Open whose reads stop when ctx is done: on an object
// store a request in flight is cancelled, not waited for.
func OpenContext(ctx context.Context, path string, mem memory.Allocator) (*Reader, error) {
	return open(ctx, path, mem, true)
}

// OpenUnhashed is OpenContext without hashing the reads, for a file whose
// hash is already known; Checksum then fails.
func OpenUnhashed(ctx context.Context, path string, mem memory.Allocator) (*Reader, error) {
	return open(ctx, path, mem, false)
}

func open(ctx context.Context, path string, mem memory.Allocator, hash bool) (*Reader, error) {
	if mem == nil {
		mem = memory.DefaultAllocator
	}
	st, key, err := Locate(path)
	if err != nil {
		return nil, err
	}
	obj, err := st.Open(ctx, key)
	if err != nil {
		return nil, err
	}
	src := obj
	var hs *seqHasher
	if hash {
		hs = newSeqHasher(obj)
		src = hs
	}
	r, err := newReader(path, src, mem)
	if err != nil {
		_ = obj.Close() // the open error is the one to report
		return nil, pathError("open", path, err)
	}
	if hs != nil {
		r.hasher = hs
		hs.start()
	}
	return r, nil
}

// Checksum returns the file's size and the SHA-256 (lowercase hex) of all
// its bytes. The bytes Records read are hashed as they go by, in order;
// Checksum reads only what they skipped (columns not read, the footer).
// Call it after the last Records; reads made after it are not hashed.
func (r *Reader) Checksum() (size int64, sum string, err error) {
	if r.hasher == nil {
		return 0, "", pathError("hash", r.path, errors.New("opened without hashing"))
	}
	size, sum, err = r.hasher.Sum()
	if err != nil {
		return 0, "", pathError("hash", r.path, unwrapPath(err))
	}
	return size, sum, nil
}

func newReader(path string, obj Object, mem memory.Allocator) (r *Reader, err error) {
	// A corrupt footer can make the thrift decoder or the schema
	// conversion panic; a bad input file must not take the process down.
	defer func() {
		if p := recover(); p != nil {
			r, err = nil, &classified{ErrNotParquet, fmt.Errorf("parquet: corrupt footer: %v", p)}
		}
	}()
	props := parquet.NewReaderProperties(mem)
	// A remote object is read a whole column chunk per request; buffered
	// streams would make one request per buffer and column.
	_, whole := obj.(wholeChunkReader)
	if hs, ok := obj.(*seqHasher); ok {
		whole = hs.wantsWholeChunks()
	}
	props.BufferedStreamEnabled = bufferedStreams && !whole
	props.BufferSize = streamBufferSize
	pr, err := file.NewParquetReader(io.NewSectionReader(obj, 0, obj.Size()), file.WithReadProps(props))
	if err != nil {
		return nil, classifyOpen(err)
	}
	fr, err := pqarrow.NewFileReader(pr, pqarrow.ArrowReadProperties{Parallel: false, BatchSize: DefaultBatchRows}, mem)
	if err != nil {
		return nil, err
	}
	schema, err := fr.Schema()
	if err != nil {
		return nil, err
	}
	schema = stripFieldIDs(schema)
	footer, err := footerChecksum(obj)
	if err != nil {
		return nil, err
	}
	return &Reader{
		path:   path,
		obj:    obj,
		pr:     pr,
		fr:     fr,
		schema: schema,
		meta:   userMetadata(pr.MetaData().KeyValueMetadata()),
		footer: footer,

		mem: mem,
		// Arrow's path stays for objects read a whole chunk per request
		// and for files of writers with PARQUET-816 (its padding needs the
		// footer's offset, which Arrow's reader does not expose).
		ownChunks: props.BufferedStreamEnabled && !pr.WriterVersion().LessThan(metadata.Parquet816FixedVersion),
		parts:     partsPool.Get().(*chunkParts),
	}, nil
}

// classifyOpen marks footer-parsing failures with ErrNotParquet. Errors of
// the operating system (an *fs.PathError from ReadAt) are not about the
// file's format and stay unmarked.
func classifyOpen(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return err
	}
	return &classified{ErrNotParquet, err}
}

// footerChecksum hashes the raw footer: the serialized FileMetaData as
// long as the stored length says, that 4-byte little-endian length and the
// closing magic "PAR1" (Apache Parquet format specification, "File
// format"). The Parquet reader has just read these bytes, so the two small
// reads are normally served from the page cache.
func footerChecksum(f Object) (string, error) {
	size := f.Size()
	var tail [8]byte
	if size < int64(len(tail)) {
		return "", &classified{ErrNotParquet, errors.New("parquet: file too small for a footer")}
	}
	if _, err := f.ReadAt(tail[:], size-8); err != nil {
		return "", err
	}
	n := int64(binary.LittleEndian.Uint32(tail[:4])) + 8
	if string(tail[4:]) != "PAR1" || n > size {
		return "", &classified{ErrNotParquet, errors.New("parquet: footer changed while reading")}
	}
	buf := make([]byte, n)
	if _, err := f.ReadAt(buf, size-n); err != nil {
		return "", err
	}
	s := sha256.Sum256(buf)
	return hex.EncodeToString(s[:]), nil
}

// userMetadata returns the footer's key-value metadata without pqarrow's
// serialized Arrow schema. A repeated key keeps its last value.
func userMetadata(kv metadata.KeyValueMetadata) map[string]string {
	m := make(map[string]string, kv.Len())
	keys, values := kv.Keys(), kv.Values()
	for i, k := range keys {
		if k != arrowSchemaKey {
			m[k] = values[i]
		}
	}
	return m
}

// Path is the path given to Open.
func (r *Reader) Path() string { return r.path }

// Schema is the file's Arrow schema (from the stored Arrow schema when the
// writer kept one, else converted from the Parquet schema). The placeholder
// field metadata "PARQUET:field_id" = "-1" that pqarrow adds to top-level
// fields without a Parquet field id is removed, here and in the records
// Records returns, so a schema written by WriteParquetAtomic reads back
// Equal.
func (r *Reader) Schema() *arrow.Schema { return r.schema }

// Size is the file's size in bytes.
func (r *Reader) Size() int64 { return r.obj.Size() }

// Version identifies the version of the file that was opened (see
// Object.Version); a later Open of the same file gives another value when
// it was replaced or written to in between.
func (r *Reader) Version() string { return r.obj.Version() }

// NumRows is the row count from the footer.
func (r *Reader) NumRows() int64 { return r.pr.NumRows() }

// NumRowGroups is the row-group count from the footer.
func (r *Reader) NumRowGroups() int { return r.pr.NumRowGroups() }

// RowGroupRows is the row count of row group rg from the footer.
func (r *Reader) RowGroupRows(rg int) int64 { return r.pr.MetaData().RowGroup(rg).NumRows() }

// Metadata is the file's key-value metadata, without the serialized Arrow
// schema pqarrow stores under "ARROW:schema". The map is shared; do not
// modify it.
func (r *Reader) Metadata() map[string]string { return r.meta }

// FooterChecksum is the SHA-256 (lowercase hex) of the raw footer bytes:
// the serialized metadata plus the trailing length and magic. It changes
// whenever the footer does, and costs nothing after Open.
func (r *Reader) FooterChecksum() string { return r.footer }

// Records streams the given top-level columns (all when cols is nil) of
// row group rg in record batches of at most batchRows rows (DefaultBatchRows
// when batchRows <= 0). The reader checks ctx before every batch and then
// stops with Err returning context.Cause(ctx). Other errors name the path.
// Unlike pqarrow's reader, Err is nil after a complete read; Read returns
// io.EOF at the end, as arrio.Reader specifies. The caller must Release
// the reader.
func (r *Reader) Records(ctx context.Context, rg int, cols []int, batchRows int64) (pqarrow.RecordReader, error) {
	if err := context.Cause(ctx); err != nil {
		return nil, err
	}
	if rg < 0 || rg >= r.NumRowGroups() {
		return nil, pathError("read", r.path, fmt.Errorf("%w: row group %d of %d", arrow.ErrIndex, rg, r.NumRowGroups()))
	}
	var leaves []int
	if cols != nil {
		leaves = []int{}
		fields := r.fr.Manifest.Fields
		for _, c := range cols {
			if c < 0 || c >= len(fields) {
				return nil, pathError("read", r.path, fmt.Errorf("%w: column %d of %d", arrow.ErrIndex, c, len(fields)))
			}
			leaves = appendLeaves(leaves, &fields[c])
		}
	}
	if batchRows <= 0 {
		batchRows = DefaultBatchRows
	}
	if err := r.scanNarrowColumns(ctx, rg, cols, batchRows); err != nil {
		return nil, err
	}
	r.fr.Props.BatchSize = batchRows
	rr, err := r.fr.GetRecordReader(ctx, leaves, []int{rg})
	if err != nil {
		if cerr := context.Cause(ctx); cerr != nil {
			return nil, cerr
		}
		return nil, pathError("read", r.path, err)
	}
	b := &batchReader{RecordReader: rr, ctx: ctx, path: r.path, max: batchRows, schema: rr.Schema()}
	if s := stripFieldIDs(rr.Schema()); s != rr.Schema() {
		b.schema, b.rebuild = s, true
	}
	return b, nil
}

// scanNarrowColumns scans the top-level INT(8) and INT(16) columns among
// cols (nil: all) of row group rg, whose out-of-range values Arrow's record
// reader would truncate silently (see checkNarrow); the scan refuses them.
// Such columns inside nested ones are not checked. Files rarely have any,
// so this costs nothing for most.
func (r *Reader) scanNarrowColumns(ctx context.Context, rg int, cols []int, batchRows int64) error {
	fields := r.fr.Manifest.Fields
	if cols == nil {
		cols = make([]int, len(fields))
		for i := range cols {
			cols[i] = i
		}
	}
	for _, c := range cols {
		if !isNarrow(fields[c].Field.Type.ID()) || !r.CanScan(c) {
			continue
		}
		if err := r.ScanColumn(ctx, rg, c, batchRows, func(any, int) error { return nil }); err != nil {
			return err
		}
	}
	return nil
}

// fieldIDKey is the field metadata key pqarrow uses for Parquet field ids;
// "-1" means the column has none.
const fieldIDKey = "PARQUET:field_id"

// stripFieldIDs returns s without the "PARQUET:field_id" = "-1" entries of
// its top-level fields, or s itself when there are none. Nested children
// keep theirs: lakescale's inputs are flat tables.
func stripFieldIDs(s *arrow.Schema) *arrow.Schema {
	fields := s.Fields()
	changed := false
	for i, f := range fields {
		j := f.Metadata.FindKey(fieldIDKey)
		if j < 0 || f.Metadata.Values()[j] != "-1" {
			continue
		}
		var keys, values []string
		for k, key := range f.Metadata.Keys() {
			if k != j {
				keys = append(keys, key)
				values = append(values, f.Metadata.Values()[k])
			}
		}
		fields[i].Metadata = arrow.NewMetadata(keys, values)
		changed = true
	}
	if !changed {
		return s
	}
	md := s.Metadata()
	return arrow.NewSchemaWithEndian(fields, &md, s.Endianness())
}

// appendLeaves appends the Parquet leaf column indices below f.
func appendLeaves(dst []int, f *pqarrow.SchemaField) []int {
	if f.IsLeaf() {
		return append(dst, f.ColIndex)
	}
	for i := range f.Children {
		dst = appendLeaves(dst, &f.Children[i])
	}
	return dst
}

// Close releases the file. Calling it again does nothing.
func (r *Reader) Close() error {
	if r.pr == nil {
		return nil
	}
	err := r.pr.Close()
	if cerr := r.obj.Close(); err == nil {
		err = cerr
	}
	// Parts still busy (a scan or rewrite that failed) are left to the
	// garbage collector.
	if !r.parts.busy {
		r.parts.stream.reset(nil, 0, 0)
		partsPool.Put(r.parts)
	}
	r.pr, r.fr, r.obj, r.parts = nil, nil, nil, nil
	return err
}

// batchReader adds cancellation, path-naming errors and a clean end of
// stream to pqarrow's record reader.
type batchReader struct {
	pqarrow.RecordReader
	ctx     context.Context
	path    string
	max     int64
	err     error
	schema  *arrow.Schema
	rebuild bool         // records get schema instead of the inner one
	cur     arrow.Record // rebuilt current record, owned here
}

func (b *batchReader) Schema() *arrow.Schema { return b.schema }

func (b *batchReader) Record() arrow.Record {
	if b.rebuild {
		return b.cur
	}
	return b.RecordReader.Record()
}

func (b *batchReader) Release() {
	b.releaseCur()
	b.RecordReader.Release()
}

func (b *batchReader) releaseCur() {
	if b.cur != nil {
		b.cur.Release()
		b.cur = nil
	}
}

// adopt checks rec and, when the schema is rewritten, wraps its columns
// in a record with that schema, which b owns until the next batch.
func (b *batchReader) adopt(rec arrow.Record) arrow.Record {
	if invariants.Enabled && rec.NumRows() > b.max {
		panic(fmt.Sprintf("arrowio: batch of %d rows exceeds %d", rec.NumRows(), b.max))
	}
	if !b.rebuild {
		return rec
	}
	b.cur = array.NewRecord(b.schema, rec.Columns(), rec.NumRows())
	return b.cur
}

func (b *batchReader) Next() bool {
	b.releaseCur()
	if b.err != nil {
		return false
	}
	if err := context.Cause(b.ctx); err != nil {
		b.err = err
		return false
	}
	if !b.RecordReader.Next() {
		b.err = b.wrap(b.RecordReader.Err())
		return false
	}
	b.adopt(b.RecordReader.Record())
	return true
}

func (b *batchReader) Read() (arrow.Record, error) {
	b.releaseCur()
	if b.err != nil {
		return nil, b.err
	}
	if err := context.Cause(b.ctx); err != nil {
		b.err = err
		return nil, err
	}
	rec, err := b.RecordReader.Read()
	if err != nil {
		if err = b.wrap(err); err == nil {
			return nil, io.EOF
		}
		b.err = err
		return nil, err
	}
	return b.adopt(rec), nil
}

func (b *batchReader) Err() error { return b.err }

// wrap turns pqarrow's end-of-stream io.EOF into nil and names the path in
// any other error.
func (b *batchReader) wrap(err error) error {
	if err == nil || errors.Is(err, io.EOF) {
		return nil
	}
	return pathError("read", b.path, err)
}
