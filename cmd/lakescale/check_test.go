package main

// Output checks against an independent Parquet reader.
//
// Everything lakescale writes is read back here with
// github.com/xitongsys/parquet-go (a separate Parquet implementation that
// shares no code with the Arrow Go writer and reader lakescale uses), and
// the expectations are computed in this file from the inputs, not by
// lakescale's own packages.

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"math"
	"math/big"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/rogpeppe/go-internal/testscript"
	"github.com/xitongsys/parquet-go/parquet"
	"github.com/xitongsys/parquet-go/reader"
	"github.com/xitongsys/parquet-go/source"
)

// localFile is a read-only source.ParquetFile over an *os.File: all the
// xitongsys reader needs (it opens one extra handle per column with
// Open("")). Written here rather than taken from parquet-go-source to keep
// that module, and its cloud-storage dependencies, out of go.mod.
type localFile struct{ *os.File }

func (f localFile) Open(name string) (source.ParquetFile, error) {
	if name == "" {
		name = f.Name()
	}
	g, err := os.Open(name)
	if err != nil {
		return nil, err
	}
	return localFile{g}, nil
}

func (f localFile) Create(string) (source.ParquetFile, error) {
	return nil, errors.New("localFile is read-only")
}

// pqColumn is one flat column as the independent reader sees it. Values
// are nil (null), string, float64, float32, int32, int64 or uint64.
type pqColumn struct {
	Name     string
	Physical parquet.Type
	Optional bool
	Values   []any
}

// pqFile is a whole flat Parquet file read with xitongsys/parquet-go.
type pqFile struct {
	Rows    int64
	Columns []pqColumn
	Meta    map[string]string
}

func (f *pqFile) column(name string) *pqColumn {
	for i := range f.Columns {
		if f.Columns[i].Name == name {
			return &f.Columns[i]
		}
	}
	return nil
}

// readPQ reads every column of a flat Parquet file with xitongsys/parquet-go.
func readPQ(path string) (pf *pqFile, err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("xitongsys/parquet-go panicked reading %s: %v", path, p)
		}
	}()
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	pr, err := reader.NewParquetColumnReader(localFile{f}, 1)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	defer pr.ReadStop()
	pf = &pqFile{Rows: pr.GetNumRows(), Meta: map[string]string{}}
	for _, kv := range pr.Footer.KeyValueMetadata {
		if kv.Value != nil {
			pf.Meta[kv.Key] = *kv.Value
		}
	}
	schema := pr.Footer.Schema
	for i, el := range schema[1:] {
		if el.NumChildren != nil && *el.NumChildren > 0 || el.Type == nil {
			return nil, fmt.Errorf("%s: column %s is not flat", path, pr.SchemaHandler.Infos[i+1].ExName)
		}
		// The reader renames schema elements to Go identifiers; the
		// file's own name is kept as ExName.
		col := pqColumn{Name: pr.SchemaHandler.Infos[i+1].ExName, Physical: *el.Type,
			Optional: el.RepetitionType != nil && *el.RepetitionType == parquet.FieldRepetitionType_OPTIONAL}
		var conv parquet.ConvertedType = -1
		if el.ConvertedType != nil {
			conv = *el.ConvertedType
		}
		if pf.Rows > 0 {
			vals, _, dls, err := pr.ReadColumnByIndex(int64(i), pf.Rows)
			if err != nil {
				return nil, fmt.Errorf("%s: column %s: %w", path, el.Name, err)
			}
			if int64(len(vals)) != pf.Rows || len(dls) != len(vals) {
				return nil, fmt.Errorf("%s: column %s: read %d values, footer says %d rows", path, el.Name, len(vals), pf.Rows)
			}
			for k, v := range vals {
				if col.Optional && dls[k] == 0 {
					v = nil
				}
				// The reader returns the physical value: an unsigned
				// integer is its bit pattern as a signed one.
				switch u := v.(type) {
				case int64:
					if conv == parquet.ConvertedType_UINT_64 {
						v = uint64(u)
					}
				case int32:
					switch conv {
					case parquet.ConvertedType_UINT_8, parquet.ConvertedType_UINT_16, parquet.ConvertedType_UINT_32:
						v = uint64(uint32(u))
					}
				}
				col.Values = append(col.Values, v)
			}
		}
		pf.Columns = append(pf.Columns, col)
	}
	return pf, nil
}

