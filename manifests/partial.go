package manifests

import (
	"bytes"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
)

// A sharded job splits its input files among n independent processes
// (shards). Each shard writes one partial document into the job's work
// folder, and a final step (merge for measure, commit for apply) reads all
// n of them and writes the same statistics file or manifest a single
// process would have written. The partial documents are defined here.

// PartialVersion is the partial_version this build writes and reads.
const PartialVersion = 1

// MaxShards bounds the shard count of a sharded job (far above what
// batch schedulers run as one array or indexed job).
const MaxShards = 1_000_000

// Kinds of partial documents.
const (
	KindMeasureShard = "measure_shard" // one shard's per-file statistics states
	KindApplyShard   = "apply_shard"   // one shard's list of written outputs
)

// ErrInvalidPartial marks a partial document that cannot be decoded or
// fails validation.
var ErrInvalidPartial = errors.New("invalid shard result")

// Shard says which share of a sharded job a document covers: Index of
// Count, counted from 0.
type Shard struct {
	Index int `json:"index"`
	Count int `json:"count"`
}

// Listing identifies the complete input listing the shares were assigned
// from: the number of files, their total size and a SHA-256 over every
// file's relative path and size (see jobs). Every shard of one job must
// have seen the same listing.
type Listing struct {
	Files  int    `json:"files"`
	Bytes  int64  `json:"bytes"`
	SHA256 string `json:"sha256"`
}

// PartialHeader is what every partial document starts with.
type PartialHeader struct {
	PartialVersion int     `json:"partial_version"`
	Kind           string  `json:"kind"`
	Tool           Tool    `json:"tool"`
	Job            Job     `json:"job"`
	Shard          Shard   `json:"shard"`
	Listing        Listing `json:"listing"`
}

// MeasurePartial is one shard of a sharded measure: for each input file
// of its share, the manifest entry a single-process measure records and
// the exact accumulator state of every selected column.
type MeasurePartial struct {
	PartialHeader
	Columns []MeasuredColumn `json:"columns"`
	Files   []MeasuredFile   `json:"files"`
}

// MeasuredColumn is a selected column and the rule's method and options
// it is fitted with.
type MeasuredColumn struct {
	Name     string `json:"name"`
	Type     string `json:"type"`
	Method   string `json:"method"`
	Std      string `json:"std,omitempty"`
	RangeMin Float  `json:"range_min"`
	RangeMax Float  `json:"range_max"`
}

// MeasuredFile is one input of a shard's share. States holds, per column
// in Columns order, the canonical binary encoding of the column's
// accumulator (stats.Accumulator.MarshalBinary; base64 in JSON); it is
// empty for an input the fit filter leaves out.
type MeasuredFile struct {
	Input  Input    `json:"input"`
	States [][]byte `json:"states,omitempty"`
}

// ApplyPartial is one shard of a sharded apply: the job and parameters it
// applied and, for each input file of its share, the manifest entries of
// the input and its output and the per-column counts of values outside
// the fitted range.
type ApplyPartial struct {
	PartialHeader
	ParamsSource ParamsSource  `json:"params_source"`
	Columns      []Column      `json:"columns"`
	Files        []AppliedFile `json:"files"`
}

// AppliedFile is one input of a shard's share and the output written
// from it. OutOfRange has one entry per column, in Columns order.
type AppliedFile struct {
	Input      Input        `json:"input"`
	Output     Output       `json:"output"`
	OutOfRange []OutOfRange `json:"out_of_range"`
}

// EncodeMeasurePartial writes p as canonical indented JSON.
func EncodeMeasurePartial(w io.Writer, p *MeasurePartial) error {
	return encodePartial(w, p, p.Validate)
}

// EncodeApplyPartial writes p as canonical indented JSON.
func EncodeApplyPartial(w io.Writer, p *ApplyPartial) error {
	return encodePartial(w, p, p.Validate)
}

