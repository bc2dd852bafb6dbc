package jobs

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"path"
	"path/filepath"
	"runtime"
	"strings"
	"time"

	"github.com/BurntSushi/toml"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// Defaults.
const (
	DefaultBatchRows = 64 << 10
	DefaultMethod    = stats.ZScore
)

// InfPolicy says what an infinite value in a selected column does.
type InfPolicy string

const (
	InfError InfPolicy = "error" // fail naming file, column and row group (default)
	InfSkip  InfPolicy = "skip"  // count, leave out of the statistics, pass through
)

// Rule assigns a method to the numeric columns whose names match one of
// Include and none of Exclude (path.Match glob patterns). The first
// matching rule wins; a column no rule matches passes through unchanged.
type Rule struct {
	Include []string
	Exclude []string
	Method  stats.Method
	Options stats.Options
}

// Config is one resolved job.
type Config struct {
	Input       string
	Output      string
	Rules       []Rule
	Std         stats.StdKind
	Workers     int
	Compression arrowio.Compression
	Float32     bool
	InfPolicy   InfPolicy
	Overwrite   bool
	// SkipCommitCheck skips the start-up check that the output's store
	// refuses a second create of the same object (see checkCommitSupport).
	SkipCommitCheck bool
	BatchRows       int64
	Fit             FitFilter // inputs whose statistics define the parameters (all when empty)

	StatsPath  string // measure: where the statistics file goes
	ParamsPath string // apply, invert: manifest or statistics file to take parameters from

	CacheDir    string // statistics cache; "" means OUTPUT/_cache for run and none for measure
	NoCache     bool   // measure every file (the cache is rewritten, never read)
	LogFormat   string // "" (no log), "text" or "json": a line per phase and a summary on Log
	MetricsPath string // Prometheus text file written after a successful run

	// owned and ownAll say which stale Parquet files in the output tree a
	// commit may remove (set by prepareOutput).
	owned  map[string]bool
	ownAll bool
	// lockCheck fails once the output's lock has been taken over by
	// another run (set by lockOutput); checked before prepareOutput
	// removes anything and before the commit.
	lockCheck func() error
	// committingShards lets checkOutput accept a sharded apply's
	// uncommitted output: commit is what finishes it.
	committingShards bool
	// stop, when set by a command, cancels its work with a cause; the
	// lock renewal calls it when the lock is lost.
	stop context.CancelCauseFunc

	Version string           // program version, recorded in the manifest
	Now     func() time.Time // clock for created_at
	Out     io.Writer        // human-readable progress and results
	Log     io.Writer        // log lines (LogFormat); nil means io.Discard
}

// Overrides are command-line values; nil (or a nil slice) means "not given".
// They take precedence over the job file.
type Overrides struct {
	Input, Output, Method, Std, Compression, OutputType, OnInfinity *string
	Columns, Exclude                                                []string
	Workers                                                         *int
	Overwrite                                                       bool
	Fit                                                             *string // replaces the job file's [fit] section
}

// jobFile is the TOML job file. Unknown keys are errors.
type jobFile struct {
	Input       string     `toml:"input"`
	Output      string     `toml:"output"`
	Std         string     `toml:"std"`
	Workers     int        `toml:"workers"`
	Compression string     `toml:"compression"`
	OutputType  string     `toml:"output_type"`
	OnInfinity  string     `toml:"on_infinity"`
	Rules       []fileRule `toml:"rule"`
	Fit         struct {
		Where []string `toml:"where"` // conditions, all must hold; ParseFit syntax
	} `toml:"fit"`
}

type fileRule struct {
	Columns []string  `toml:"columns"`
	Exclude []string  `toml:"exclude"`
	Method  string    `toml:"method"`
	Std     string    `toml:"std"`
	Range   []float64 `toml:"range"`
}

