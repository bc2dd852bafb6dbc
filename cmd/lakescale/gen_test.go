package main

import (
	"bufio"
	"bytes"
	"context"
	"flag"
	"fmt"
	"hash/fnv"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"
	"github.com/rogpeppe/go-internal/testscript"

	"github.com/lakescale/lakescale/arrowio"
)

// lakeSchema is the schema gen-lake writes: a string column, a float64
// column with nulls and NaN, a float32 column, an int32 column with nulls,
// an int64 column and a uint64 column whose values lie beyond 2^53 (so
// converting them to float64 rounds).
func lakeSchema() *arrow.Schema {
	return arrow.NewSchema([]arrow.Field{
		{Name: "turbine_id", Type: arrow.BinaryTypes.String},
		{Name: "wind", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
		{Name: "temp", Type: arrow.PrimitiveTypes.Float32},
		{Name: "faults", Type: arrow.PrimitiveTypes.Int32, Nullable: true},
		{Name: "energy", Type: arrow.PrimitiveTypes.Int64},
		{Name: "serial", Type: arrow.PrimitiveTypes.Uint64},
	}, nil)
}

// listFlag is a repeatable string flag.
type listFlag []string

func (l *listFlag) String() string     { return strings.Join(*l, ",") }
func (l *listFlag) Set(s string) error { *l = append(*l, s); return nil }

// fileColumn parses "REL:COL" flag values into rel -> set of columns.
func fileColumn(vals []string) (map[string]map[string]bool, error) {
	m := map[string]map[string]bool{}
	for _, v := range vals {
		rel, col, ok := strings.Cut(v, ":")
		if !ok || rel == "" || col == "" {
			return nil, fmt.Errorf("%q: want REL:COLUMN", v)
		}
		if m[rel] == nil {
			m[rel] = map[string]bool{}
		}
		m[rel][col] = true
	}
	return m, nil
}

// cmdGenLake writes a Hive-partitioned lake DIR/site=S/day=D/part-K.parquet
// with deterministic values from a seeded generator.
//
//	gen-lake DIR [-sites a,b] [-days 1,2] [-parts 2] [-rows 250] [-rowgroup 100] [-seed 1]
//	         [-inf REL] [-drop REL:COL] [-retype REL:COL] [-empty REL] [-set COL=VALUE]
//
// -set gives column COL the value VALUE (a number, or null) in every row
// of every file; -inf puts +Inf into column wind of file REL at row rowgroup+3 (so in row
// group 1); -drop leaves a column out of one file; -retype writes a column
// of one file with another type (int32->int64, int64->float64,
// uint64->int64, float64->float32, float32->float64); -empty writes REL
// with no rows. REL is the slash path below DIR.
func cmdGenLake(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "gen-lake")
	if len(args) < 1 {
		ts.Fatalf("usage: gen-lake DIR [flags]")
	}
	fs := flag.NewFlagSet("gen-lake", flag.ContinueOnError)
	sites := fs.String("sites", "a,b", "site partition values")
	days := fs.String("days", "1,2", "day partition values")
	parts := fs.Int("parts", 2, "files per partition")
	rows := fs.Int("rows", 250, "rows per file")
	rowGroup := fs.Int64("rowgroup", 100, "rows per row group")
	seed := fs.Uint64("seed", 1, "generator seed")
	var infs, drops, retypes, empties, sets listFlag
	fs.Var(&infs, "inf", "file REL gets a +Inf in wind")
	fs.Var(&drops, "drop", "REL:COL: leave COL out of REL")
	fs.Var(&retypes, "retype", "REL:COL: write COL of REL with another type")
	fs.Var(&empties, "empty", "file REL has no rows")
	fs.Var(&sets, "set", "COL=VALUE: every row of COL holds VALUE (a number or null)")
	ts.Check(fs.Parse(args[1:]))
	if fs.NArg() > 0 {
		ts.Fatalf("gen-lake: unexpected argument %q", fs.Arg(0))
	}
	drop, err := fileColumn(drops)
	ts.Check(err)
	retype, err := fileColumn(retypes)
	ts.Check(err)
	used := map[string]bool{}
	dir := ts.MkAbs(args[0])
	for _, site := range strings.Split(*sites, ",") {
		for _, day := range strings.Split(*days, ",") {
			for k := range *parts {
				rel := fmt.Sprintf("site=%s/day=%s/part-%d.parquet", site, day, k)
				used[rel] = true
				n := *rows
				if contains(empties, rel) {
					n = 0
				}
				inf := -1
				if contains(infs, rel) {
					inf = int(*rowGroup) + 3
					if inf >= n {
						ts.Fatalf("gen-lake: -inf %s needs more than %d rows", rel, inf)
					}
				}
				cols := lakeColumns(*seed, rel, n, inf)
				for _, set := range sets {
					name, value, _ := strings.Cut(set, "=")
					if _, ok := cols[name]; !ok && n > 0 {
						ts.Fatalf("gen-lake: -set %s: no such column", set)
					}
					for i := range cols[name] {
						cols[name][i] = setValue(ts, value)
					}
				}
				schema := lakeSchema()
				fields := []arrow.Field{}
				for _, f := range schema.Fields() {
					if drop[rel][f.Name] {
						continue
					}
					if retype[rel][f.Name] {
						f.Type = otherType(ts, f.Type)
					}
					fields = append(fields, f)
				}
				writeRecord(ts, filepath.Join(dir, filepath.FromSlash(rel)), arrow.NewSchema(fields, nil), cols, n, *rowGroup)
			}
		}
	}
	for _, rel := range append(append(append([]string{}, infs...), empties...), keys(drop)...) {
		if !used[rel] {
			ts.Fatalf("gen-lake: no file %s in this lake", rel)
		}
	}
	for rel := range retype {
		if !used[rel] {
			ts.Fatalf("gen-lake: no file %s in this lake", rel)
		}
	}
}