// forward is the scaling lakescale defines: the exact quotient
// (x - center) / scale, computed here with math/big and rounded once to
// the nearest float64 (big.Rat.Float64, ties to even, subnormals
// included, an underflow to zero keeping the quotient's sign). NaN and
// infinite x go through IEEE arithmetic (NaN stays NaN, ±Inf stays
// infinite), and so does x == center: the zero has the sign IEEE 754
// subtraction gives, -0 only for x = -0 and center = +0.
func forward(x, center, scale float64) float64 {
	if d := x - center; math.IsNaN(x) || math.IsInf(x, 0) || d == 0 {
		return d / scale
	}
	r := new(big.Rat).Sub(new(big.Rat).SetFloat64(x), new(big.Rat).SetFloat64(center))
	y, _ := r.Quo(r, new(big.Rat).SetFloat64(scale)).Float64()
	return y
}

// asFloat64 converts an input value the way the scaling formula reads it:
// float64(x).
func asFloat64(v any) (float64, bool) {
	switch v := v.(type) {
	case float64:
		return v, true
	case float32:
		return float64(v), true
	case int32:
		return float64(v), true
	case int64:
		return float64(v), true
	case uint64:
		return float64(v), true
	}
	return 0, false
}

// sameValue compares two values exactly: floats by bits (so NaN equals a
// NaN with the same payload, and -0 differs from +0).
func sameValue(a, b any) bool {
	switch a := a.(type) {
	case float64:
		b, ok := b.(float64)
		return ok && math.Float64bits(a) == math.Float64bits(b)
	case float32:
		b, ok := b.(float32)
		return ok && math.Float32bits(a) == math.Float32bits(b)
	}
	return a == b
}

// listParquet lists the data files of a dataset the way the tool's input
// discovery is documented to: regular *.parquet files, skipping names
// that start with '_' or '.', as sorted slash paths.
func listParquet(root string) ([]string, error) {
	var rels []string
	err := filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if p == root {
			return nil
		}
		if strings.HasPrefix(d.Name(), "_") || strings.HasPrefix(d.Name(), ".") {
			if d.IsDir() {
				return filepath.SkipDir
			}
			return nil
		}
		if d.Type().IsRegular() && strings.HasSuffix(d.Name(), ".parquet") {
			rel, err := filepath.Rel(root, p)
			if err != nil {
				return err
			}
			rels = append(rels, filepath.ToSlash(rel))
		}
		return nil
	})
	slices.Sort(rels)
	return rels, err
}

// testManifest is the part of _manifest.json these checks read, decoded
// here independently of package manifests.
type testManifest struct {
	Kind string `json:"kind"`
	Job  struct {
		Settings struct {
			OutputType string `json:"output_type"`
		} `json:"settings"`
	} `json:"job"`
	Columns []testManifestColumn `json:"columns"`
	Inputs  []testEntry          `json:"inputs"`
	Outputs []testEntry          `json:"outputs"`
}

type testManifestColumn struct {
	Name   string                     `json:"name"`
	Type   string                     `json:"type"`
	Method string                     `json:"method"`
	Stats  map[string]json.RawMessage `json:"stats"`
	Params struct {
		Center json.Number `json:"center"`
		Scale  json.Number `json:"scale"`
	} `json:"params"`
	Warnings   []string `json:"warnings"`
	OutOfRange *struct {
		Below uint64 `json:"below"`
		Above uint64 `json:"above"`
	} `json:"out_of_range"`
}

type testEntry struct {
	Path      string            `json:"path"`
	Partition map[string]string `json:"partition"`
	Rows      int64             `json:"rows"`
	Bytes     int64             `json:"bytes"`
	SHA256    string            `json:"sha256"`
}

func readTestManifest(path string) (*testManifest, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	var m testManifest
	if err := json.Unmarshal(data, &m); err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return &m, nil
}

// exactFloat parses a manifest number (or null, as NaN) to float64.
func exactFloat(raw string) (float64, error) {
	if raw == "null" {
		return math.NaN(), nil
	}
	return strconv.ParseFloat(raw, 64)
}

