package jobs

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"

	"github.com/lakescale/lakescale/stats"
)

func writeJob(t *testing.T, text string) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "job.toml")
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

func ptr[T any](v T) *T { return &v }

func TestLoadJobFile(t *testing.T) {
	path := writeJob(t, `
input = "lake"
output = "/abs/out"
std = "sample"
workers = 3
compression = "snappy"
output_type = "float32"
on_infinity = "skip"

[[rule]]
columns = ["power_*"]
method = "minmax"
range = [-1.0, 1.0]

[[rule]]
columns = ["*"]
exclude = ["ts"]
`)
	cfg, err := Load(path, Overrides{})
	if err != nil {
		t.Fatal(err)
	}
	if want := filepath.Join(filepath.Dir(path), "lake"); cfg.Input != want {
		t.Errorf("input %q, want %q (relative to the job file)", cfg.Input, want)
	}
	if cfg.Output != "/abs/out" || cfg.Std != stats.StdSample || cfg.Workers != 3 || cfg.Compression != "snappy" || !cfg.Float32 || cfg.InfPolicy != InfSkip {
		t.Errorf("settings not taken from the file: %+v", cfg)
	}
	if len(cfg.Rules) != 2 || cfg.Rules[0].Method != stats.MinMax || cfg.Rules[0].Options.RangeMin != -1 || cfg.Rules[0].Options.RangeMax != 1 {
		t.Fatalf("rules: %+v", cfg.Rules)
	}
	if r := cfg.Rules[1]; r.Method != stats.ZScore || r.Options.Std != stats.StdSample || r.Exclude[0] != "ts" {
		t.Errorf("second rule: %+v", r)
	}

	// Flags override the file; --method replaces its rules.
	cfg, err = Load(path, Overrides{Input: ptr("other"), Std: ptr("population"), Workers: ptr(1), Method: ptr("maxabs")})
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Input != "other" || cfg.Std != stats.StdPopulation || cfg.Workers != 1 {
		t.Errorf("flags did not override: %+v", cfg)
	}
	if len(cfg.Rules) != 1 || cfg.Rules[0].Method != stats.MaxAbs || cfg.Rules[0].Include[0] != "*" {
		t.Errorf("--method did not replace the rules: %+v", cfg.Rules)
	}
}

func TestLoadDefaults(t *testing.T) {
	cfg, err := Load("", Overrides{Input: ptr("in")})
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Std != stats.StdPopulation || cfg.Compression != "zstd" || cfg.Float32 || cfg.InfPolicy != InfError || cfg.Workers < 1 || cfg.BatchRows <= 0 {
		t.Errorf("defaults: %+v", cfg)
	}
	if len(cfg.Rules) != 1 || cfg.Rules[0].Method != stats.ZScore || cfg.Rules[0].Include[0] != "*" {
		t.Errorf("default rule: %+v", cfg.Rules)
	}
}

func TestLoadErrors(t *testing.T) {
	fileCases := map[string]struct{ text, want string }{
		"unknown key":     {"input = \"x\"\ncolour = 1\n", "unknown key colour"},
		"unknown in rule": {"[[rule]]\ncolumns = [\"a\"]\nmethd = \"zscore\"\n", "unknown key rule.methd"},
		"bad syntax":      {"input = \n", "job file"},
		"bad method":      {"[[rule]]\nmethod = \"robustish\"\n", "rule 1: unknown scaling method"},
		"range on zscore": {"[[rule]]\nmethod = \"zscore\"\nrange = [0.0, 1.0]\n", "range applies to method minmax"},
		"reversed range":  {"[[rule]]\nmethod = \"minmax\"\nrange = [1.0, 0.0]\n", "low < high"},
		"bad pattern":     {"[[rule]]\ncolumns = [\"[\"]\n", "column pattern"},
		"bad std":         {"std = \"both\"\n", "standard deviation"},
	}
	for name, c := range fileCases {
		path := writeJob(t, c.text)
		_, err := Load(path, Overrides{})
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), path) {
			t.Errorf("%s: got %v, want an error naming %s and containing %q", name, err, path, c.want)
		}
		if errors.Is(err, ErrUsage) {
			t.Errorf("%s: a job file error must not be a usage error (exit 1, not 2)", name)
		}
	}
	flagCases := map[string]Overrides{
		"method":      {Method: ptr("nope")},
		"std":         {Std: ptr("nope")},
		"workers":     {Workers: ptr(0)},
		"compression": {Compression: ptr("lz5")},
		"output type": {OutputType: ptr("float16")},
		"on-infinity": {OnInfinity: ptr("ignore")},
		"pattern":     {Columns: []string{"a["}},
	}
	for name, o := range flagCases {
		if _, err := Load("", o); !errors.Is(err, ErrUsage) {
			t.Errorf("%s: got %v, want ErrUsage", name, err)
		}
	}
	if _, err := Load(filepath.Join(t.TempDir(), "missing.toml"), Overrides{}); err == nil || !strings.Contains(err.Error(), "missing.toml") {
		t.Errorf("missing job file: %v", err)
	}
}

func TestSelectColumns(t *testing.T) {
	sc := arrow.NewSchema([]arrow.Field{
		{Name: "id", Type: arrow.BinaryTypes.String},
		{Name: "ts", Type: arrow.PrimitiveTypes.Int64},
		{Name: "wind", Type: arrow.PrimitiveTypes.Float64},
		{Name: "temp", Type: arrow.PrimitiveTypes.Float32},
		{Name: "ok", Type: arrow.FixedWidthTypes.Boolean},
	}, nil)
	rule := func(method stats.Method, include []string, exclude ...string) Rule {
		return Rule{Include: include, Exclude: exclude, Method: method}
	}
	cols, err := selectColumns(sc, []Rule{rule(stats.ZScore, []string{"*"}, "ts")})
	if err != nil {
		t.Fatal(err)
	}
	if names := colNames(cols); names != "wind,temp" {
		t.Errorf("default selection %s, want wind,temp (numeric, ts excluded)", names)
	}
	// First matching rule wins; output stays in schema order.
	cols, err = selectColumns(sc, []Rule{rule(stats.MinMax, []string{"temp"}), rule(stats.ZScore, []string{"*"})})
	if err != nil {
		t.Fatal(err)
	}
	if names := colNames(cols); names != "ts,wind,temp" || cols[2].Rule.Method != stats.MinMax || cols[1].Rule.Method != stats.ZScore {
		t.Errorf("rules: %s %+v", names, cols)
	}
	for _, bad := range []string{"id", "nosuch", "x*"} {
		_, err := selectColumns(sc, []Rule{rule(stats.ZScore, []string{bad})})
		if !errors.Is(err, ErrColumn) || !strings.Contains(err.Error(), bad) {
			t.Errorf("pattern %q: got %v, want ErrColumn naming it", bad, err)
		}
	}
}

func colNames(cols []column) string {
	names := make([]string, len(cols))
	for i, c := range cols {
		names[i] = c.Name
	}
	return strings.Join(names, ",")
}
