package jobs

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"path"
	"strconv"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// Invert maps scaled columns back to original units, x = y·scale + center
// (stats.InverseTransform), with the parameters of the manifest or
// statistics file cfg.ParamsPath. cfg.Input is a scaled dataset folder or
// one Parquet file; columns are glob patterns over the parameters' columns
// (all of them when empty). The result is written to cfg.Output like any
// output: every file atomically, under the output's lock, with a manifest
// of kind "inverted" written last. Mapped-back columns are float64 (an
// integer column comes back as float64 values); every other column passes
// through. A file whose embedded parameters (manifests.MetadataKey) differ
// from cfg.ParamsPath's for a selected column is refused, as is a file
// that was already mapped back.
func Invert(ctx context.Context, cfg Config, columns []string) (err error) {
	ctx, cfg.stop = context.WithCancelCause(ctx)
	defer cfg.stop(nil)
	log, end, err := begin(&cfg, "invert", true, cfg.ParamsPath, "--params")
	if err != nil {
		return err
	}
	defer func() { err = end(err) }()
	src, raw, err := readManifest(cfg.ParamsPath)
	if err != nil {
		return err
	}
	sel, err := invertColumns(src, columns, cfg.ParamsPath)
	if err != nil {
		return err
	}
	files, err := arrowio.DiscoverInput(cfg.Input)
	if err != nil {
		return err
	}
	p := &plan{Files: files, inverted: true}
	if err := p.scaledColumnsFrom(sel); err != nil {
		return err
	}
	params := make([]stats.Params, len(sel))
	for j, c := range sel {
		params[j] = paramsOf(c)
	}
	m := cfg.newManifest(manifests.KindInverted, sel)
	cfg.inheritParams(m, src, raw)
	if err := p.checkEmbedded(ctx, &cfg, m.FileParams()); err != nil {
		return err
	}
	log.phase("discover", "files", len(files), "columns", len(sel))
	return p.writeAndCommit(ctx, &cfg, params, m, log)
}

// invertColumns picks the parameter columns the patterns name (all when
// there are none), in the parameters' order.
func invertColumns(src *manifests.Manifest, patterns []string, paramsPath string) ([]manifests.Column, error) {
	if len(patterns) == 0 {
		if len(src.Columns) == 0 {
			return nil, fmt.Errorf("%s: %w: no columns to map back", paramsPath, ErrColumn)
		}
		return src.Columns, nil
	}
	names := make([]string, len(src.Columns))
	for i, c := range src.Columns {
		names[i] = c.Name
	}
	take := make([]bool, len(src.Columns))
	for _, p := range patterns {
		if _, err := path.Match(p, ""); err != nil || p == "" {
			return nil, fmt.Errorf("%w: column pattern %q: %v", ErrUsage, p, path.ErrBadPattern)
		}
		matched := false
		for i, n := range names {
			if ok, _ := path.Match(p, n); ok {
				take[i], matched = true, true
			}
		}
		if !matched {
			return nil, fmt.Errorf("%w: %w: pattern %q matches no column of %s (have %s)", ErrUsage, ErrColumn, p, paramsPath, strings.Join(names, ", "))
		}
	}
	var sel []manifests.Column
	for i, c := range src.Columns {
		if take[i] {
			sel = append(sel, c)
		}
	}
	return sel, nil
}

// scaledColumnsFrom selects the scaled columns in the first input, which
// must be float64 or float32 (as lakescale writes them).
func (p *plan) scaledColumnsFrom(sel []manifests.Column) error {
	first := p.Files[0]
	_, sc, _, err := arrowio.ReadFooter(first.Abs)
	if err != nil {
		return err
	}
	for _, c := range sel {
		fi := sc.FieldIndices(c.Name)
		if len(fi) != 1 {
			return fmt.Errorf("%s: %w: column %s from the parameters is missing", first.Rel, ErrColumn, c.Name)
		}
		t := sc.Field(fi[0]).Type
		if t.ID() != arrow.FLOAT64 && t.ID() != arrow.FLOAT32 {
			return fmt.Errorf("%s: %w: column %s is %s, want the float64 or float32 of a scaled column", first.Rel, ErrColumn, c.Name, t)
		}
		p.Columns = append(p.Columns, column{Name: c.Name, Type: t, Kind: stats.KindFloat})
	}
	return nil
}

// checkEmbedded refuses inputs whose footers say they were scaled with
// other parameters for a selected column, or were already mapped back.
func (p *plan) checkEmbedded(ctx context.Context, cfg *Config, want manifests.FileParams) error {
	byName := make(map[string]manifests.FileColumn, len(want.Columns))
	for _, c := range want.Columns {
		byName[c.Name] = c
	}
	return forEachFile(ctx, cfg.Workers, largestFirst(p.Files), func(ctx context.Context, i int) error {
		f := p.Files[i]
		_, _, meta, err := arrowio.ReadFooter(f.Abs)
		if err != nil {
			return err
		}
		if _, ok := meta[InvertedMetadataKey]; ok {
			return fmt.Errorf("%s: already mapped back to original units (footer key %s)", f.Rel, InvertedMetadataKey)
		}
		text, ok := meta[manifests.MetadataKey]
		if !ok {
			return nil // not written by lakescale: trust the parameters given
		}
		got, err := manifests.DecodeFileParams(text)
		if err != nil {
			return fmt.Errorf("%s: %w", f.Rel, err)
		}
		for _, g := range got.Columns {
			w, ok := byName[g.Name]
			if ok && g != w {
				return fmt.Errorf("%s: column %s was scaled with %s center %v scale %v, but %s has %s center %v scale %v",
					f.Rel, g.Name, g.Method, g.Center, g.Scale, cfg.ParamsPath, w.Method, w.Center, w.Scale)
			}
		}
		return nil
	})
}

// InvertValues maps scaled numbers back to original units for one column
// of the parameters file: one number per line from r, each written to w
// as the shortest decimal that reads back to the same float64 (so it can
// be parsed again exactly). Blank lines stay blank; NaN and ±Inf pass
// through the formula.
func InvertValues(r io.Reader, w io.Writer, paramsPath, column string) error {
	if paramsPath == "" {
		return fmt.Errorf("%w: no parameters: give --params", ErrUsage)
	}
	src, _, err := readManifest(paramsPath)
	if err != nil {
		return err
	}
	c := src.Column(column)
	if c == nil {
		names := make([]string, len(src.Columns))
		for i, c := range src.Columns {
			names[i] = c.Name
		}
		return fmt.Errorf("%w: %w: column %q is not in %s (have %s)", ErrUsage, ErrColumn, column, paramsPath, strings.Join(names, ", "))
	}
	p := paramsOf(*c)
	if err := p.Validate(); err != nil {
		return fmt.Errorf("%s: column %s: %w", paramsPath, column, err)
	}
	in := bufio.NewScanner(r)
	out := bufio.NewWriter(w)
	buf := make([]byte, 0, 32)
	for line := 1; in.Scan(); line++ {
		text := strings.TrimSpace(in.Text())
		if text != "" {
			y, err := strconv.ParseFloat(text, 64)
			if err != nil {
				return fmt.Errorf("stdin line %d: %q is not a number", line, text)
			}
			buf = strconv.AppendFloat(buf[:0], p.Inverse(y), 'g', -1, 64)
			_, _ = out.Write(buf) // a bufio.Writer keeps the error for WriteByte and Flush
		}
		if err := out.WriteByte('\n'); err != nil {
			return err
		}
	}
	if err := in.Err(); err != nil {
		return fmt.Errorf("read stdin: %w", err)
	}
	return out.Flush()
}