func fileSHA256(path string) (int64, string, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return 0, "", err
	}
	sum := sha256.Sum256(data)
	return int64(len(data)), hex.EncodeToString(sum[:]), nil
}

// problems collects mismatches and reports the first few.
type problems struct {
	list []string
}

func (p *problems) add(format string, args ...any) {
	p.list = append(p.list, fmt.Sprintf(format, args...))
}

func (p *problems) fatal(ts *testscript.TestScript, what string) {
	if len(p.list) == 0 {
		return
	}
	shown := p.list
	if len(shown) > 20 {
		shown = append(shown[:20:20], fmt.Sprintf("... and %d more", len(p.list)-20))
	}
	ts.Fatalf("%s: %d problems:\n\t%s", what, len(p.list), strings.Join(shown, "\n\t"))
}

// checkEntries compares the manifest's inputs or outputs with the files
// under root: same paths, and each entry's bytes, sha256, rows (as the
// independent reader counts them) and Hive partition.
func checkEntries(p *problems, kind, root string, entries []testEntry) {
	rels, err := listParquet(root)
	if err != nil {
		p.add("list %s: %v", root, err)
		return
	}
	var listed []string
	for _, e := range entries {
		listed = append(listed, e.Path)
	}
	if !slices.Equal(rels, listed) {
		p.add("%s: manifest lists %q, %s holds %q", kind, listed, root, rels)
		return
	}
	for _, e := range entries {
		path := filepath.Join(root, filepath.FromSlash(e.Path))
		size, sum, err := fileSHA256(path)
		if err != nil {
			p.add("%s %s: %v", kind, e.Path, err)
			continue
		}
		if size != e.Bytes || sum != e.SHA256 {
			p.add("%s %s: %d bytes sha256 %s, manifest says %d bytes sha256 %s", kind, e.Path, size, sum, e.Bytes, e.SHA256)
		}
		pf, err := readPQ(path)
		if err != nil {
			p.add("%s %s: %v", kind, e.Path, err)
			continue
		}
		if pf.Rows != e.Rows {
			p.add("%s %s: %d rows, manifest says %d", kind, e.Path, pf.Rows, e.Rows)
		}
		if kind == "input" {
			want := map[string]string{}
			segs := strings.Split(e.Path, "/")
			for _, s := range segs[:len(segs)-1] {
				if k, v, ok := strings.Cut(s, "="); ok {
					want[hiveUnescape(k)] = hiveUnescape(v)
				}
			}
			if fmt.Sprint(want) != fmt.Sprint(e.Partition) {
				p.add("input %s: partition %v, want %v", e.Path, e.Partition, want)
			}
		}
	}
}

// hiveUnescape decodes a Hive partition path segment: "%XX" with two hex
// digits is the byte 0xXX; any other '%' stands for itself.
func hiveUnescape(s string) string {
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		if s[i] == '%' && i+2 < len(s) {
			if v, err := strconv.ParseUint(s[i+1:i+3], 16, 8); err == nil {
				b.WriteByte(byte(v))
				i += 2
				continue
			}
		}
		b.WriteByte(s[i])
	}
	return b.String()
}