// DecodeMeasurePartial reads one measure shard's document strictly.
func DecodeMeasurePartial(r io.Reader) (*MeasurePartial, error) {
	var p MeasurePartial
	if err := decodePartial(r, KindMeasureShard, &p); err != nil {
		return nil, err
	}
	if err := p.Validate(); err != nil {
		return nil, err
	}
	return &p, nil
}

// DecodeApplyPartial reads one apply shard's document strictly.
func DecodeApplyPartial(r io.Reader) (*ApplyPartial, error) {
	var p ApplyPartial
	if err := decodePartial(r, KindApplyShard, &p); err != nil {
		return nil, err
	}
	if err := p.Validate(); err != nil {
		return nil, err
	}
	return &p, nil
}

func encodePartial(w io.Writer, v any, validate func() error) error {
	if err := validate(); err != nil {
		return err
	}
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		return fmt.Errorf("encode shard result: %w", err)
	}
	_, err = w.Write(append(b, '\n'))
	return err
}

// decodePartial checks the version and kind first, so that a document of
// another kind or version is named as such rather than as a field error.
func decodePartial(r io.Reader, kind string, dst any) error {
	data, err := io.ReadAll(r)
	if err != nil {
		return err
	}
	var probe struct {
		PartialVersion *int   `json:"partial_version"`
		Kind           string `json:"kind"`
	}
	if err := json.Unmarshal(data, &probe); err != nil {
		return fmt.Errorf("%w: %w", ErrInvalidPartial, err)
	}
	if probe.PartialVersion == nil {
		return fmt.Errorf("%w: no partial_version field", ErrInvalidPartial)
	}
	if v := *probe.PartialVersion; v != PartialVersion {
		return fmt.Errorf("%w: partial_version %d, this build reads %d", ErrInvalidPartial, v, PartialVersion)
	}
	if probe.Kind != kind {
		return fmt.Errorf("%w: kind %q, want %q", ErrInvalidPartial, probe.Kind, kind)
	}
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(dst); err != nil {
		return fmt.Errorf("%w: %w", ErrInvalidPartial, err)
	}
	if dec.More() {
		return fmt.Errorf("%w: trailing data after the document", ErrInvalidPartial)
	}
	return nil
}

// validate checks the header of a document of the given kind.
func (h *PartialHeader) validate(kind string) error {
	if h.PartialVersion != PartialVersion {
		return fmt.Errorf("%w: partial_version %d, want %d", ErrInvalidPartial, h.PartialVersion, PartialVersion)
	}
	if h.Kind != kind {
		return fmt.Errorf("%w: kind %q, want %q", ErrInvalidPartial, h.Kind, kind)
	}
	if h.Shard.Count < 1 || h.Shard.Count > MaxShards || h.Shard.Index < 0 || h.Shard.Index >= h.Shard.Count {
		return fmt.Errorf("%w: shard %d of %d: want 0 <= index < count <= %d", ErrInvalidPartial, h.Shard.Index, h.Shard.Count, MaxShards)
	}
	if want := h.Job.Settings.Digest(); h.Job.SHA256 != want {
		return fmt.Errorf("%w: job.sha256 %q is not the digest of job.settings (%s)", ErrInvalidPartial, h.Job.SHA256, want)
	}
	if h.Listing.Files < 1 || h.Listing.Bytes < 0 || !isSHA256(h.Listing.SHA256) {
		return fmt.Errorf("%w: listing of %d files, %d bytes, sha256 %q: want at least one file and a SHA-256", ErrInvalidPartial, h.Listing.Files, h.Listing.Bytes, h.Listing.SHA256)
	}
	return nil
}

