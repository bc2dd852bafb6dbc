package arrowio

import (
	"bytes"
	"context"
	"encoding/binary"
	"fmt"
	"slices"
	"sync/atomic"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/file"
	"github.com/apache/arrow/go/v17/parquet/metadata"
)

// Copying a dictionary-encoded string column by its indices. Copied value
// for value, every string of such a column is decoded from the input's
// dictionary and hashed again into the output's (7% of a full run's CPU
// on the benchmark lake, for its one string column). When every data page
// of the input chunk is dictionary-encoded (the chunk's page encoding
// statistics tell), the output chunk instead gets the input's dictionary,
// in the input's order, and the input's indices: Parquet's dictionary
// record reader decodes the indices without looking the values up, and the
// output column writer's dictionary encoder takes the dictionary whole
// (PutDictionary) and then the indices (WriteDictIndices).
//
// The column writer leaves statistics to its caller on that path, and
// Arrow Go v17's own caller (pqarrow) computes a page's minimum wrongly
// when the page holds the empty string. dictCopy updates the page
// statistics itself, before each call of at most WriteBatchSize rows, the
// way WriteBatch does before each such batch (a page is cut only after a
// batch): with the distinct values the batch references, through the same
// ByteArrayStatistics.Update, so minimum and maximum follow Arrow's own
// comparison; null and value counts are those of the batch.

// Switches for tests: copyByIndices off makes every copy go value by
// value; indexCopies counts the column chunks copied by their indices.
var (
	copyByIndices = true
	indexCopies   atomic.Int64
)

// dictWriter is the part of the dictionary encoder of a byte-array column
// writer (Arrow's DictByteArrayEncoder, an internal type) that dictCopy
// uses.
type dictWriter interface {
	PutDictionary(arrow.Array) error
	NumEntries() int
}

// canCopyIndices reports whether column c of row group rg can be copied
// into cw by its dictionary indices: a byte-array column whose chunk has a
// dictionary page and page encoding statistics that show only
// dictionary-encoded data pages, written by a column writer that encodes
// with a dictionary.
func (r *Reader) canCopyIndices(rg, c int, cw file.ColumnChunkWriter) bool {
	w, ok := cw.(*file.ByteArrayColumnChunkWriter)
	if !ok || !copyByIndices || w.Descr().MaxDefinitionLevel() > 1 || w.Descr().MaxRepetitionLevel() > 0 {
		return false
	}
	var enc any = w.CurrentEncoder()
	if _, ok := enc.(dictWriter); !ok {
		return false
	}
	col, err := r.pr.MetaData().RowGroup(rg).ColumnChunk(c)
	if err != nil || !col.HasDictionaryPage() {
		return false
	}
	dict, other := dataPageEncodings(col)
	return dict > 0 && other == 0
}

// copyIndices copies column c of row group rg into w by its dictionary
// indices (see above), in batches of n rows; canCopyIndices must have
// said yes. It first reads the chunk's dictionary page: a chunk that does
// not start with one, whose dictionary reaches the output writer's
// dictionary page size limit, or whose dictionary holds a value twice
// (legal, though rare: the output's dictionary, and Arrow's dictionary
// record reader, keep each value once, so the indices would point
// elsewhere), is copied value by value instead. done is as for
// columnReader.
func (r *Reader) copyIndices(ctx context.Context, rg, c int, cw file.ColumnChunkWriter, n int) (rows int64, done func(), err error) {
	w := cw.(*file.ByteArrayColumnChunkWriter)
	pages, done, err := r.columnPages(rg, c)
	if err != nil {
		return 0, done, err
	}
	descr := r.pr.MetaData().Schema.Column(c)
	rp := &replayPages{PageReader: pages}
	entries := -1
	limit := w.Properties().DictionaryPageSizeLimit()
	if err := decoding(func() error { entries = rp.readDictionary(limit); return nil }); err != nil {
		return 0, done, err
	}
	if entries < 0 {
		cr := file.NewColumnReader(descr, rp, r.mem, r.pr.BufferPool())
		rows, err = r.copyColumn(ctx, cr, c, cw, n)
		return rows, done, err
	}

	dt := &arrow.DictionaryType{IndexType: arrow.PrimitiveTypes.Int32, ValueType: arrow.BinaryTypes.Binary}
	rr := file.NewRecordReader(descr, r.fr.Manifest.Fields[c].LevelInfo, dt, r.mem, r.pr.BufferPool()).(file.BinaryRecordReader)
	rr.SetPageReader(rp)
	indexCopies.Add(1)
	chunkDone := done
	done = func() { rr.Release(); chunkDone() }

	var enc any = w.CurrentEncoder()
	d := dictCopy{w: w, enc: enc.(dictWriter), entries: entries, optional: descr.MaxDefinitionLevel() > 0}
	if s, ok := w.PageStatistics().(*metadata.ByteArrayStatistics); ok {
		d.stats = s
	}
	for {
		if err := context.Cause(ctx); err != nil {
			return 0, done, err
		}
		var chunks []arrow.Array
		var defs []int16
		var k int64
		err := decoding(func() (err error) {
			rr.Reset()
			if k, err = rr.ReadRecords(int64(n)); err != nil {
				return err
			}
			if d.optional {
				defs = rr.DefLevels()[:rr.LevelsPos()]
			}
			chunks = rr.GetBuilderChunks()
			// A page that fails to open ends the chunk without an error
			// from ReadRecords; the column reader inside keeps it.
			return rr.(interface{ Err() error }).Err()
		})
		if err == nil && k > 0 {
			err = d.write(chunks, defs, k)
		}
		for _, a := range chunks {
			a.Release()
		}
		if err != nil || k == 0 {
			return rows, done, err
		}
		rows += k
	}
}