// cmdCheckOutput checks a committed output dataset value by value.
//
//	check-output IN OUT
//
// It reads OUT/_manifest.json, checks its inputs and outputs lists against
// the files under IN and OUT (paths, sizes, SHA-256, rows, partitions),
// then reads every output file with the independent reader and compares
// it with the input file at the same relative path: a column the manifest
// scales must hold the exact (float64(x) - center) / scale rounded once to
// float64, bit for bit (see forward; then rounded to float32 when
// output_type is float32), with nulls null and NaN NaN; every other column
// must be identical; the row order is kept. The
// parameters embedded in each output's footer must match the manifest,
// and so must a column's out_of_range counts when the manifest has them.
func cmdCheckOutput(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "check-output")
	if len(args) != 2 {
		ts.Fatalf("usage: check-output IN OUT")
	}
	in, out := ts.MkAbs(args[0]), ts.MkAbs(args[1])
	m, err := readTestManifest(filepath.Join(out, "_manifest.json"))
	ts.Check(err)
	var p problems
	if m.Kind != "dataset" {
		p.add("manifest kind %q, want dataset", m.Kind)
	}
	checkEntries(&p, "input", in, m.Inputs)
	checkEntries(&p, "output", out, m.Outputs)
	p.fatal(ts, "check-output "+args[1])

	type param struct{ center, scale, min, max float64 }
	params := map[string]param{}
	for _, c := range m.Columns {
		center, err1 := strconv.ParseFloat(string(c.Params.Center), 64)
		scale, err2 := strconv.ParseFloat(string(c.Params.Scale), 64)
		lo, err3 := exactFloat(string(c.Stats["min"]))
		hi, err4 := exactFloat(string(c.Stats["max"]))
		if err := errors.Join(err1, err2, err3, err4); err != nil {
			ts.Fatalf("column %s: %v", c.Name, err)
		}
		params[c.Name] = param{center, scale, lo, hi}
	}
	// below and above count the finite inputs (as float64) outside each
	// column's fitted [min, max], for the manifest's out_of_range.
	below, above := map[string]uint64{}, map[string]uint64{}
	float32Out := m.Job.Settings.OutputType == "float32"
	wantPhysical := parquet.Type_DOUBLE
	if float32Out {
		wantPhysical = parquet.Type_FLOAT
	}

	values := 0
	for _, o := range m.Outputs {
		src, err := readPQ(filepath.Join(in, filepath.FromSlash(o.Path)))
		ts.Check(err)
		dst, err := readPQ(filepath.Join(out, filepath.FromSlash(o.Path)))
		ts.Check(err)
		// Logical types: the Arrow schema each footer stores, read with
		// Arrow's pqarrow (Parquet physical types alone do not show a
		// time zone, a dictionary or a large string).
		srcSchema, err1 := arrowSchemaOf(filepath.Join(in, filepath.FromSlash(o.Path)))
		dstSchema, err2 := arrowSchemaOf(filepath.Join(out, filepath.FromSlash(o.Path)))
		ts.Check(errors.Join(err1, err2))
		for _, f := range srcSchema.Fields() {
			g, ok := dstSchema.FieldsByName(f.Name)
			_, scaled := params[f.Name]
			switch {
			case !ok || len(g) != 1:
				p.add("%s: output has no column %s", o.Path, f.Name)
			case scaled:
				want := arrow.DataType(arrow.PrimitiveTypes.Float64)
				if float32Out {
					want = arrow.PrimitiveTypes.Float32
				}
				if !arrow.TypeEqual(g[0].Type, want) || !g[0].Nullable {
					p.add("%s: scaled column %s is %s nullable=%v, want nullable %s", o.Path, f.Name, g[0].Type, g[0].Nullable, want)
				}
			case !arrow.TypeEqual(g[0].Type, f.Type) || g[0].Nullable != f.Nullable:
				p.add("%s: pass-through column %s is %s nullable=%v, input %s nullable=%v", o.Path, f.Name, g[0].Type, g[0].Nullable, f.Type, f.Nullable)
			}
		}
		if src.Rows != dst.Rows || len(src.Columns) != len(dst.Columns) {
			p.add("%s: %d rows, %d columns; input has %d rows, %d columns", o.Path, dst.Rows, len(dst.Columns), src.Rows, len(src.Columns))
			continue
		}
		for name := range params {
			if src.column(name) == nil {
				p.add("%s: manifest column %s is not in the input", o.Path, name)
			}
		}
		for j, sc := range src.Columns {
			dc := dst.Columns[j]
			if dc.Name != sc.Name {
				p.add("%s: column %d is %s, input has %s", o.Path, j, dc.Name, sc.Name)
				continue
			}
			prm, scaled := params[sc.Name]
			switch {
			case scaled && (dc.Physical != wantPhysical || !dc.Optional):
				p.add("%s: scaled column %s is %v optional=%v, want optional %v", o.Path, dc.Name, dc.Physical, dc.Optional, wantPhysical)
				continue
			case !scaled && (dc.Physical != sc.Physical || dc.Optional != sc.Optional):
				p.add("%s: pass-through column %s is %v optional=%v, input %v optional=%v", o.Path, dc.Name, dc.Physical, dc.Optional, sc.Physical, sc.Optional)
				continue
			}
			for k, x := range sc.Values {
				y := dc.Values[k]
				values++
				if !scaled {
					if !sameValue(x, y) {
						p.add("%s: %s row %d: %v (%T), input %v (%T)", o.Path, dc.Name, k, y, y, x, x)
					}
					continue
				}
				if x == nil {
					if y != nil {
						p.add("%s: %s row %d: %v, want null", o.Path, dc.Name, k, y)
					}
					continue
				}
				fx, ok := asFloat64(x)
				if !ok {
					p.add("%s: %s row %d: input %v (%T) is not numeric", o.Path, dc.Name, k, x, x)
					continue
				}
				if !math.IsInf(fx, 0) {
					if fx < prm.min {
						below[dc.Name]++
					} else if fx > prm.max {
						above[dc.Name]++
					}
				}
				var want any = forward(fx, prm.center, prm.scale)
				if float32Out {
					want = float32(want.(float64))
				}
				gotF, _ := asFloat64(y)
				wantF, _ := asFloat64(want)
				if math.IsNaN(wantF) && y != nil && math.IsNaN(gotF) {
					continue // NaN stays NaN (the payload is not specified)
				}
				if !sameValue(want, y) {
					p.add("%s: %s row %d: got %v (%T), want RN((%v - %v) / %v) = %v", o.Path, dc.Name, k, y, y, fx, prm.center, prm.scale, want)
				}
			}
		}
		checkEmbedded(&p, o.Path, dst.Meta["lakescale.params"], m)
	}
	// out_of_range is optional; when present it must hold these counts,
	// with the warning outside_fitted_range exactly when one is non-zero.
	for _, c := range m.Columns {
		if c.OutOfRange == nil {
			continue
		}
		if c.OutOfRange.Below != below[c.Name] || c.OutOfRange.Above != above[c.Name] {
			p.add("column %s: out_of_range below %d above %d, inputs have %d below min and %d above max",
				c.Name, c.OutOfRange.Below, c.OutOfRange.Above, below[c.Name], above[c.Name])
		}
		if warned := slices.Contains(c.Warnings, "outside_fitted_range"); warned != (below[c.Name]+above[c.Name] > 0) {
			p.add("column %s: warnings %q with %d values outside the fitted range", c.Name, c.Warnings, below[c.Name]+above[c.Name])
		}
	}
	p.fatal(ts, "check-output "+args[1])
	ts.Logf("check-output: %d files, %d values match", len(m.Outputs), values)
}

