package manifests

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"path"
	"strconv"
	"strings"
)

// Version is the manifest_version this build writes and the newest it reads.
const Version = 1

// Document kinds.
const (
	KindDataset    = "dataset"    // _manifest.json of a written dataset
	KindStatistics = "statistics" // output of the measure command
	KindInverted   = "inverted"   // _manifest.json of a dataset mapped back to original units
)

// ErrInvalid marks a document that cannot be decoded or fails validation.
var ErrInvalid = errors.New("invalid manifest")

// Manifest is the whole document. Field order is the JSON order.
type Manifest struct {
	ManifestVersion int           `json:"manifest_version"`
	Kind            string        `json:"kind"`
	Tool            Tool          `json:"tool"`
	Job             Job           `json:"job"`
	ParamsSource    *ParamsSource `json:"params_source,omitempty"`
	Columns         []Column      `json:"columns"`
	Inputs          []Input       `json:"inputs"`
	Outputs         []Output      `json:"outputs,omitempty"`
	CreatedAt       string        `json:"created_at"`
}

// Tool identifies the program that wrote the document.
type Tool struct {
	Name         string            `json:"name"`
	Version      string            `json:"version"`
	VCSRevision  string            `json:"vcs_revision"`
	GoVersion    string            `json:"go_version"`
	Dependencies map[string]string `json:"dependencies"`
}

// Job is the effective, canonical job settings and their SHA-256.
type Job struct {
	Settings Settings `json:"settings"`
	SHA256   string   `json:"sha256"`
}

// Settings are the settings that determine a run's results. Execution
// details that cannot change a single output byte (worker count, batch
// size) are deliberately left out so that they do not change the manifest.
type Settings struct {
	Input       string       `json:"input"`
	Output      string       `json:"output,omitempty"`
	Rules       []ColumnRule `json:"rules"`
	Std         string       `json:"std"`
	OutputType  string       `json:"output_type"`
	Compression string       `json:"compression"`
	InfPolicy   string       `json:"inf_policy"`
	// Fit is the canonical partition filter that chose the inputs whose
	// statistics define the parameters; empty means every input.
	Fit string `json:"fit,omitempty"`
}

// ColumnRule maps column-name glob patterns to a method.
type ColumnRule struct {
	Include  []string `json:"include"`
	Exclude  []string `json:"exclude,omitempty"`
	Method   string   `json:"method"`
	Std      string   `json:"std,omitempty"`
	RangeMin *Float   `json:"range_min,omitempty"`
	RangeMax *Float   `json:"range_max,omitempty"`
}

// ParamsSource records where frozen parameters came from (apply, invert).
type ParamsSource struct {
	Path   string `json:"path"`
	Kind   string `json:"kind"`
	SHA256 string `json:"sha256"`
}

// Column is one scaled column: its statistics, method and parameters.
type Column struct {
	Name     string   `json:"name"`
	Type     string   `json:"type"`
	Method   string   `json:"method"`
	Options  Options  `json:"options"`
	Stats    Stats    `json:"stats"`
	Params   Params   `json:"params"`
	Warnings []string `json:"warnings"`
	// OutOfRange counts the finite values scaled in this run that fell
	// outside the fitted [stats.min, stats.max] (apply, and run with a fit
	// filter); absent when not counted.
	OutOfRange *OutOfRange `json:"out_of_range,omitempty"`
}

// OutOfRange counts values below the fitted min and above the fitted max.
type OutOfRange struct {
	Below uint64 `json:"below"`
	Above uint64 `json:"above"`
}

// Options are a method's effective options.
type Options struct {
	Std      string `json:"std,omitempty"`
	RangeMin *Float `json:"range_min,omitempty"`
	RangeMax *Float `json:"range_max,omitempty"`
}

// Stats are the exact statistics of a column, each correctly rounded.
// Undefined values (for example the mean of a column with no finite
// values) are null in JSON and NaN in Go.
type Stats struct {
	Rows          uint64 `json:"rows"`
	Count         uint64 `json:"count"`
	Nulls         uint64 `json:"nulls"`
	NaNs          uint64 `json:"nans"`
	PosInf        uint64 `json:"pos_inf"`
	NegInf        uint64 `json:"neg_inf"`
	Mean          Float  `json:"mean"`
	StdSample     Float  `json:"std_sample"`
	StdPopulation Float  `json:"std_population"`
	Min           Float  `json:"min"`
	Max           Float  `json:"max"`
}

// Params are y = (x - center) / scale.
type Params struct {
	Center Float `json:"center"`
	Scale  Float `json:"scale"`
}

// Input is one input file.
type Input struct {
	Path      string            `json:"path"`
	Partition map[string]string `json:"partition"`
	Rows      int64             `json:"rows"`
	Bytes     int64             `json:"bytes"`
	SHA256    string            `json:"sha256"`
	// Fit says whether the input's statistics went into the parameters;
	// present when this document's statistics were computed (run,
	// measure) with a fit filter.
	Fit *bool `json:"fit,omitempty"`
}