func contains(list []string, s string) bool {
	for _, v := range list {
		if v == s {
			return true
		}
	}
	return false
}

func keys(m map[string]map[string]bool) []string {
	var ks []string
	for k := range m {
		ks = append(ks, k)
	}
	return ks
}

// lakeColumns generates n rows of every lakeSchema column for file rel;
// nil is a null. Row inf (when >= 0) of wind is +Inf.
func lakeColumns(seed uint64, rel string, n, inf int) map[string][]any {
	h := fnv.New64a()
	h.Write([]byte(rel))
	rng := rand.New(rand.NewPCG(seed, h.Sum64()))
	cols := map[string][]any{}
	for i := range n {
		cols["turbine_id"] = append(cols["turbine_id"], fmt.Sprintf("t-%02d", rng.IntN(20)))

		var wind any = math.Round((8+3*rng.NormFloat64())*1000) / 1000
		switch {
		case i == inf:
			wind = math.Inf(1)
		case i == 1 || rng.IntN(20) == 0:
			wind = nil
		case i == 2 || rng.IntN(25) == 0:
			wind = math.NaN()
		}
		cols["wind"] = append(cols["wind"], wind)

		cols["temp"] = append(cols["temp"], float32(15+10*rng.Float64()))

		var faults any = int32(rng.IntN(21) - 10)
		if i == 3 || rng.IntN(15) == 0 {
			faults = nil
		}
		cols["faults"] = append(cols["faults"], faults)

		cols["energy"] = append(cols["energy"], int64(1_000_000_000_000)+rng.Int64N(1_000_000_000))
		cols["serial"] = append(cols["serial"], uint64(1)<<60+rng.Uint64N(1<<40))
	}
	return cols
}

// setValue parses a -set value: null, an integer or a float (appendValue
// converts it to the column's type).
func setValue(ts *testscript.TestScript, s string) any {
	if s == "null" {
		return nil
	}
	if i, err := strconv.ParseInt(s, 10, 64); err == nil {
		return i
	}
	f, err := strconv.ParseFloat(s, 64)
	ts.Check(err)
	return f
}

// otherType is the type -retype writes instead of t.
func otherType(ts *testscript.TestScript, t arrow.DataType) arrow.DataType {
	switch t.ID() {
	case arrow.INT32:
		return arrow.PrimitiveTypes.Int64
	case arrow.INT64:
		return arrow.PrimitiveTypes.Float64
	case arrow.UINT64:
		return arrow.PrimitiveTypes.Int64
	case arrow.FLOAT64:
		return arrow.PrimitiveTypes.Float32
	case arrow.FLOAT32:
		return arrow.PrimitiveTypes.Float64
	}
	ts.Fatalf("gen-lake: cannot retype a %s column", t)
	return nil
}

// writeRecord writes the columns schema names as one Parquet file with
// row groups of at most rowGroup rows.
func writeRecord(ts *testscript.TestScript, path string, schema *arrow.Schema, cols map[string][]any, n int, rowGroup int64) {
	b := array.NewRecordBuilder(memory.DefaultAllocator, schema)
	defer b.Release()
	for j, f := range schema.Fields() {
		src := cols[f.Name]
		for i := range n {
			appendValue(ts, b.Field(j), src[i])
		}
	}
	rec := b.NewRecord()
	defer rec.Release()
	writeArrowRecord(ts, path, rec, rowGroup)
}

// writeArrowRecord writes rec as one Snappy-compressed Parquet file with
// row groups of at most rowGroup rows.
func writeArrowRecord(ts *testscript.TestScript, path string, rec arrow.Record, rowGroup int64) {
	_, err := arrowio.WriteParquetAtomic(context.Background(), path, rec.Schema(),
		arrowio.WriteOptions{Compression: arrowio.Snappy, RowGroupRows: rowGroup},
		func(w *pqarrow.FileWriter) error { return w.Write(rec) })
	ts.Check(err)
}