// Load resolves the effective job from an optional TOML job file and the
// command-line overrides. Errors in flag values wrap ErrUsage; errors in
// the job file name the file.
func Load(jobPath string, o Overrides) (Config, error) {
	var jf jobFile
	if jobPath != "" {
		data, err := arrowio.ReadFile(jobPath)
		if err != nil {
			return Config{}, err
		}
		md, err := toml.NewDecoder(bytes.NewReader(data)).Decode(&jf)
		if err != nil {
			return Config{}, fmt.Errorf("job file %s: %w", jobPath, err)
		}
		if keys := md.Undecoded(); len(keys) > 0 {
			names := make([]string, len(keys))
			for i, k := range keys {
				names[i] = k.String()
			}
			return Config{}, fmt.Errorf("job file %s: unknown key %s", jobPath, strings.Join(names, ", "))
		}
	}
	fileErr := func(err error) error { return fmt.Errorf("job file %s: %w", jobPath, err) }
	flagErr := func(err error) error { return fmt.Errorf("%w: %w", ErrUsage, err) }

	// Relative paths in a job file are relative to the file, so a job file
	// and its data can move together.
	for _, p := range []*string{&jf.Input, &jf.Output} {
		if *p != "" && !filepath.IsAbs(*p) && !arrowio.HasScheme(*p) {
			*p = arrowio.Join(arrowio.Dir(jobPath), *p)
		}
	}
	cfg := Config{Input: jf.Input, Output: jf.Output, Overwrite: o.Overwrite, BatchRows: DefaultBatchRows, Now: time.Now, Out: io.Discard}
	pick := func(file string, flag *string) (string, func(error) error) {
		if flag != nil {
			return *flag, flagErr
		}
		return file, fileErr
	}
	var err error
	if o.Input != nil {
		cfg.Input = *o.Input
	}
	if o.Output != nil {
		cfg.Output = *o.Output
	}

	stdText, wrap := pick(jf.Std, o.Std)
	cfg.Std = stats.StdPopulation
	if stdText != "" {
		if cfg.Std, err = stats.ParseStdKind(stdText); err != nil {
			return Config{}, wrap(err)
		}
	}

	cfg.Workers = runtime.GOMAXPROCS(0)
	switch {
	case o.Workers != nil:
		if *o.Workers < 1 {
			return Config{}, flagErr(fmt.Errorf("--workers %d: want at least 1", *o.Workers))
		}
		cfg.Workers = *o.Workers
	case jf.Workers < 0:
		return Config{}, fileErr(fmt.Errorf("workers %d: want at least 1", jf.Workers))
	case jf.Workers > 0:
		cfg.Workers = jf.Workers
	}

	text, wrap := pick(jf.Compression, o.Compression)
	switch c := arrowio.Compression(text); c {
	case "":
		cfg.Compression = arrowio.Zstd
	case arrowio.Zstd, arrowio.Snappy, arrowio.None:
		cfg.Compression = c
	default:
		return Config{}, wrap(fmt.Errorf("compression %q: want zstd, snappy or none", text))
	}

	text, wrap = pick(jf.OutputType, o.OutputType)
	switch text {
	case "", "float64":
	case "float32":
		cfg.Float32 = true
	default:
		return Config{}, wrap(fmt.Errorf("output type %q: want float64 or float32", text))
	}

	text, wrap = pick(jf.OnInfinity, o.OnInfinity)
	switch p := InfPolicy(text); p {
	case "":
		cfg.InfPolicy = InfError
	case InfError, InfSkip:
		cfg.InfPolicy = p
	default:
		return Config{}, wrap(fmt.Errorf("on-infinity %q: want error or skip", text))
	}

	if o.Fit != nil {
		if cfg.Fit, err = ParseFit(*o.Fit); err != nil {
			return Config{}, flagErr(err)
		}
	} else {
		for _, w := range jf.Fit.Where {
			f, err := ParseFit(w)
			if err != nil {
				return Config{}, fileErr(fmt.Errorf("fit: %w", err))
			}
			cfg.Fit = append(cfg.Fit, f...)
		}
	}

	// Column rules: --columns/--exclude/--method replace the file's rules.
	if o.Columns != nil || o.Exclude != nil || o.Method != nil {
		r := fileRule{Columns: o.Columns, Exclude: o.Exclude}
		if o.Method != nil {
			r.Method = *o.Method
		}
		rule, err := resolveRule(r, cfg.Std)
		if err != nil {
			return Config{}, flagErr(err)
		}
		cfg.Rules = []Rule{rule}
	} else {
		for i, fr := range jf.Rules {
			rule, err := resolveRule(fr, cfg.Std)
			if err != nil {
				return Config{}, fileErr(fmt.Errorf("rule %d: %w", i+1, err))
			}
			cfg.Rules = append(cfg.Rules, rule)
		}
		if len(cfg.Rules) == 0 {
			rule, _ := resolveRule(fileRule{}, cfg.Std)
			cfg.Rules = []Rule{rule}
		}
	}
	return cfg, nil
}

