package stats

// NIST Statistical Reference Datasets (StRD), univariate summary
// statistics: https://www.itl.nist.gov/div898/strd/ (provenance and
// checksums of the copies in testdata/README.md).

import (
	"bytes"
	"math"
	"math/big"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow/memory"
)

type nistSet struct {
	vals     []float64
	certMean string // NIST certified sample mean, as printed
	certStd  string // NIST certified sample std (n-1), as printed
	certN    int    // NIST "Number of Observations"
}

// readNIST parses a StRD univariate file: certified values on lines 41-43,
// the observation count on line 45, one observation per line from line 61.
// Lines end in CRLF.
func readNIST(t testing.TB, name string) nistSet {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join("testdata", name+".dat"))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(raw, []byte("\r\n")) {
		t.Fatalf("%s: no CRLF line endings; the file was rewritten", name)
	}
	lines := strings.Split(string(raw), "\n")
	for i := range lines {
		lines[i] = strings.TrimRight(lines[i], "\r")
	}
	field := func(lineNo int, label string) string {
		l := lines[lineNo-1]
		if !strings.HasPrefix(l, label) {
			t.Fatalf("%s line %d: %q does not start with %q", name, lineNo, l, label)
		}
		return strings.Fields(l[strings.LastIndex(l, ":")+1:])[0]
	}
	var s nistSet
	s.certMean = field(41, "Sample Mean")
	s.certStd = field(42, "Sample Standard Deviation")
	if s.certN, err = strconv.Atoi(field(45, "Number of Observations")); err != nil {
		t.Fatal(err)
	}
	for _, l := range lines[60:] {
		l = strings.TrimSpace(l)
		if l == "" {
			continue
		}
		x, err := strconv.ParseFloat(l, 64)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		s.vals = append(s.vals, x)
	}
	if len(s.vals) != s.certN {
		t.Fatalf("%s: %d observations, header says %d", name, len(s.vals), s.certN)
	}
	return s
}

// nistTargets are the exact statistics of the parsed float64 values,
// rounded once to float64, and how many digits (NIST's log relative error,
// LRE) they share with the certified values, from the table in
// testdata/README.md (computed there with Go math/big and Python
// fractions, independently of this package). lre 0 means the float64 is
// the certified value exactly. Our LRE bound is the table's, rounded down.
var nistTargets = []struct {
	name                         string
	mean, std, varSample, stdPop string
	lreMean, lreStd              float64
	integral                     bool // every observation is an integer
}{
	{"PiDigits", "4.5348", "2.867339060288708", "8.221633286657331", "2.86705231204455", 0, 15, true},
	{"Lottery", "518.9587155963303", "291.6997274709691", "85088.73100663764", "291.0299223907924", 15, 15, true},
	{"Lew", "-177.435", "277.3321680443161", "76913.13143216081", "276.637968787728", 0, 15, true},
	{"Mavro", "2.001856", "0.0004291234540030854", "1.8414693877553815e-07", "0.0004248105460084853", 0, 13, false},
	{"Michelso", "299.8524", "0.07901054781905066", "0.006242666666666492", "0.07861450247886727", 0, 13, false},
	{"NumAcc1", "10000002", "1", "1", "0.816496580927726", 0, 0, true},
	{"NumAcc2", "1.2", "0.09999999999999998", "0.009999999999999995", "0.0999500374687773", 0, 15, false},
	{"NumAcc3", "1000000.2", "0.1000000000349246", "0.01000000000698492", "0.09995003750368446", 0, 9, false},
	{"NumAcc4", "10000000.2", "0.10000000055879354", "0.01000000011175871", "0.09995003802729167", 0, 8, false},
}

func parseF(t testing.TB, s string) float64 {
	t.Helper()
	x, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatal(err)
	}
	return x
}