// replayPages is a page reader whose first page has been read ahead, to
// look at the dictionary, and is handed out again by the first Next.
type replayPages struct {
	file.PageReader
	replay bool
	ended  bool  // the read ahead found no first page
	err    error // and this is why
}

func (p *replayPages) Next() bool {
	switch {
	case p.ended:
		return false
	case p.replay:
		p.replay = false
		return true
	}
	return p.PageReader.Next()
}

func (p *replayPages) Err() error {
	if p.ended {
		return p.err
	}
	return p.PageReader.Err()
}

// readDictionary reads the first page ahead. When it is a dictionary page
// of distinct plain-encoded values, smaller than limit bytes, it returns
// their number, else -1. (A larger dictionary is what a writer with that
// limit gives up for plain encoding, which a copy by indices would not:
// it is copied value by value, as the writer's limit wants.)
func (p *replayPages) readDictionary(limit int64) int {
	if !p.PageReader.Next() {
		// Arrow's page reader forgets the error on its next call.
		p.ended, p.err = true, p.PageReader.Err()
		return -1
	}
	p.replay = true
	dp, ok := p.Page().(*file.DictionaryPage)
	if !ok || int64(len(dp.Data())) >= limit {
		return -1
	}
	if e := parquet.Encoding(dp.Encoding()); e != parquet.Encodings.Plain && e != parquet.Encodings.PlainDict {
		return -1
	}
	vals, ok := plainByteArrays(dp.Data(), int(dp.NumValues()))
	if !ok {
		return -1
	}
	slices.SortFunc(vals, bytes.Compare)
	for i := 1; i < len(vals); i++ {
		if bytes.Equal(vals[i-1], vals[i]) {
			return -1
		}
	}
	return len(vals)
}

// plainByteArrays splits data into n PLAIN-encoded byte arrays (a 4-byte
// little-endian length, then the bytes; Apache Parquet format
// specification, Encodings), reporting whether data holds exactly that.
func plainByteArrays(data []byte, n int) ([][]byte, bool) {
	if n < 0 || n > len(data)/4 {
		return nil, false
	}
	vals := make([][]byte, n)
	for i := range vals {
		if len(data) < 4 {
			return nil, false
		}
		k := binary.LittleEndian.Uint32(data)
		if uint64(k) > uint64(len(data)-4) {
			return nil, false
		}
		vals[i], data = data[4:4+k], data[4+k:]
	}
	return vals, len(data) == 0
}

// dictCopy is the state of one column chunk's copy by indices.
type dictCopy struct {
	w        *file.ByteArrayColumnChunkWriter
	enc      dictWriter
	stats    *metadata.ByteArrayStatistics // nil: the column keeps none
	entries  int                           // in the input's dictionary page
	optional bool
	dict     []parquet.ByteArray // the chunk's dictionary, once known
	seen     []int               // per dictionary entry: the last batch that referenced it (batches count from 1)
	batch    int
	distinct []parquet.ByteArray
	nonNull  int
}

