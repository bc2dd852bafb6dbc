package manifests

import (
	"bytes"
	"errors"
	"flag"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

var update = flag.Bool("update", false, "rewrite golden files in testdata")

func sample() *Manifest {
	one, zero := Float(1), Float(0)
	return &Manifest{
		ManifestVersion: Version,
		Kind:            KindDataset,
		Tool: Tool{Name: "lakescale", Version: "v0.0.0-test", VCSRevision: "0123abcd", GoVersion: "go1.26.8",
			Dependencies: map[string]string{"github.com/urfave/cli/v2": "v2.27.7", "github.com/apache/arrow/go/v17": "v17.0.0"}},
		Job: Job{Settings: Settings{Input: "lake", Output: "scaled", Std: "population", OutputType: "float64",
			Compression: "zstd", InfPolicy: "error",
			Rules: []ColumnRule{{Include: []string{"*"}, Method: "minmax", RangeMin: &zero, RangeMax: &one}}}},
		Columns: []Column{{
			Name: "wind_speed", Type: "float64", Method: "zscore", Options: Options{Std: "population"},
			Stats: Stats{Rows: 5, Count: 3, Nulls: 1, NaNs: 1, Mean: 0.1, StdSample: Float(math.NaN()),
				StdPopulation: 2.5e-310, Min: Float(math.Copysign(0, -1)), Max: math.MaxFloat64},
			Params:   Params{Center: 0.1, Scale: 2.5e-310},
			Warnings: []string{},
		}},
		Inputs:    []Input{{Path: "site=a/day=1/part-0.parquet", Partition: map[string]string{"site": "a", "day": "1"}, Rows: 5, Bytes: 1234, SHA256: strings.Repeat("ab", 32)}},
		Outputs:   []Output{{Path: "site=a/day=1/part-0.parquet", Rows: 5, Bytes: 2345, SHA256: strings.Repeat("cd", 32)}},
		CreatedAt: "2026-01-02T03:04:05Z",
	}
}

func encode(t *testing.T, m *Manifest) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := Encode(&buf, m); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func TestGolden(t *testing.T) {
	m := sample()
	m.Job.SHA256 = m.Job.Settings.Digest()
	got := encode(t, m)
	path := filepath.Join("testdata", "manifest.golden.json")
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Fatalf("encoding changed; run go test ./manifests -update if intended\ngot:\n%s\nwant:\n%s", got, want)
	}
	// Decoding the golden file and encoding it again is the identity.
	back, err := Decode(bytes.NewReader(want))
	if err != nil {
		t.Fatal(err)
	}
	if again := encode(t, back); !bytes.Equal(again, want) {
		t.Fatalf("decode+encode is not the identity:\n%s", again)
	}
}

// Every float64 bit pattern (but NaN and the infinities) survives JSON
// exactly; strconv's shortest round-trip formatting is the reference.
func TestFloatRoundTrip(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	vals := []float64{0, math.Copysign(0, -1), math.SmallestNonzeroFloat64, -math.SmallestNonzeroFloat64,
		math.MaxFloat64, -math.MaxFloat64, 0x1p-1022, 0.1, 1.0 / 3, 299.8524, 0.10000000055879354}
	for range 10000 {
		v := math.Float64frombits(r.Uint64())
		if !math.IsNaN(v) && !math.IsInf(v, 0) {
			vals = append(vals, v)
		}
	}
	for _, v := range vals {
		b, err := Float(v).MarshalJSON()
		if err != nil {
			t.Fatal(err)
		}
		var f Float
		if err := f.UnmarshalJSON(b); err != nil {
			t.Fatal(err)
		}
		if math.Float64bits(float64(f)) != math.Float64bits(v) {
			t.Fatalf("%x -> %s -> %x", math.Float64bits(v), b, math.Float64bits(float64(f)))
		}
	}
	b, _ := Float(math.NaN()).MarshalJSON()
	if string(b) != "null" {
		t.Fatalf("NaN encodes as %s, want null", b)
	}
	if _, err := Float(math.Inf(1)).MarshalJSON(); err == nil {
		t.Fatal("+Inf encoded without error")
	}
}

func TestDecodeRejects(t *testing.T) {
	good := string(encode(t, sample()))
	cases := map[string]string{
		"unknown field":   strings.Replace(good, `"kind"`, `"colour": 1, "kind"`, 1),
		"newer version":   strings.Replace(good, `"manifest_version": 1`, `"manifest_version": 2`, 1),
		"no version":      strings.Replace(good, `"manifest_version": 1,`, ``, 1),
		"bad kind":        strings.Replace(good, `"kind": "dataset"`, `"kind": "table"`, 1),
		"truncated":       good[:len(good)/2],
		"trailing data":   good + "{}",
		"zero scale":      strings.Replace(good, `"scale": 2.5e-310`, `"scale": 0`, 1),
		"rows mismatch":   strings.Replace(good, `"rows": 5,`+"\n        \"count\"", `"rows": 6,`+"\n        \"count\"", 1),
		"not json at all": "PAR1",
		"escaping path":   strings.Replace(good, `"path": "site=a/day=1/part-0.parquet",`+"\n      \"rows\": 5,\n      \"bytes\": 2345", `"path": "../secret.parquet",`+"\n      \"rows\": 5,\n      \"bytes\": 2345", 1),
		"absolute path":   strings.Replace(good, `"path": "site=a/day=1/part-0.parquet",`+"\n      \"partition\"", `"path": "/etc/passwd",`+"\n      \"partition\"", 1),
	}
	for name, doc := range cases {
		if doc == good {
			t.Fatalf("%s: test case did not change the document", name)
		}
		if _, err := Decode(strings.NewReader(doc)); !errors.Is(err, ErrInvalid) {
			t.Errorf("%s: got %v, want ErrInvalid", name, err)
		}
	}
}

func TestFileParams(t *testing.T) {
	m := sample()
	s, err := EncodeFileParams(m.FileParams())
	if err != nil {
		t.Fatal(err)
	}
	p, err := DecodeFileParams(s)
	if err != nil {
		t.Fatal(err)
	}
	if len(p.Columns) != 1 || p.Columns[0] != (FileColumn{Name: "wind_speed", Method: "zscore", Center: 0.1, Scale: 2.5e-310}) {
		t.Fatalf("round trip: %+v", p)
	}
	if _, err := DecodeFileParams(`{"version":1,"columns":[],"x":1}`); !errors.Is(err, ErrInvalid) {
		t.Fatalf("unknown field accepted: %v", err)
	}
}

func TestDigestChangesWithSettings(t *testing.T) {
	a := sample().Job.Settings
	b := a
	b.Std = "sample"
	if a.Digest() == b.Digest() {
		t.Fatal("different settings share a digest")
	}
	if a.Digest() != sample().Job.Settings.Digest() {
		t.Fatal("equal settings give different digests")
	}
}
