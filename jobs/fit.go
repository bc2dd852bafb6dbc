package jobs

import (
	"fmt"
	"io"
	"regexp"
	"strconv"
	"strings"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
)

// FitFilter selects, by their Hive partition values, the input files whose
// statistics define the parameters (--fit, or where in the job file's
// [fit] section). Every condition must hold. The zero value selects every
// file.
//
// Syntax: conditions separated by ',', each KEY OP VALUE with OP one of
// = != < <= > >=. With = and != the value may be a set, v1|v2|v3 (the key
// equals one of them, or none of them). = and != compare text exactly;
// the range operators compare numbers when both sides are decimal numbers
// ("7" < "10") and text byte by byte otherwise, which orders ISO dates
// (2026-01-31 < 2026-02-01). Spaces around keys and values are ignored; a
// backslash makes the next character literal (\, \| \= \< \> \! \\ and a
// kept space). A file without the key fails the condition; a key that
// appears at two depths is judged by the deeper segment, as in the
// manifest's partition map.
type FitFilter []FitCondition

// FitCondition is one KEY OP VALUE of a FitFilter.
type FitCondition struct {
	Key    string
	Op     string   // "=", "!=", "<", "<=", ">", ">="
	Values []string // a set for = and !=, exactly one value otherwise
}

// fitChar is one byte of a filter with whether a backslash escaped it.
type fitChar struct {
	c   byte
	esc bool
}

// ParseFit parses a filter. The empty string (or only spaces) is the
// filter that selects every file.
func ParseFit(s string) (FitFilter, error) {
	chars, err := fitChars(s)
	if err != nil {
		return nil, err
	}
	if len(trimFit(chars)) == 0 {
		return nil, nil
	}
	var f FitFilter
	for _, part := range splitFit(chars, ',') {
		c, err := parseFitCondition(part)
		if err != nil {
			return nil, fmt.Errorf("fit filter %q: %w", s, err)
		}
		f = append(f, c)
	}
	return f, nil
}

func fitChars(s string) ([]fitChar, error) {
	out := make([]fitChar, 0, len(s))
	for i := 0; i < len(s); i++ {
		if s[i] != '\\' {
			out = append(out, fitChar{c: s[i]})
			continue
		}
		if i+1 == len(s) {
			return nil, fmt.Errorf("fit filter %q: trailing backslash", s)
		}
		i++
		out = append(out, fitChar{c: s[i], esc: true})
	}
	return out, nil
}

// splitFit splits at unescaped sep.
func splitFit(chars []fitChar, sep byte) [][]fitChar {
	var parts [][]fitChar
	start := 0
	for i, ch := range chars {
		if ch.c == sep && !ch.esc {
			parts = append(parts, chars[start:i])
			start = i + 1
		}
	}
	return append(parts, chars[start:])
}

func isFitSpace(ch fitChar) bool { return !ch.esc && (ch.c == ' ' || ch.c == '\t') }

func isFitOp(ch fitChar) bool { return !ch.esc && strings.IndexByte("=!<>", ch.c) >= 0 }

// trimFit drops unescaped spaces and tabs at both ends.
func trimFit(chars []fitChar) []fitChar {
	for len(chars) > 0 && isFitSpace(chars[0]) {
		chars = chars[1:]
	}
	for len(chars) > 0 && isFitSpace(chars[len(chars)-1]) {
		chars = chars[:len(chars)-1]
	}
	return chars
}

func fitText(chars []fitChar) string {
	b := make([]byte, len(chars))
	for i, ch := range chars {
		b[i] = ch.c
	}
	return string(b)
}

func parseFitCondition(part []fitChar) (FitCondition, error) {
	part = trimFit(part)
	if len(part) == 0 {
		return FitCondition{}, fmt.Errorf("empty condition")
	}
	i := 0
	for i < len(part) && !isFitOp(part[i]) {
		i++
	}
	if i == len(part) {
		return FitCondition{}, fmt.Errorf("condition %q has no operator (want KEY=VALUE, KEY!=VALUE, KEY<VALUE, KEY<=VALUE, KEY>VALUE or KEY>=VALUE)", fitText(part))
	}
	op := string(part[i].c)
	next := i + 1
	if next < len(part) && part[next].c == '=' && !part[next].esc && op != "=" {
		op += "="
		next++
	}
	if op == "!" {
		return FitCondition{}, fmt.Errorf("condition %q: '!' must be followed by '='", fitText(part))
	}
	c := FitCondition{Key: fitText(trimFit(part[:i])), Op: op}
	if c.Key == "" {
		return FitCondition{}, fmt.Errorf("condition %q has no key", fitText(part))
	}
	rest := part[next:]
	values := [][]fitChar{rest}
	if op == "=" || op == "!=" {
		values = splitFit(rest, '|')
	}
	for _, v := range values {
		v = trimFit(v)
		for _, ch := range v {
			if isFitOp(ch) || (ch.c == '|' && !ch.esc) {
				return FitCondition{}, fmt.Errorf("condition %q: %q in a value must be escaped with a backslash", fitText(part), ch.c)
			}
		}
		if len(v) == 0 && op != "=" && op != "!=" {
			return FitCondition{}, fmt.Errorf("condition %q has no value", fitText(part))
		}
		c.Values = append(c.Values, fitText(v))
	}
	return c, nil
}