// write writes one batch of rows rows: its dictionary arrays (the record
// reader's output, normally one) and, for an optional column, its
// definition levels.
func (d *dictCopy) write(chunks []arrow.Array, defs []int16, rows int64) error {
	at := 0
	for _, a := range chunks {
		da, ok := a.(*array.Dictionary)
		if !ok {
			return fmt.Errorf("dictionary reader returned %s", a.DataType())
		}
		if err := d.useDictionary(da.Dictionary()); err != nil {
			return err
		}
		idx, ok := da.Indices().(*array.Int32)
		if !ok {
			return fmt.Errorf("dictionary reader returned %s indices", da.Indices().DataType())
		}
		var lv []int16
		if d.optional {
			if at+idx.Len() > len(defs) {
				return fmt.Errorf("%w: %d definition levels for %d rows", errCorruptData, len(defs), at+idx.Len())
			}
			lv = defs[at : at+idx.Len()]
		}
		if err := d.writeIndices(idx, lv); err != nil {
			return err
		}
		at += idx.Len()
	}
	if int64(at) != rows {
		return fmt.Errorf("%w: dictionary reader returned %d rows, read %d", errCorruptData, at, rows)
	}
	return nil
}

// useDictionary gives the writer the chunk's dictionary on the first
// batch. Every batch's dictionary must have as many entries as the
// input's dictionary page: the reader's dictionary only grows when a
// page is not dictionary-encoded, which the page encoding statistics
// said none is.
func (d *dictCopy) useDictionary(dict arrow.Array) error {
	if dict.Len() != d.entries {
		return fmt.Errorf("%w: a dictionary of %d entries where the dictionary page holds %d", errCorruptData, dict.Len(), d.entries)
	}
	if d.dict != nil {
		return nil
	}
	b, ok := dict.(*array.Binary)
	if !ok || dict.NullN() > 0 {
		return fmt.Errorf("dictionary reader returned a %s dictionary with %d nulls", dict.DataType(), dict.NullN())
	}
	d.dict = make([]parquet.ByteArray, b.Len())
	for i := range d.dict {
		v := b.Value(i)
		if v == nil {
			v = []byte{} // a value, not the absence of one, to the statistics
		}
		d.dict[i] = v
	}
	d.seen = make([]int, len(d.dict))
	if err := d.enc.PutDictionary(dict); err != nil {
		return err
	}
	if d.enc.NumEntries() != len(d.dict) {
		return fmt.Errorf("the output's dictionary took %d of %d distinct values", d.enc.NumEntries(), len(d.dict))
	}
	return nil
}

// writeIndices writes indices (null where lv, when not nil, is 0) in calls
// of at most the writer's batch size, each after the page statistics have
// taken its values.
func (d *dictCopy) writeIndices(idx *array.Int32, lv []int16) error {
	step := int(d.w.Properties().WriteBatchSize())
	for s := 0; s < idx.Len(); s += step {
		e := min(s+step, idx.Len())
		var defs []int16
		if lv != nil {
			defs = lv[s:e]
		}
		if err := d.batchValues(idx, s, e, defs); err != nil {
			return err
		}
		if d.stats != nil {
			d.stats.Update(d.distinct, int64(e-s-d.nonNull))
			d.stats.IncNumValues(int64(d.nonNull - len(d.distinct)))
		}
		part := array.NewSlice(idx, int64(s), int64(e))
		err := d.w.WriteDictIndices(part, defs, nil)
		part.Release()
		if err != nil {
			return err
		}
	}
	return nil
}

// batchValues sets d.nonNull to the number of rows of [s, e) that are not
// null and d.distinct to their distinct values, checking each index
// against the dictionary and each row's index against its definition
// level.
func (d *dictCopy) batchValues(idx *array.Int32, s, e int, defs []int16) error {
	d.batch++
	d.distinct, d.nonNull = d.distinct[:0], 0
	raw := idx.Int32Values()
	for i := s; i < e; i++ {
		valid := idx.IsValid(i)
		if defs != nil && valid != (defs[i-s] > 0) {
			return fmt.Errorf("%w: row %d is null in the indices but not in the definition levels, or the reverse", errCorruptData, i)
		}
		if !valid {
			continue
		}
		k := raw[i]
		if k < 0 || int(k) >= len(d.dict) {
			return fmt.Errorf("%w: dictionary index %d, the dictionary has %d entries", errCorruptData, k, len(d.dict))
		}
		d.nonNull++
		if d.seen[k] != d.batch {
			d.seen[k] = d.batch
			d.distinct = append(d.distinct, d.dict[k])
		}
	}
	return nil
}