// checkEmbedded compares the parameters an output file carries in its
// footer with the manifest's.
func checkEmbedded(p *problems, rel, text string, m *testManifest) {
	var fp struct {
		Columns []struct {
			Name   string      `json:"name"`
			Method string      `json:"method"`
			Center json.Number `json:"center"`
			Scale  json.Number `json:"scale"`
		} `json:"columns"`
	}
	if err := json.Unmarshal([]byte(text), &fp); err != nil {
		p.add("%s: footer key lakescale.params %q: %v", rel, text, err)
		return
	}
	if len(fp.Columns) != len(m.Columns) {
		p.add("%s: footer has parameters for %d columns, manifest %d", rel, len(fp.Columns), len(m.Columns))
		return
	}
	for i, c := range fp.Columns {
		mc := m.Columns[i]
		if c.Name != mc.Name || c.Method != mc.Method || !sameNumber(c.Center, mc.Params.Center) || !sameNumber(c.Scale, mc.Params.Scale) {
			p.add("%s: footer parameters %+v, manifest %s %s %s %s", rel, c, mc.Name, mc.Method, mc.Params.Center, mc.Params.Scale)
		}
	}
}

func sameNumber(a, b json.Number) bool {
	x, err1 := strconv.ParseFloat(string(a), 64)
	y, err2 := strconv.ParseFloat(string(b), 64)
	return err1 == nil && err2 == nil && math.Float64bits(x) == math.Float64bits(y)
}

// exactStats are a column's statistics computed exactly with math/big.
// min and max follow the documented rule that -0 orders below +0 (a
// big.Rat has no signed zero, so minNegZero and maxNegZero keep the sign
// of an extreme that is zero).
type exactStats struct {
	rows, count, nulls, nans, posInf, negInf uint64
	sum, sumSq                               *big.Rat
	min, max                                 *big.Rat
	minNegZero, maxNegZero                   bool
}

