package jobs

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// ErrDrift marks a diff in which some column's mean moved by more than the
// threshold given with --fail-over (exit 1).
var ErrDrift = errors.New("drift")

// DiffOptions control Diff.
type DiffOptions struct {
	JSON     bool     // write the report as JSON instead of a table
	FailOver *float64 // fail with ErrDrift when any |mean shift| exceeds it
}

// diffReport is the JSON form of a diff.
type diffReport struct {
	Old      string           `json:"old"`
	New      string           `json:"new"`
	FailOver *manifests.Float `json:"fail_over,omitempty"`
	Exceeded []string         `json:"exceeded"`
	Columns  []diffColumn     `json:"columns"`
}

// diffColumn compares one column of two documents. Undefined numbers (an
// old standard deviation of zero, a column without values, one side
// missing) are null in JSON.
type diffColumn struct {
	Name    string `json:"name"`
	Status  string `json:"status"` // "both", "added" (only in new) or "removed" (only in old)
	OldType string `json:"old_type,omitempty"`
	NewType string `json:"new_type,omitempty"`
	// MeanShift is (new mean - old mean) / old std, with the std the old
	// column was scaled with (sample for zscore with std sample, else
	// population).
	MeanShift      manifests.Float `json:"mean_shift"`
	StdRatio       manifests.Float `json:"std_ratio"` // new std / old std
	OldMin         manifests.Float `json:"old_min"`
	OldMax         manifests.Float `json:"old_max"`
	NewMin         manifests.Float `json:"new_min"`
	NewMax         manifests.Float `json:"new_max"`
	BelowOldMin    bool            `json:"below_old_min"` // new min < old min
	AboveOldMax    bool            `json:"above_old_max"` // new max > old max
	OldNullRate    manifests.Float `json:"old_null_rate"` // nulls / rows
	NewNullRate    manifests.Float `json:"new_null_rate"`
	NullRateChange manifests.Float `json:"null_rate_change"` // new - old
	// Identical: type and statistics are bit-identical; SameParams: so
	// are method and parameters.
	Identical  bool `json:"identical"`
	SameParams bool `json:"same_params"`
	// Exceeds: |mean shift| is over the --fail-over threshold (an
	// unbounded shift, different means over an old std of zero, counts).
	Exceeds bool `json:"exceeds"`
	shift   float64
}

// Diff compares two manifests or statistics files column by column and
// writes a table (or JSON) to w. With opts.FailOver it returns an error
// wrapping ErrDrift when any column's mean moved by more than that many
// old standard deviations; the report is written first.
func Diff(w io.Writer, oldPath, newPath string, opts DiffOptions) error {
	if opts.FailOver != nil && (math.IsNaN(*opts.FailOver) || *opts.FailOver < 0) {
		return fmt.Errorf("%w: --fail-over %v: want a number of standard deviations >= 0", ErrUsage, *opts.FailOver)
	}
	a, _, err := readManifest(oldPath)
	if err != nil {
		return err
	}
	b, _, err := readManifest(newPath)
	if err != nil {
		return err
	}
	rep := diffReport{Old: oldPath, New: newPath, Exceeded: []string{}, Columns: diffColumns(a, b)}
	if opts.FailOver != nil {
		x := manifests.Float(*opts.FailOver)
		rep.FailOver = &x
		for i := range rep.Columns {
			c := &rep.Columns[i]
			if c.Status == "both" && math.Abs(c.shift) > *opts.FailOver {
				c.Exceeds = true
				rep.Exceeded = append(rep.Exceeded, c.Name)
			}
		}
	}
	if opts.JSON {
		out, err := json.MarshalIndent(rep, "", "  ")
		if err != nil {
			return err
		}
		if _, err := w.Write(append(out, '\n')); err != nil {
			return err
		}
	} else if err := writeDiffTable(w, rep); err != nil {
		return err
	}
	if len(rep.Exceeded) > 0 {
		return fmt.Errorf("%w: %s shifted by more than %v standard deviations of %s", ErrDrift, strings.Join(rep.Exceeded, ", "), *opts.FailOver, oldPath)
	}
	return nil
}

// diffColumns pairs the columns by name: the old document's order, then
// the columns only the new one has.
func diffColumns(a, b *manifests.Manifest) []diffColumn {
	var out []diffColumn
	nan := manifests.Float(math.NaN())
	for _, oc := range a.Columns {
		nc := b.Column(oc.Name)
		if nc == nil {
			out = append(out, diffColumn{Name: oc.Name, Status: "removed", OldType: oc.Type, MeanShift: nan, StdRatio: nan,
				OldMin: oc.Stats.Min, OldMax: oc.Stats.Max, NewMin: nan, NewMax: nan,
				OldNullRate: nullRate(oc.Stats), NewNullRate: nan, NullRateChange: nan, shift: math.NaN()})
			continue
		}
		out = append(out, compareColumn(oc, *nc))
	}
	for _, nc := range b.Columns {
		if a.Column(nc.Name) == nil {
			out = append(out, diffColumn{Name: nc.Name, Status: "added", NewType: nc.Type, MeanShift: nan, StdRatio: nan,
				OldMin: nan, OldMax: nan, NewMin: nc.Stats.Min, NewMax: nc.Stats.Max,
				OldNullRate: nan, NewNullRate: nullRate(nc.Stats), NullRateChange: nan, shift: math.NaN()})
		}
	}
	return out
}

