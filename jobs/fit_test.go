package jobs

import (
	"reflect"
	"testing"

	"github.com/lakescale/lakescale/arrowio"
)

func kvs(pairs ...string) []arrowio.KV {
	var out []arrowio.KV
	for i := 0; i+1 < len(pairs); i += 2 {
		out = append(out, arrowio.KV{Key: pairs[i], Value: pairs[i+1]})
	}
	return out
}

func TestParseFit(t *testing.T) {
	for _, tc := range []struct {
		in        string
		want      FitFilter
		canonical string
	}{
		{"", nil, ""},
		{"  ", nil, ""},
		{"split=train", FitFilter{{"split", "=", []string{"train"}}}, "split=train"},
		{" split = train , day >= 2026-01-01 ", FitFilter{{"split", "=", []string{"train"}}, {"day", ">=", []string{"2026-01-01"}}}, "split=train,day>=2026-01-01"},
		{"split=train|valid", FitFilter{{"split", "=", []string{"train", "valid"}}}, "split=train|valid"},
		{"site!=a|b", FitFilter{{"site", "!=", []string{"a", "b"}}}, "site!=a|b"},
		{"day<5,day>1", FitFilter{{"day", "<", []string{"5"}}, {"day", ">", []string{"1"}}}, "day<5,day>1"},
		{"k<=x", FitFilter{{"k", "<=", []string{"x"}}}, "k<=x"},
		{"k=", FitFilter{{"k", "=", []string{""}}}, "k="},
		{`city=new\,york`, FitFilter{{"city", "=", []string{"new,york"}}}, `city=new\,york`},
		{`a\=b=c\|d`, FitFilter{{"a=b", "=", []string{"c|d"}}}, `a\=b=c\|d`},
		{`k=\ x\ `, FitFilter{{"k", "=", []string{" x "}}}, `k=\ x\ `},
	} {
		got, err := ParseFit(tc.in)
		if err != nil {
			t.Errorf("ParseFit(%q): %v", tc.in, err)
			continue
		}
		if !reflect.DeepEqual(got, tc.want) {
			t.Errorf("ParseFit(%q) = %#v, want %#v", tc.in, got, tc.want)
		}
		if s := got.String(); s != tc.canonical {
			t.Errorf("ParseFit(%q).String() = %q, want %q", tc.in, s, tc.canonical)
		}
	}
}

func TestParseFitErrors(t *testing.T) {
	for _, in := range []string{
		"split", "=train", "split==train", "a=b,", ",a=b", "a=b,,c=d", "day>=", "day<",
		"day>=1|2", "a!b", `a=b\`, "a=b=c", "a<b<c",
	} {
		if f, err := ParseFit(in); err == nil {
			t.Errorf("ParseFit(%q) = %#v, want an error", in, f)
		}
	}
}

func TestFitMatch(t *testing.T) {
	for _, tc := range []struct {
		filter string
		part   []arrowio.KV
		want   bool
	}{
		{"split=train", kvs("split", "train"), true},
		{"split=train", kvs("split", "test"), false},
		{"split=train", kvs("day", "1"), false}, // no such key
		{"split!=test", kvs("day", "1"), false}, // no such key
		{"split!=test", kvs("split", "train"), true},
		{"split!=test|valid", kvs("split", "valid"), false},
		{"split=train|valid", kvs("split", "valid"), true},
		{"day>=2026-01-01", kvs("day", "2026-01-01"), true},
		{"day>=2026-01-01", kvs("day", "2025-12-31"), false},
		{"day>2026-01-01", kvs("day", "2026-01-01"), false},
		{"day<2026-02-01,day>=2026-01-01", kvs("day", "2026-01-31"), true},
		{"day<2026-02-01,day>=2026-01-01", kvs("day", "2026-02-01"), false},
		// Numbers compare as numbers, text as text.
		{"n<10", kvs("n", "7"), true},
		{"n<10", kvs("n", "007"), true},
		{"n<=1e1", kvs("n", "10"), true},
		{"n>-1.5", kvs("n", "-2"), false},
		{"n<10", kvs("n", "x"), false},  // "x" > "10" as text
		{"n=7", kvs("n", "007"), false}, // = is exact text
		// The deeper segment of a repeated key decides.
		{"k=b", kvs("k", "a", "k", "b"), true},
		{"k=a", kvs("k", "a", "k", "b"), false},
		{"site=a,split=train", kvs("site", "a", "split", "train"), true},
		{"site=a,split=train", kvs("site", "b", "split", "train"), false},
		{"", kvs("site", "b"), true},
	} {
		f, err := ParseFit(tc.filter)
		if err != nil {
			t.Fatal(err)
		}
		if got := f.Match(tc.part); got != tc.want {
			t.Errorf("%q matches %v: %v, want %v", tc.filter, tc.part, got, tc.want)
		}
	}
}

// FuzzParseFit: parsing never panics, and the canonical text of a parsed
// filter parses to the same filter and is itself canonical.
func FuzzParseFit(f *testing.F) {
	for _, s := range []string{"split=train", "day>=2026-01-01,day<2026-02-01", `a\,b=c|d`, "k!=x|y|z", " k = v ", `\ =\ `, "n<=1e3"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		ff, err := ParseFit(s)
		if err != nil {
			return
		}
		c := ff.String()
		again, err := ParseFit(c)
		if err != nil {
			t.Fatalf("canonical %q of %q does not parse: %v", c, s, err)
		}
		if !reflect.DeepEqual(again, ff) {
			t.Fatalf("%q -> %#v -> %q -> %#v", s, ff, c, again)
		}
		if again.String() != c {
			t.Fatalf("canonical text not stable: %q -> %q", c, again.String())
		}
	})
}