// Output is one written file.
type Output struct {
	Path   string `json:"path"`
	Rows   int64  `json:"rows"`
	Bytes  int64  `json:"bytes"`
	SHA256 string `json:"sha256"`
}

// Float is a float64 whose JSON form round-trips exactly: the shortest
// decimal that parses back to the same bits, -0 kept, NaN written as null.
// Infinities cannot be written.
type Float float64

// MarshalJSON implements json.Marshaler.
func (f Float) MarshalJSON() ([]byte, error) {
	v := float64(f)
	switch {
	case math.IsNaN(v):
		return []byte("null"), nil
	case math.IsInf(v, 0):
		return nil, fmt.Errorf("%w: infinite number %v", ErrInvalid, v)
	}
	return strconv.AppendFloat(nil, v, 'g', -1, 64), nil
}

// UnmarshalJSON implements json.Unmarshaler.
func (f *Float) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*f = Float(math.NaN())
		return nil
	}
	v, err := strconv.ParseFloat(string(b), 64)
	if err != nil {
		return fmt.Errorf("%w: number %s: %w", ErrInvalid, b, err)
	}
	*f = Float(v)
	return nil
}

// Encode writes m as canonical indented JSON with a trailing newline.
func Encode(w io.Writer, m *Manifest) error {
	if err := m.Validate(); err != nil {
		return err
	}
	b, err := json.MarshalIndent(m, "", "  ")
	if err != nil {
		return fmt.Errorf("encode manifest: %w", err)
	}
	b = append(b, '\n')
	_, err = w.Write(b)
	return err
}

// Decode reads one manifest or statistics document strictly.
func Decode(r io.Reader) (*Manifest, error) {
	data, err := io.ReadAll(r)
	if err != nil {
		return nil, err
	}
	var probe struct {
		ManifestVersion *int `json:"manifest_version"`
	}
	if err := json.Unmarshal(data, &probe); err != nil {
		return nil, fmt.Errorf("%w: %w", ErrInvalid, err)
	}
	if probe.ManifestVersion == nil {
		return nil, fmt.Errorf("%w: no manifest_version field", ErrInvalid)
	}
	if v := *probe.ManifestVersion; v < 1 || v > Version {
		return nil, fmt.Errorf("%w: manifest_version %d, this build reads 1 to %d", ErrInvalid, v, Version)
	}
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var m Manifest
	if err := dec.Decode(&m); err != nil {
		return nil, fmt.Errorf("%w: %w", ErrInvalid, err)
	}
	if dec.More() {
		return nil, fmt.Errorf("%w: trailing data after the document", ErrInvalid)
	}
	if err := m.Validate(); err != nil {
		return nil, err
	}
	return &m, nil
}

// Validate checks the invariants every document must hold.
func (m *Manifest) Validate() error {
	if m.ManifestVersion != Version {
		return fmt.Errorf("%w: manifest_version %d, want %d", ErrInvalid, m.ManifestVersion, Version)
	}
	if m.Kind != KindDataset && m.Kind != KindStatistics && m.Kind != KindInverted {
		return fmt.Errorf("%w: kind %q, want %q, %q or %q", ErrInvalid, m.Kind, KindDataset, KindStatistics, KindInverted)
	}
	for _, in := range m.Inputs {
		if err := checkRelPath(in.Path); err != nil {
			return fmt.Errorf("%w: input %w", ErrInvalid, err)
		}
	}
	for _, out := range m.Outputs {
		if err := checkRelPath(out.Path); err != nil {
			return fmt.Errorf("%w: output %w", ErrInvalid, err)
		}
	}
	seen := make(map[string]bool, len(m.Columns))
	for i, c := range m.Columns {
		if c.Name == "" {
			return fmt.Errorf("%w: columns[%d] has no name", ErrInvalid, i)
		}
		if seen[c.Name] {
			return fmt.Errorf("%w: column %q listed twice", ErrInvalid, c.Name)
		}
		seen[c.Name] = true
		s := float64(c.Params.Scale)
		if math.IsNaN(s) || s == 0 || math.IsNaN(float64(c.Params.Center)) {
			return fmt.Errorf("%w: column %q: parameters must be finite with a non-zero scale", ErrInvalid, c.Name)
		}
		if c.Stats.Rows != c.Stats.Count+c.Stats.Nulls+c.Stats.NaNs+c.Stats.PosInf+c.Stats.NegInf {
			return fmt.Errorf("%w: column %q: rows %d is not count + nulls + nans + infinities", ErrInvalid, c.Name, c.Stats.Rows)
		}
	}
	return nil
}

// Column returns the named column, or nil.
func (m *Manifest) Column(name string) *Column {
	for i := range m.Columns {
		if m.Columns[i].Name == name {
			return &m.Columns[i]
		}
	}
	return nil
}

// checkRelPath accepts only clean, slash-separated paths inside the
// dataset, so that no manifest can point a reader at other files.
func checkRelPath(p string) error {
	if p == "" || path.IsAbs(p) || path.Clean(p) != p || p == ".." || strings.HasPrefix(p, "../") || strings.Contains(p, `\`) {
		return fmt.Errorf("path %q: want a clean relative path inside the dataset", p)
	}
	return nil
}