// lre is NIST's log relative error -log10(|x - c|/|c|) against the exact
// decimal certified value c; +Inf when x equals it.
func lre(t testing.TB, x float64, cert string) float64 {
	t.Helper()
	c, ok := new(big.Rat).SetString(cert)
	if !ok {
		t.Fatalf("parse certified value %q", cert)
	}
	d := new(big.Rat).Sub(new(big.Rat).SetFloat64(x), c)
	if d.Sign() == 0 {
		return math.Inf(1)
	}
	rel, _ := d.Abs(d).Quo(d, new(big.Rat).Abs(c)).Float64()
	return -math.Log10(rel)
}

func checkNIST(t *testing.T, label string, got Summary, set nistSet, tg int) {
	t.Helper()
	want := nistTargets[tg]
	for _, c := range []struct {
		what      string
		got, want float64
	}{
		{"mean", got.Mean, parseF(t, want.mean)},
		{"sample std", got.StdSample, parseF(t, want.std)},
		{"sample variance", got.VarSample, parseF(t, want.varSample)},
		{"population std", got.StdPopulation, parseF(t, want.stdPop)},
	} {
		if !accSameFloat(c.got, c.want) {
			t.Errorf("%s %s: %s, want %s", label, c.what, accFmt(c.got), accFmt(c.want))
		}
	}
	if got.Count != uint64(set.certN) || got.Rows != uint64(set.certN) {
		t.Errorf("%s: count %d rows %d, want %d", label, got.Count, got.Rows, set.certN)
	}
	for _, c := range []struct {
		what string
		x    float64
		cert string
		min  float64
	}{
		{"mean", got.Mean, set.certMean, want.lreMean},
		{"sample std", got.StdSample, set.certStd, want.lreStd},
	} {
		l := lre(t, c.x, c.cert)
		if c.min == 0 {
			if parseF(t, c.cert) != c.x {
				t.Errorf("%s %s = %v, want the certified %s exactly (LRE %.1f)", label, c.what, c.x, c.cert, l)
			}
		} else if l < c.min {
			t.Errorf("%s %s = %v: LRE %.2f against certified %s, want at least %.0f", label, c.what, c.x, l, c.cert, c.min)
		}
	}
}

// TestNIST: for each StRD univariate set, the whole column and the column
// cut into 2, 7 and n pieces, merged along a shuffled tree, give
// byte-identical states and the bit-exact float64 targets.
func TestNIST(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(71, 73))
	for i, tg := range nistTargets {
		t.Run(tg.name, func(t *testing.T) {
			set := readNIST(t, tg.name)
			whole := accFeedFloat64(t, mem, set.vals, nil)
			checkNIST(t, "whole", whole.Summary(), set, i)
			want, err := whole.MarshalBinary()
			if err != nil {
				t.Fatal(err)
			}
			n := len(set.vals)
			for _, k := range []int{1, 2, 7, n} {
				merged := accMergeShuffled(t, accPartsFloat64(t, mem, set.vals, nil, accEvenCuts(n, k)), rng)
				got, err := merged.MarshalBinary()
				if err != nil {
					t.Fatal(err)
				}
				if !bytes.Equal(got, want) {
					t.Errorf("%d pieces: merged state differs from the whole-column state", k)
				}
				checkNIST(t, strconv.Itoa(k)+" pieces", merged.Summary(), set, i)
			}
			// Fed in reverse, value by value in shuffled order: the same state.
			perm := rng.Perm(n)
			shuffled := make([]float64, n)
			for j, p := range perm {
				shuffled[j] = set.vals[p]
			}
			if !accSameBytes(t, accFeedFloat64(t, mem, shuffled, nil), whole) {
				t.Error("shuffled input gives a different state")
			}
			if tg.integral {
				ints := make([]int64, n)
				for j, x := range set.vals {
					ints[j] = int64(x)
					if float64(ints[j]) != x {
						t.Fatalf("observation %v is not an integer", x)
					}
				}
				arr := accInt64Array(mem, ints, nil)
				a := NewAccumulator(KindSigned)
				if err := a.Add(arr); err != nil {
					t.Fatal(err)
				}
				arr.Release()
				checkNIST(t, "int64 column", a.Summary(), set, i)
			}
		})
	}
}