func compareColumn(oc, nc manifests.Column) diffColumn {
	oldStd, newStd := columnStd(oc), columnStd(nc)
	om, nm := float64(oc.Stats.Mean), float64(nc.Stats.Mean)
	var shift, ratio float64
	switch {
	case math.IsNaN(om) || math.IsNaN(nm) || math.IsNaN(oldStd):
		shift = math.NaN()
	case om == nm:
		shift = 0
	default:
		shift = (nm - om) / oldStd // ±Inf when the old std is zero
	}
	switch {
	case oldStd == 0 && newStd == 0:
		ratio = 1
	default:
		ratio = newStd / oldStd // NaN or Inf when undefined
	}
	c := diffColumn{
		Name: oc.Name, Status: "both", OldType: oc.Type, NewType: nc.Type,
		MeanShift: finiteOrNull(shift), StdRatio: finiteOrNull(ratio),
		OldMin: oc.Stats.Min, OldMax: oc.Stats.Max, NewMin: nc.Stats.Min, NewMax: nc.Stats.Max,
		BelowOldMin: nc.Stats.Min < oc.Stats.Min, AboveOldMax: nc.Stats.Max > oc.Stats.Max,
		OldNullRate: nullRate(oc.Stats), NewNullRate: nullRate(nc.Stats),
		shift: shift,
	}
	c.NullRateChange = finiteOrNull(float64(c.NewNullRate) - float64(c.OldNullRate))
	c.Identical = sameJSON([]any{oc.Type, oc.Stats}, []any{nc.Type, nc.Stats})
	c.SameParams = sameJSON([]any{oc.Method, oc.Params}, []any{nc.Method, nc.Params})
	return c
}

// sameJSON compares the canonical JSON of a and b (manifests.Float writes
// every float exactly, so equal text is equal bits).
func sameJSON(a, b any) bool {
	ja, errA := json.Marshal(a)
	jb, errB := json.Marshal(b)
	return errA == nil && errB == nil && bytes.Equal(ja, jb)
}

// columnStd is the standard deviation a column was (or would be) scaled
// with: sample for zscore with std sample, else population.
func columnStd(c manifests.Column) float64 {
	if c.Options.Std == string(stats.StdSample) {
		return float64(c.Stats.StdSample)
	}
	return float64(c.Stats.StdPopulation)
}

func nullRate(s manifests.Stats) manifests.Float {
	if s.Rows == 0 {
		return manifests.Float(math.NaN())
	}
	return manifests.Float(float64(s.Nulls) / float64(s.Rows))
}

func finiteOrNull(x float64) manifests.Float {
	if math.IsInf(x, 0) {
		return manifests.Float(math.NaN())
	}
	return manifests.Float(x)
}

// writeDiffTable renders the report into memory (where writes cannot
// fail) and writes it to w at once.
func writeDiffTable(w io.Writer, rep diffReport) error {
	var b bytes.Buffer
	fmt.Fprintf(&b, "old: %s\nnew: %s\n", rep.Old, rep.New)
	if rep.FailOver != nil {
		fmt.Fprintf(&b, "fail over: |mean shift| > %s old standard deviations\n", strconv.FormatFloat(float64(*rep.FailOver), 'g', -1, 64))
	}
	b.WriteByte('\n')
	tw := tabwriter.NewWriter(&b, 2, 4, 2, ' ', tabwriter.AlignRight)
	_, _ = fmt.Fprintln(tw, "column\tstatus\tmean shift (sd)\tstd ratio\told range\tnew range\toutside\tnull rate\t")
	for _, c := range rep.Columns {
		status := c.Status
		switch {
		case c.Status == "both" && c.Identical && c.SameParams:
			status = "identical"
		case c.Status == "both" && c.Identical:
			status = "same stats"
		case c.Status == "both" && c.OldType != c.NewType:
			status = c.OldType + "->" + c.NewType
		case c.Status == "both":
			status = "changed"
		}
		shift := num(c.MeanShift)
		if math.IsInf(c.shift, 0) {
			shift = strconv.FormatFloat(c.shift, 'g', -1, 64)
		}
		if c.Exceeds {
			shift += " !"
		}
		var outside []string
		if c.BelowOldMin {
			outside = append(outside, "below")
		}
		if c.AboveOldMax {
			outside = append(outside, "above")
		}
		if len(outside) == 0 {
			outside = []string{"-"}
		}
		_, _ = fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t[%s, %s]\t[%s, %s]\t%s\t%s -> %s\t\n", c.Name, status, shift, num(c.StdRatio),
			num(c.OldMin), num(c.OldMax), num(c.NewMin), num(c.NewMax), strings.Join(outside, ","), num(c.OldNullRate), num(c.NewNullRate))
	}
	_ = tw.Flush() // into b: cannot fail
	if len(rep.Exceeded) > 0 {
		fmt.Fprintf(&b, "\nover the threshold: %s\n", strings.Join(rep.Exceeded, ", "))
	}
	_, err := w.Write(b.Bytes())
	return err
}
