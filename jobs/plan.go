package jobs

import (
	"cmp"
	"fmt"
	"path"
	"slices"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/memory"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/stats"
)

// column is one selected column with its rule.
type column struct {
	Name string
	Type arrow.DataType
	Kind stats.Kind
	Rule Rule
}

// plan is the discovered inputs and the selected columns.
type plan struct {
	Files   []arrowio.File
	Columns []column
	Rules   []Rule // the rules Columns came from; nil when they came from a parameters file
	Fit     []bool // inputs selected by the fit filter; nil: every input
	cache   *statsCache

	bounds   [][2]float64 // per column, fitted [min, max] to count values outside of; nil: no counting
	inverted bool         // pass two maps back to original units (invert)
	share    []bool       // files of this shard's share (sharded measure and apply); nil: every file
}

// partitionName is the Hive partition of a file as "k=v/k=v", or its path.
func partitionName(f arrowio.File) string {
	if len(f.Partition) == 0 {
		return f.Rel
	}
	parts := make([]string, len(f.Partition))
	for i, kv := range f.Partition {
		parts[i] = kv.Key + "=" + kv.Value
	}
	return strings.Join(parts, "/")
}

// discover lists the inputs and selects columns from the first file's
// schema. Every other file is checked against the selection in pass one.
func discover(input string, rules []Rule) (*plan, error) {
	files, err := arrowio.Discover(input)
	if err != nil {
		return nil, err
	}
	r, err := arrowio.Open(files[0].Abs, memory.DefaultAllocator)
	if err != nil {
		return nil, err
	}
	defer r.Close()
	cols, err := selectColumns(r.Schema(), rules)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", files[0].Rel, err)
	}
	return &plan{Files: files, Columns: cols, Rules: rules}, nil
}

// hasMeta reports whether a pattern is a glob rather than a plain name.
func hasMeta(p string) bool { return strings.ContainsAny(p, `*?[\`) }

// selectColumns applies the rules to a schema.
func selectColumns(sc *arrow.Schema, rules []Rule) ([]column, error) {
	var cols []column
	taken := make(map[string]bool)
	for ri, r := range rules {
		for _, p := range r.Include {
			matched := false
			for _, f := range sc.Fields() {
				if ok, _ := path.Match(p, f.Name); !ok {
					continue
				}
				kind, numeric := stats.KindOf(f.Type)
				if !numeric {
					if !hasMeta(p) {
						return nil, fmt.Errorf("%w: column %s is %s, want an integer or float column", ErrColumn, f.Name, f.Type)
					}
					continue
				}
				matched = true
				if taken[f.Name] || excluded(f.Name, r.Exclude) {
					continue
				}
				taken[f.Name] = true
				cols = append(cols, column{Name: f.Name, Type: f.Type, Kind: kind, Rule: rules[ri]})
			}
			if !matched {
				return nil, fmt.Errorf("%w: pattern %q matches no integer or float column (have %s)", ErrColumn, p, fieldList(sc))
			}
		}
	}
	// Keep schema order so outputs and manifests read naturally.
	order := make(map[string]int, len(sc.Fields()))
	for i, f := range sc.Fields() {
		order[f.Name] = i
	}
	slices.SortStableFunc(cols, func(a, b column) int { return cmp.Compare(order[a.Name], order[b.Name]) })
	return cols, nil
}

func excluded(name string, patterns []string) bool {
	for _, p := range patterns {
		if ok, _ := path.Match(p, name); ok {
			return true
		}
	}
	return false
}

func fieldList(sc *arrow.Schema) string {
	names := make([]string, len(sc.Fields()))
	for i, f := range sc.Fields() {
		names[i] = f.Name + " " + f.Type.String()
	}
	return strings.Join(names, ", ")
}

// checkSelection applies the rules to another file's schema and fails if
// they select a column the first file's schema did not give, so that drift
// is found whichever file sorts first.
func (p *plan) checkSelection(sc *arrow.Schema, this string) error {
	if p.Rules == nil {
		return nil
	}
	cols, err := selectColumns(sc, p.Rules)
	if err != nil {
		return err
	}
	first := make(map[string]bool, len(p.Columns))
	for _, c := range p.Columns {
		first[c.Name] = true
	}
	for _, c := range cols {
		if !first[c.Name] {
			return fmt.Errorf("%w: column %s is in %s but missing from %s", ErrSchemaMismatch, c.Name, this, p.Files[0].Rel)
		}
	}
	return nil
}

// columnIndices finds the selected columns in a file's schema and checks
// their types against the first file's, naming both files on drift.
func columnIndices(sc *arrow.Schema, cols []column, first, this string) ([]int, error) {
	idx := make([]int, len(cols))
	for i, c := range cols {
		fi := sc.FieldIndices(c.Name)
		if len(fi) != 1 {
			return nil, fmt.Errorf("%w: column %s is in %s but missing from %s", ErrSchemaMismatch, c.Name, first, this)
		}
		if t := sc.Field(fi[0]).Type; !arrow.TypeEqual(t, c.Type) {
			return nil, fmt.Errorf("%w: column %s is %s in %s but %s in %s", ErrSchemaMismatch, c.Name, c.Type, first, t, this)
		}
		idx[i] = fi[0]
	}
	return idx, nil
}