// String is the canonical text of the filter (recorded in the manifest):
// ParseFit gives the same filter back.
func (f FitFilter) String() string {
	conds := make([]string, len(f))
	for i, c := range f {
		vals := make([]string, len(c.Values))
		for j, v := range c.Values {
			vals[j] = escapeFit(v)
		}
		conds[i] = escapeFit(c.Key) + c.Op + strings.Join(vals, "|")
	}
	return strings.Join(conds, ",")
}

func escapeFit(s string) string {
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		c := s[i]
		edge := i == 0 || i == len(s)-1
		if strings.IndexByte(`\,|=!<>`, c) >= 0 || (edge && (c == ' ' || c == '\t')) {
			b.WriteByte('\\')
		}
		b.WriteByte(c)
	}
	return b.String()
}

// Match reports whether a file with these partition segments is selected.
func (f FitFilter) Match(part []arrowio.KV) bool {
	for _, c := range f {
		v, ok := "", false
		for _, kv := range part {
			if kv.Key == c.Key {
				v, ok = kv.Value, true
			}
		}
		if !ok || !c.holds(v) {
			return false
		}
	}
	return true
}

func (c FitCondition) holds(v string) bool {
	switch c.Op {
	case "=", "!=":
		in := false
		for _, w := range c.Values {
			in = in || v == w
		}
		return in == (c.Op == "=")
	}
	d := comparePartition(v, c.Values[0])
	switch c.Op {
	case "<":
		return d < 0
	case "<=":
		return d <= 0
	case ">":
		return d > 0
	default: // ">="
		return d >= 0
	}
}

// decimalNumber is a plain decimal number: digits, an optional fraction
// and exponent, no hex, no "Inf" or "NaN".
var decimalNumber = regexp.MustCompile(`^[+-]?([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?$`)

// comparePartition orders two partition values: numerically when both are
// decimal numbers, else as text.
func comparePartition(a, b string) int {
	if decimalNumber.MatchString(a) && decimalNumber.MatchString(b) {
		x, errA := strconv.ParseFloat(a, 64)
		y, errB := strconv.ParseFloat(b, 64)
		if errA == nil && errB == nil {
			switch {
			case x < y:
				return -1
			case x > y:
				return 1
			}
			return 0
		}
	}
	return strings.Compare(a, b)
}

// fitSelection marks the files the filter selects; nil when there is no
// filter (every file contributes). Selecting none is an error.
func fitSelection(f FitFilter, files []arrowio.File) ([]bool, error) {
	if len(f) == 0 {
		return nil, nil
	}
	use := make([]bool, len(files))
	n := 0
	for i, file := range files {
		if use[i] = f.Match(file.Partition); use[i] {
			n++
		}
	}
	if n == 0 {
		return nil, fmt.Errorf("fit filter %s selects none of the %d input files (first: %s)", f, len(files), files[0].Rel)
	}
	return use, nil
}

// nightly sets up what a run's pass one needs beyond the plan: the fit
// selection and the statistics cache (defCache when --cache is not given,
// "" for none). It logs the discovery phase.
func (p *plan) nightly(cfg *Config, defCache string, log *runLog) error {
	var err error
	if p.Fit, err = fitSelection(cfg.Fit, p.Files); err != nil {
		return err
	}
	if p.cache, err = openCache(cfg, defCache); err != nil {
		return err
	}
	cache := ""
	if p.cache != nil {
		cache = p.cache.dir
	}
	log.phase("discover", "files", len(p.Files), "files_fitted", p.fittedCount(), "columns", len(p.Columns), "fit", cfg.Fit.String(), "cache", cache)
	return nil
}

// fittedCount is how many files the statistics come from.
func (p *plan) fittedCount() int {
	n := 0
	for i := range p.Files {
		if p.fits(i) {
			n++
		}
	}
	return n
}

// input is file i's manifest entry, marked with whether it went into the
// statistics when a fit filter is in use.
func (p *plan) input(i int, r fileResult) manifests.Input {
	in := input(p.Files[i], r)
	if p.Fit != nil {
		fit := p.Fit[i]
		in.Fit = &fit
	}
	return in
}

// showFit prints, for show, the fit filter and how many inputs it chose.
func showFit(w io.Writer, m *manifests.Manifest) {
	if m.Job.Settings.Fit == "" {
		return
	}
	n, marked := 0, false
	for _, in := range m.Inputs {
		if in.Fit != nil {
			marked = true
			if *in.Fit {
				n++
			}
		}
	}
	// Like the rest of Show's header, errors surface at the table's Flush.
	if marked {
		_, _ = fmt.Fprintf(w, "statistics from %d of %d inputs (fit %s)\n", n, len(m.Inputs), m.Job.Settings.Fit)
	} else {
		_, _ = fmt.Fprintf(w, "parameters fitted on the inputs matching %s\n", m.Job.Settings.Fit)
	}
}

// showOutside prints, for show, the columns with values outside the
// fitted range.
func showOutside(w io.Writer, m *manifests.Manifest) error {
	for _, c := range m.Columns {
		if o := c.OutOfRange; o != nil && o.Below+o.Above > 0 {
			if _, err := fmt.Fprintf(w, "%s: %d values below the fitted min %s, %d above the fitted max %s\n",
				c.Name, o.Below, num(c.Stats.Min), o.Above, num(c.Stats.Max)); err != nil {
				return err
			}
		}
	}
	return nil
}
