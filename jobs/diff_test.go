package jobs

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"github.com/lakescale/lakescale/manifests"
)

// statsDoc writes a statistics document with the given columns.
func statsDoc(t *testing.T, path string, cols ...manifests.Column) {
	t.Helper()
	m := &manifests.Manifest{ManifestVersion: manifests.Version, Kind: manifests.KindStatistics,
		Job: manifests.Job{Settings: manifests.Settings{Input: "lake"}}, Columns: cols, Inputs: []manifests.Input{}, CreatedAt: "2026-01-01T00:00:00Z"}
	if err := writeManifest(path, m, false); err != nil {
		t.Fatal(err)
	}
}

func col(name string, rows, nulls uint64, mean, std, lo, hi float64) manifests.Column {
	return manifests.Column{Name: name, Type: "double", Method: "zscore", Options: manifests.Options{Std: "population"},
		Stats: manifests.Stats{Rows: rows, Count: rows - nulls, Nulls: nulls, Mean: manifests.Float(mean),
			StdPopulation: manifests.Float(std), StdSample: manifests.Float(std), Min: manifests.Float(lo), Max: manifests.Float(hi)},
		Params: manifests.Params{Center: manifests.Float(mean), Scale: manifests.Float(max(std, 1))}, Warnings: []string{}}
}

func TestDiff(t *testing.T) {
	dir := t.TempDir()
	a, b := filepath.Join(dir, "a.json"), filepath.Join(dir, "b.json")
	// Hand-made statistics: x moves by 3 / 2 = 1.5 old standard
	// deviations with 1.5 times the spread, below the old min and above
	// the old max, and its null rate goes from 10/100 to 40/200; y is the
	// same; c is constant and then moves (unbounded shift); gone and new
	// are only on one side.
	statsDoc(t, a, col("x", 100, 10, 10, 2, 4, 16), col("y", 50, 0, 1, 1, 0, 2), col("c", 10, 0, 5, 0, 5, 5), col("gone", 10, 0, 0, 1, -1, 1))
	statsDoc(t, b, col("x", 200, 40, 13, 3, 3, 20), col("y", 50, 0, 1, 1, 0, 2), col("c", 10, 0, 6, 0, 6, 6), col("new", 10, 0, 0, 1, -1, 1))

	var out bytes.Buffer
	if err := Diff(&out, a, b, DiffOptions{JSON: true}); err != nil {
		t.Fatal(err)
	}
	var rep struct {
		Exceeded []string
		Columns  []map[string]any
	}
	if err := json.Unmarshal(out.Bytes(), &rep); err != nil {
		t.Fatal(err)
	}
	byName := map[string]map[string]any{}
	for _, c := range rep.Columns {
		byName[c["name"].(string)] = c
	}
	x := byName["x"]
	for k, want := range map[string]any{"status": "both", "mean_shift": 1.5, "std_ratio": 1.5, "below_old_min": true, "above_old_max": true,
		"old_null_rate": 0.1, "new_null_rate": 0.2, "identical": false} {
		if x[k] != want {
			t.Errorf("x.%s = %v, want %v", k, x[k], want)
		}
	}
	if got := x["null_rate_change"].(float64); math.Abs(got-0.1) > 1e-15 {
		t.Errorf("x.null_rate_change = %v, want 0.1", got)
	}
	y := byName["y"]
	if y["identical"] != true || y["same_params"] != true || y["mean_shift"] != 0.0 || y["std_ratio"] != 1.0 {
		t.Errorf("y = %v, want identical with no shift", y)
	}
	if c := byName["c"]; c["mean_shift"] != nil || c["std_ratio"] != 1.0 {
		t.Errorf("c = %v, want an undefined (null) shift and ratio 1", c)
	}
	if byName["gone"]["status"] != "removed" || byName["new"]["status"] != "added" {
		t.Errorf("gone %v, new %v", byName["gone"], byName["new"])
	}
	if len(rep.Exceeded) != 0 {
		t.Errorf("exceeded %v without a threshold", rep.Exceeded)
	}

	// Over the threshold: x (1.5 > 1.4) and the unbounded c; not y.
	out.Reset()
	over := 1.4
	err := Diff(&out, a, b, DiffOptions{FailOver: &over})
	if !errors.Is(err, ErrDrift) || !strings.Contains(err.Error(), "x, c") {
		t.Fatalf("got %v, want drift in x and c", err)
	}
	if !strings.Contains(out.String(), "over the threshold: x, c") {
		t.Fatalf("table lacks the verdict:\n%s", out.String())
	}
	// Under it only c (which moved off a constant) remains.
	under := 1.6
	err = Diff(&out, a, b, DiffOptions{FailOver: &under})
	if !errors.Is(err, ErrDrift) || strings.Contains(err.Error(), "x") {
		t.Fatalf("got %v, want drift in c only", err)
	}
	// Comparing a document with itself never drifts.
	zero := 0.0
	if err := Diff(&out, a, a, DiffOptions{FailOver: &zero}); err != nil {
		t.Fatalf("a against itself: %v", err)
	}
	neg := -1.0
	if err := Diff(&out, a, b, DiffOptions{FailOver: &neg}); !errors.Is(err, ErrUsage) {
		t.Fatalf("negative threshold: %v", err)
	}
}