// appendValue appends v (nil for null), converted to the builder's type.
func appendValue(ts *testscript.TestScript, b array.Builder, v any) {
	if v == nil {
		b.AppendNull()
		return
	}
	switch b := b.(type) {
	case *array.StringBuilder:
		b.Append(v.(string))
	case *array.Float64Builder:
		b.Append(toFloat64(v))
	case *array.Float32Builder:
		b.Append(float32(toFloat64(v)))
	case *array.Int32Builder:
		b.Append(int32(toInt64(v)))
	case *array.Int64Builder:
		b.Append(toInt64(v))
	case *array.Uint64Builder:
		b.Append(uint64(toInt64(v)))
	default:
		ts.Fatalf("gen-lake: no builder for %T", b)
	}
}

func toFloat64(v any) float64 {
	switch v := v.(type) {
	case float64:
		return v
	case float32:
		return float64(v)
	case int32:
		return float64(v)
	case int64:
		return float64(v)
	case uint64:
		return float64(v)
	}
	panic(fmt.Sprintf("toFloat64(%T)", v))
}

func toInt64(v any) int64 {
	switch v := v.(type) {
	case int32:
		return int64(v)
	case int64:
		return v
	case uint64:
		return int64(v)
	}
	panic(fmt.Sprintf("toInt64(%T)", v))
}

// cmdGenNIST writes the NIST StRD univariate dataset NAME (read from
// testdata/nist/NAME.dat) as a lake of PARTS files DIR/chunk=K/part-0.parquet
// with one float64 column y, in the file's order, split into uneven
// contiguous chunks, with row groups of 64 rows.
//
//	gen-nist NAME DIR PARTS
func cmdGenNIST(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "gen-nist")
	if len(args) != 3 {
		ts.Fatalf("usage: gen-nist NAME DIR PARTS")
	}
	ys, err := readNIST(filepath.Join(nistDir, args[0]+".dat"))
	ts.Check(err)
	parts, err := strconv.Atoi(args[2])
	ts.Check(err)
	if parts < 1 || parts > len(ys) {
		ts.Fatalf("gen-nist: PARTS %d out of range", parts)
	}
	schema := arrow.NewSchema([]arrow.Field{{Name: "y", Type: arrow.PrimitiveTypes.Float64}}, nil)
	// Uneven chunks: chunk k gets a share proportional to k+1.
	total := parts * (parts + 1) / 2
	start, acc := 0, 0
	for k := range parts {
		acc += k + 1
		end := len(ys) * acc / total
		if k == parts-1 {
			end = len(ys)
		}
		if end <= start {
			ts.Fatalf("gen-nist: chunk %d is empty", k)
		}
		cols := map[string][]any{}
		for _, y := range ys[start:end] {
			cols["y"] = append(cols["y"], y)
		}
		path := filepath.Join(ts.MkAbs(args[1]), fmt.Sprintf("chunk=%d", k), "part-0.parquet")
		writeRecord(ts, path, schema, cols, end-start, 64)
		start = end
	}
}

// readNIST parses a NIST StRD univariate .dat file: one observation per
// line from line 61 (CRLF line ends), checked against the "Number of
// Observations" header line.
func readNIST(path string) ([]float64, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	var ys []float64
	want := -1
	sc := bufio.NewScanner(bytes.NewReader(data))
	for line := 1; sc.Scan(); line++ {
		text := strings.TrimSpace(strings.TrimSuffix(sc.Text(), "\r"))
		if rest, ok := strings.CutPrefix(text, "Number of Observations:"); ok {
			if want, err = strconv.Atoi(strings.TrimSpace(rest)); err != nil {
				return nil, fmt.Errorf("%s:%d: %v", path, line, err)
			}
		}
		if line < 61 || text == "" {
			continue
		}
		y, err := strconv.ParseFloat(text, 64)
		if err != nil {
			return nil, fmt.Errorf("%s:%d: %v", path, line, err)
		}
		ys = append(ys, y)
	}
	if err := sc.Err(); err != nil {
		return nil, err
	}
	if len(ys) != want {
		return nil, fmt.Errorf("%s: %d observations, header says %d", path, len(ys), want)
	}
	return ys, nil
}

// cmdCorrupt damages a file in place; FILE may be a glob pattern, which
// must match at least one file, and then every match is damaged.
//
//	corrupt FILE truncate|garbage|append|flip
//
// truncate keeps the first half; garbage replaces the content with text;
// append adds bytes after the end; flip inverts one byte in the middle.
func cmdCorrupt(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "corrupt")
	if len(args) != 2 {
		ts.Fatalf("usage: corrupt FILE truncate|garbage|append|flip")
	}
	paths, err := filepath.Glob(ts.MkAbs(args[0]))
	ts.Check(err)
	if len(paths) == 0 {
		ts.Fatalf("corrupt: no file matches %s", args[0])
	}
	for _, path := range paths {
		data, err := os.ReadFile(path)
		ts.Check(err)
		switch args[1] {
		case "truncate":
			data = data[:len(data)/2]
		case "garbage":
			data = bytes.Repeat([]byte("this is not a parquet file\n"), 40)
		case "append":
			data = append(data, "trailing junk"...)
		case "flip":
			data[len(data)/2] ^= 0xff
		default:
			ts.Fatalf("corrupt: unknown mode %q", args[1])
		}
		ts.Check(os.WriteFile(path, data, 0o644))
	}
}
