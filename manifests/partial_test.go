package manifests

import (
	"bytes"
	"errors"
	"strings"
	"testing"
)

func samplePartial() *MeasurePartial {
	m := sample()
	fit := true
	in := m.Inputs[0]
	in.Fit = &fit
	p := &MeasurePartial{
		PartialHeader: PartialHeader{
			PartialVersion: PartialVersion, Kind: KindMeasureShard, Tool: m.Tool, Job: m.Job,
			Shard:   Shard{Index: 1, Count: 3},
			Listing: Listing{Files: 7, Bytes: 9000, SHA256: strings.Repeat("0f", 32)},
		},
		Columns: []MeasuredColumn{{Name: "wind_speed", Type: "float64", Method: "zscore", Std: "population"}},
		Files:   []MeasuredFile{{Input: in, States: [][]byte{{1, 2, 3}}}},
	}
	p.Job.Settings.Fit = "site=a"
	p.Job.SHA256 = p.Job.Settings.Digest()
	return p
}

// A measure shard's document survives encoding exactly, and decoding
// refuses unknown fields, another kind or version, a job digest that does
// not match its settings and states that do not match the columns.
func TestMeasurePartialRoundTripAndRefusals(t *testing.T) {
	var buf bytes.Buffer
	if err := EncodeMeasurePartial(&buf, samplePartial()); err != nil {
		t.Fatal(err)
	}
	good := buf.Bytes()
	back, err := DecodeMeasurePartial(bytes.NewReader(good))
	if err != nil {
		t.Fatal(err)
	}
	var again bytes.Buffer
	if err := EncodeMeasurePartial(&again, back); err != nil || !bytes.Equal(again.Bytes(), good) {
		t.Fatalf("decode+encode is not the identity (%v):\n%s", err, again.Bytes())
	}
	for _, tc := range []struct {
		name, old, new, want string
	}{
		{"unknown field", `"partial_version": 1,`, `"partial_version": 1, "extra": 1,`, "unknown field"},
		{"version", `"partial_version": 1`, `"partial_version": 2`, "partial_version 2"},
		{"kind", `"kind": "measure_shard"`, `"kind": "apply_shard"`, `kind "apply_shard"`},
		{"digest", `"fit": "site=a"`, `"fit": "site=b"`, "not the digest"},
		{"shard", `"index": 1`, `"index": 3`, "shard 3 of 3"},
		{"states", `"AQID"`, `"AQID", "AQID"`, "2 column states, want 1"},
		{"path", `"path": "site=a/day=1/part-0.parquet"`, `"path": "../x.parquet"`, "inside the dataset"},
	} {
		doc := strings.Replace(string(good), tc.old, tc.new, 1)
		if doc == string(good) {
			t.Fatalf("%s: %q not in the document", tc.name, tc.old)
		}
		_, err := DecodeMeasurePartial(strings.NewReader(doc))
		if !errors.Is(err, ErrInvalidPartial) || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: %v, want ErrInvalidPartial with %q", tc.name, err, tc.want)
		}
	}
	if _, err := DecodeApplyPartial(bytes.NewReader(good)); !errors.Is(err, ErrInvalidPartial) {
		t.Errorf("a measure result read as an apply result: %v", err)
	}
}

// An apply shard's document needs one out-of-range count per column and
// an output for the same path and rows as its input.
func TestApplyPartialValidate(t *testing.T) {
	m := sample()
	m.Job.SHA256 = m.Job.Settings.Digest()
	p := &ApplyPartial{
		PartialHeader: PartialHeader{PartialVersion: PartialVersion, Kind: KindApplyShard, Tool: m.Tool, Job: m.Job,
			Shard: Shard{Index: 0, Count: 1}, Listing: Listing{Files: 1, Bytes: 1234, SHA256: strings.Repeat("0f", 32)}},
		ParamsSource: ParamsSource{Path: "stats.json", Kind: KindStatistics, SHA256: strings.Repeat("ee", 32)},
		Columns:      m.Columns,
		Files: []AppliedFile{{Input: m.Inputs[0], Output: Output{Path: m.Inputs[0].Path, Rows: 5, Bytes: 10, SHA256: strings.Repeat("cd", 32)},
			OutOfRange: []OutOfRange{{Below: 1}}}},
	}
	var buf bytes.Buffer
	if err := EncodeApplyPartial(&buf, p); err != nil {
		t.Fatal(err)
	}
	if _, err := DecodeApplyPartial(&buf); err != nil {
		t.Fatal(err)
	}
	p.Files[0].OutOfRange = nil
	if err := p.Validate(); !errors.Is(err, ErrInvalidPartial) {
		t.Errorf("missing out_of_range counts: %v", err)
	}
	p.Files[0].OutOfRange = []OutOfRange{{}}
	p.Files[0].Output.Path = "other.parquet"
	if err := p.Validate(); !errors.Is(err, ErrInvalidPartial) {
		t.Errorf("output of another path: %v", err)
	}
}