// validateInput checks one input entry and that its path is new.
func validateInput(in Input, seen map[string]bool) error {
	if err := checkRelPath(in.Path); err != nil {
		return fmt.Errorf("%w: input %w", ErrInvalidPartial, err)
	}
	if seen[in.Path] {
		return fmt.Errorf("%w: input %s listed twice", ErrInvalidPartial, in.Path)
	}
	seen[in.Path] = true
	if in.Rows < 1 || in.Bytes < 0 || !isSHA256(in.SHA256) {
		return fmt.Errorf("%w: input %s: rows %d, bytes %d, sha256 %q: want rows > 0 and a SHA-256", ErrInvalidPartial, in.Path, in.Rows, in.Bytes, in.SHA256)
	}
	return nil
}

// Validate checks the invariants of a measure shard's document.
func (p *MeasurePartial) Validate() error {
	if err := p.validate(KindMeasureShard); err != nil {
		return err
	}
	names := make(map[string]bool, len(p.Columns))
	for i, c := range p.Columns {
		if c.Name == "" || c.Type == "" || c.Method == "" {
			return fmt.Errorf("%w: columns[%d] needs a name, type and method", ErrInvalidPartial, i)
		}
		if names[c.Name] {
			return fmt.Errorf("%w: column %q listed twice", ErrInvalidPartial, c.Name)
		}
		names[c.Name] = true
		if lo, hi := float64(c.RangeMin), float64(c.RangeMax); math.IsNaN(lo) || math.IsNaN(hi) {
			return fmt.Errorf("%w: column %q: range_min and range_max must be numbers", ErrInvalidPartial, c.Name)
		}
	}
	filtered := p.Job.Settings.Fit != ""
	seen := make(map[string]bool, len(p.Files))
	for _, f := range p.Files {
		if err := validateInput(f.Input, seen); err != nil {
			return err
		}
		if (f.Input.Fit != nil) != filtered {
			return fmt.Errorf("%w: input %s: a fit flag belongs exactly to the inputs of a job with a fit filter", ErrInvalidPartial, f.Input.Path)
		}
		want := len(p.Columns)
		if f.Input.Fit != nil && !*f.Input.Fit {
			want = 0
		}
		if len(f.States) != want {
			return fmt.Errorf("%w: input %s has %d column states, want %d", ErrInvalidPartial, f.Input.Path, len(f.States), want)
		}
	}
	return nil
}

// Validate checks the invariants of an apply shard's document.
func (p *ApplyPartial) Validate() error {
	if err := p.validate(KindApplyShard); err != nil {
		return err
	}
	if p.ParamsSource.Path == "" || p.ParamsSource.Kind == "" || !isSHA256(p.ParamsSource.SHA256) {
		return fmt.Errorf("%w: params_source needs a path, kind and SHA-256", ErrInvalidPartial)
	}
	// The columns must make a valid manifest.
	doc := Manifest{ManifestVersion: Version, Kind: KindDataset, Columns: p.Columns}
	if err := doc.Validate(); err != nil {
		return fmt.Errorf("%w: columns: %w", ErrInvalidPartial, err)
	}
	seen := make(map[string]bool, len(p.Files))
	for _, f := range p.Files {
		if err := validateInput(f.Input, seen); err != nil {
			return err
		}
		if f.Output.Path != f.Input.Path || f.Output.Rows != f.Input.Rows || f.Output.Bytes < 0 || !isSHA256(f.Output.SHA256) {
			return fmt.Errorf("%w: input %s: output %+v: want the same path and rows and a SHA-256", ErrInvalidPartial, f.Input.Path, f.Output)
		}
		if len(f.OutOfRange) != len(p.Columns) {
			return fmt.Errorf("%w: input %s has %d out_of_range counts, want one per column (%d)", ErrInvalidPartial, f.Input.Path, len(f.OutOfRange), len(p.Columns))
		}
	}
	return nil
}

// isSHA256 reports whether s is a SHA-256 in lowercase hex.
func isSHA256(s string) bool {
	b, err := hex.DecodeString(s)
	return err == nil && len(b) == 32 && hex.EncodeToString(b) == s
}