func (s *exactStats) add(v any) error {
	s.rows++
	var r *big.Rat
	switch v := v.(type) {
	case nil:
		s.nulls++
		return nil
	case float64, float32:
		f, _ := asFloat64(v)
		switch {
		case math.IsNaN(f):
			s.nans++
			return nil
		case math.IsInf(f, 1):
			s.posInf++
			return nil
		case math.IsInf(f, -1):
			s.negInf++
			return nil
		}
		r = new(big.Rat).SetFloat64(f)
	case int32:
		r = new(big.Rat).SetInt64(int64(v))
	case int64:
		r = new(big.Rat).SetInt64(v)
	case uint64:
		r = new(big.Rat).SetInt(new(big.Int).SetUint64(v))
	default:
		return fmt.Errorf("value %v (%T) is not numeric", v, v)
	}
	s.count++
	s.sum.Add(s.sum, r)
	s.sumSq.Add(s.sumSq, new(big.Rat).Mul(r, r))
	f, _ := asFloat64(v)
	negZero := f == 0 && math.Signbit(f)
	if s.min == nil {
		s.min, s.minNegZero, s.max, s.maxNegZero = r, negZero, r, negZero
		return nil
	}
	if c := r.Cmp(s.min); c < 0 || c == 0 && negZero && !s.minNegZero {
		s.min, s.minNegZero = r, negZero
	}
	if c := r.Cmp(s.max); c > 0 || c == 0 && !negZero && s.maxNegZero {
		s.max, s.maxNegZero = r, negZero
	}
	return nil
}

// roundSqrt returns the square root of r rounded to the nearest float64.
// 4096 bits of working precision leave far more guard bits than any
// statistic here needs.
func roundSqrt(r *big.Rat) float64 {
	f := new(big.Float).SetPrec(4096).SetRat(r)
	v, _ := f.Sqrt(f).Float64()
	return v
}

// floats are the expected float statistics: each exact value rounded once
// to float64 (NaN when undefined).
func (s *exactStats) floats() map[string]float64 {
	nan := math.NaN()
	out := map[string]float64{"mean": nan, "std_sample": nan, "std_population": nan, "min": nan, "max": nan}
	if s.count == 0 {
		return out
	}
	n := new(big.Rat).SetInt(new(big.Int).SetUint64(s.count))
	out["mean"], _ = new(big.Rat).Quo(s.sum, n).Float64()
	out["min"], _ = s.min.Float64()
	out["max"], _ = s.max.Float64()
	if s.minNegZero {
		out["min"] = math.Copysign(0, -1)
	}
	if s.maxNegZero {
		out["max"] = math.Copysign(0, -1)
	}
	// n*Q - S^2 over n^2 (population) or n(n-1) (sample).
	num := new(big.Rat).Mul(n, s.sumSq)
	num.Sub(num, new(big.Rat).Mul(s.sum, s.sum))
	out["std_population"] = roundSqrt(new(big.Rat).Quo(num, new(big.Rat).Mul(n, n)))
	if s.count > 1 {
		n1 := new(big.Rat).Sub(n, big.NewRat(1, 1))
		out["std_sample"] = roundSqrt(new(big.Rat).Quo(num, new(big.Rat).Mul(n, n1)))
	}
	return out
}

