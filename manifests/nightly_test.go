package manifests

import (
	"bytes"
	"strings"
	"testing"
)

// The fields the nightly workflow adds survive decode and encode, and are
// absent from documents that do not set them (the golden file checks the
// latter).
func TestNightlyFieldsRoundTrip(t *testing.T) {
	m := sample()
	yes, no := true, false
	m.Job.Settings.Fit = "split=train"
	m.Job.SHA256 = m.Job.Settings.Digest()
	m.Inputs = append(m.Inputs, m.Inputs[0])
	m.Inputs[0].Fit, m.Inputs[1].Fit = &yes, &no
	m.Columns[0].OutOfRange = &OutOfRange{Below: 3, Above: 0}
	m.Columns[0].Warnings = []string{"outside_fitted_range"}
	got := encode(t, m)
	for _, want := range []string{`"fit": "split=train"`, `"fit": true`, `"fit": false`, `"out_of_range": {`, `"below": 3`, `"above": 0`} {
		if !strings.Contains(string(got), want) {
			t.Errorf("encoding lacks %s:\n%s", want, got)
		}
	}
	back, err := Decode(bytes.NewReader(got))
	if err != nil {
		t.Fatal(err)
	}
	if again := encode(t, back); !bytes.Equal(again, got) {
		t.Fatalf("decode+encode is not the identity:\n%s", again)
	}
	if m.Job.SHA256 == sample().Job.Settings.Digest() {
		t.Fatal("the fit filter does not change the settings digest")
	}
}

func TestInvertedKindValid(t *testing.T) {
	m := sample()
	m.Kind = KindInverted
	if _, err := Decode(bytes.NewReader(encode(t, m))); err != nil {
		t.Fatal(err)
	}
}