func resolveRule(fr fileRule, std stats.StdKind) (Rule, error) {
	r := Rule{Include: fr.Columns, Exclude: fr.Exclude, Method: DefaultMethod, Options: stats.Options{Std: std}}
	if len(r.Include) == 0 {
		r.Include = []string{"*"}
	}
	for _, p := range append(append([]string(nil), r.Include...), r.Exclude...) {
		if _, err := path.Match(p, ""); err != nil || p == "" {
			return Rule{}, fmt.Errorf("column pattern %q: %w", p, errors.Join(err, path.ErrBadPattern))
		}
	}
	var err error
	if fr.Method != "" {
		if r.Method, err = stats.ParseMethod(fr.Method); err != nil {
			return Rule{}, err
		}
	}
	if fr.Std != "" {
		if r.Options.Std, err = stats.ParseStdKind(fr.Std); err != nil {
			return Rule{}, err
		}
	}
	switch len(fr.Range) {
	case 0:
		if r.Method == stats.MinMax {
			r.Options.RangeMin, r.Options.RangeMax = 0, 1
		}
	case 2:
		lo, hi := fr.Range[0], fr.Range[1]
		if r.Method != stats.MinMax {
			return Rule{}, fmt.Errorf("range applies to method minmax, not %s", r.Method)
		}
		if math.IsNaN(lo) || math.IsNaN(hi) || math.IsInf(lo, 0) || math.IsInf(hi, 0) || lo >= hi {
			return Rule{}, fmt.Errorf("range [%v, %v]: want two finite numbers, low < high", lo, hi)
		}
		r.Options.RangeMin, r.Options.RangeMax = lo, hi
	default:
		return Rule{}, fmt.Errorf("range has %d numbers, want [low, high]", len(fr.Range))
	}
	return r, nil
}

// checkLocations checks the form of every location given (a path, file://
// or s3://) before anything is read; a bad one is a usage error.
func (c *Config) checkLocations(extra ...string) error {
	for _, loc := range append([]string{c.Input, c.Output, c.StatsPath, c.ParamsPath, c.CacheDir, c.MetricsPath}, extra...) {
		if err := arrowio.CheckLocation(loc); err != nil {
			return fmt.Errorf("%w: %w", ErrUsage, err)
		}
	}
	return nil
}

// checkPaths validates input and output before any work is done.
func (c *Config) checkPaths(needOutput bool) error {
	if c.Input == "" {
		return fmt.Errorf("%w: no input: give --input or input in the job file", ErrUsage)
	}
	if !needOutput {
		return nil
	}
	if c.Output == "" {
		return fmt.Errorf("%w: no output: give --output or output in the job file", ErrUsage)
	}
	in, err := arrowio.ResolvePath(c.Input)
	if err != nil {
		return err
	}
	out, err := arrowio.ResolvePath(c.Output)
	if err != nil {
		return err
	}
	if within(out, in) {
		return fmt.Errorf("%w: output %s is inside input %s; inputs are never written", ErrUsage, c.Output, c.Input)
	}
	if within(in, out) {
		return fmt.Errorf("%w: input %s is inside output %s", ErrUsage, c.Input, c.Output)
	}
	return nil
}

// within reports whether p is dir or below it (both absolute and clean).
func within(p, dir string) bool {
	rel, err := filepath.Rel(dir, p)
	return err == nil && rel != ".." && !strings.HasPrefix(rel, ".."+string(filepath.Separator))
}

// settings is the canonical, result-determining part of the job.
func (c *Config) settings() manifests.Settings {
	s := manifests.Settings{
		Input:       filepath.ToSlash(arrowio.Join(c.Input)),
		Std:         string(c.Std),
		OutputType:  "float64",
		Compression: string(c.Compression),
		InfPolicy:   string(c.InfPolicy),
		Fit:         c.Fit.String(),
	}
	if c.Output != "" {
		s.Output = filepath.ToSlash(arrowio.Join(c.Output))
	}
	if c.Float32 {
		s.OutputType = "float32"
	}
	for _, r := range c.Rules {
		mr := manifests.ColumnRule{Include: r.Include, Exclude: r.Exclude, Method: string(r.Method), Std: string(r.Options.Std)}
		if r.Method == stats.MinMax {
			lo, hi := manifests.Float(r.Options.RangeMin), manifests.Float(r.Options.RangeMax)
			mr.RangeMin, mr.RangeMax = &lo, &hi
		}
		s.Rules = append(s.Rules, mr)
	}
	return s
}