// cmdCheckStats recomputes every manifest column's statistics exactly
// from the input files (read with the independent reader; sums, squares
// and square roots in math/big) and compares them with the manifest: the
// counts exactly and each float bit for bit (null for undefined).
//
//	check-stats IN MANIFEST
func cmdCheckStats(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "check-stats")
	if len(args) != 2 {
		ts.Fatalf("usage: check-stats IN MANIFEST")
	}
	in := ts.MkAbs(args[0])
	m, err := readTestManifest(ts.MkAbs(args[1]))
	ts.Check(err)
	rels, err := listParquet(in)
	ts.Check(err)
	acc := make([]exactStats, len(m.Columns))
	for j := range acc {
		acc[j] = exactStats{sum: new(big.Rat), sumSq: new(big.Rat)}
	}
	for _, rel := range rels {
		pf, err := readPQ(filepath.Join(in, filepath.FromSlash(rel)))
		ts.Check(err)
		for j, c := range m.Columns {
			col := pf.column(c.Name)
			if col == nil {
				ts.Fatalf("%s: no column %s", rel, c.Name)
			}
			for _, v := range col.Values {
				if err := acc[j].add(v); err != nil {
					ts.Fatalf("%s: column %s: %v", rel, c.Name, err)
				}
			}
		}
	}
	var p problems
	for j, c := range m.Columns {
		s := &acc[j]
		for name, want := range map[string]uint64{"rows": s.rows, "count": s.count, "nulls": s.nulls, "nans": s.nans, "pos_inf": s.posInf, "neg_inf": s.negInf} {
			got, err := strconv.ParseUint(string(c.Stats[name]), 10, 64)
			if err != nil || got != want {
				p.add("column %s: %s is %s, want %d", c.Name, name, c.Stats[name], want)
			}
		}
		for name, want := range s.floats() {
			got, err := exactFloat(string(c.Stats[name]))
			if err != nil {
				p.add("column %s: %s is %s: %v", c.Name, name, c.Stats[name], err)
				continue
			}
			if math.IsNaN(want) != math.IsNaN(got) || !math.IsNaN(want) && math.Float64bits(got) != math.Float64bits(want) {
				p.add("column %s: %s is %s, exact value rounded to float64 is %v", c.Name, name, c.Stats[name], want)
			}
		}
	}
	p.fatal(ts, "check-stats "+args[1])
	ts.Logf("check-stats: %d columns over %d files match", len(m.Columns), len(rels))
}

// cmdColStat reads one column of every output file under OUT with the
// independent reader and checks a statistic of its finite values, computed
// here in float64, against WANT within TOL (absolute).
//
//	col-stat OUT COLUMN min|max|absmax|range|mean|std WANT TOL
//
// std is the population standard deviation. It shows what a method
// promises (for example minmax onto [-1, 1], or z-scores with mean 0 and
// standard deviation 1) without trusting the manifest's parameters.
func cmdColStat(ts *testscript.TestScript, neg bool, args []string) {
	if len(args) != 5 {
		ts.Fatalf("usage: col-stat OUT COLUMN min|max|absmax|range|mean|std WANT TOL")
	}
	want, err1 := strconv.ParseFloat(args[3], 64)
	tol, err2 := strconv.ParseFloat(args[4], 64)
	ts.Check(errors.Join(err1, err2))
	out := ts.MkAbs(args[0])
	rels, err := listParquet(out)
	ts.Check(err)
	var xs []float64
	for _, rel := range rels {
		pf, err := readPQ(filepath.Join(out, filepath.FromSlash(rel)))
		ts.Check(err)
		col := pf.column(args[1])
		if col == nil {
			ts.Fatalf("%s: no column %s", rel, args[1])
		}
		for _, v := range col.Values {
			if f, ok := asFloat64(v); ok && !math.IsNaN(f) && !math.IsInf(f, 0) {
				xs = append(xs, f)
			}
		}
	}
	if len(xs) == 0 {
		ts.Fatalf("column %s has no finite values under %s", args[1], args[0])
	}
	var got float64
	mean := 0.0
	for _, x := range xs {
		mean += x
	}
	mean /= float64(len(xs))
	switch args[2] {
	case "min":
		got = slices.Min(xs)
	case "max":
		got = slices.Max(xs)
	case "absmax":
		got = max(math.Abs(slices.Min(xs)), math.Abs(slices.Max(xs)))
	case "range":
		got = slices.Max(xs) - slices.Min(xs)
	case "mean":
		got = mean
	case "std":
		ss := 0.0
		for _, x := range xs {
			ss += (x - mean) * (x - mean)
		}
		got = math.Sqrt(ss / float64(len(xs)))
	default:
		ts.Fatalf("col-stat: unknown statistic %q", args[2])
	}
	ok := math.Abs(got-want) <= tol
	if ok == neg {
		ts.Fatalf("column %s: %s of %d values is %v, want %v within %v", args[1], args[2], len(xs), got, want, tol)
	}
	ts.Logf("column %s: %s of %d values is %v", args[1], args[2], len(xs), got)
}
