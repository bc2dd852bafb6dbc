package jobs

import (
	"bytes"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"text/tabwriter"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
)

// readManifest reads and decodes a manifest or statistics file.
func readManifest(path string) (*manifests.Manifest, []byte, error) {
	raw, err := arrowio.ReadFile(path)
	if err != nil {
		return nil, nil, err
	}
	m, err := manifests.Decode(bytes.NewReader(raw))
	if err != nil {
		return nil, nil, fmt.Errorf("%s: %w", path, err)
	}
	return m, raw, nil
}

// Show prints a readable table of a manifest or statistics file.
func Show(w io.Writer, path string) error {
	m, _, err := readManifest(path)
	if err != nil {
		return err
	}
	var rows, bytes int64
	for _, in := range m.Inputs {
		rows += in.Rows
		bytes += in.Bytes
	}
	fmt.Fprintf(w, "%s: %s written by %s %s at %s\n", path, m.Kind, m.Tool.Name, m.Tool.Version, m.CreatedAt)
	fmt.Fprintf(w, "input %s: %d files, %d rows, %d bytes", m.Job.Settings.Input, len(m.Inputs), rows, bytes)
	if m.Kind == manifests.KindDataset {
		fmt.Fprintf(w, "; output %s: %d files", m.Job.Settings.Output, len(m.Outputs))
	}
	fmt.Fprintln(w)
	if m.ParamsSource != nil {
		fmt.Fprintf(w, "parameters from %s (%s, sha256 %s)\n", m.ParamsSource.Path, m.ParamsSource.Kind, m.ParamsSource.SHA256)
	}
	showFit(w, m)
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "column\ttype\tcount\tnulls\tmean\tstd\tmin\tmax\tmethod\tcenter\tscale\twarnings\t")
	for _, c := range m.Columns {
		std, label := c.Stats.StdPopulation, ""
		if c.Options.Std == "sample" {
			std, label = c.Stats.StdSample, " (n-1)"
		}
		method := c.Method
		if c.Method == "minmax" && c.Options.RangeMin != nil && c.Options.RangeMax != nil {
			method += fmt.Sprintf(" [%s, %s]", num(*c.Options.RangeMin), num(*c.Options.RangeMax))
		}
		warns := strings.Join(c.Warnings, ",")
		if warns == "" {
			warns = "-"
		}
		fmt.Fprintf(tw, "%s\t%s\t%d\t%d\t%s\t%s%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", c.Name, c.Type, c.Stats.Count, c.Stats.Nulls,
			num(c.Stats.Mean), num(std), label, num(c.Stats.Min), num(c.Stats.Max), method, num(c.Params.Center), num(c.Params.Scale), warns)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	return showOutside(w, m)
}

// num formats a statistic readably (7 significant digits); the manifest
// itself holds the exact value.
func num(f manifests.Float) string {
	v := float64(f)
	if math.IsNaN(v) {
		return "-"
	}
	return strconv.FormatFloat(v, 'g', 7, 64)
}
