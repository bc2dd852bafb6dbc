package stats_test

import (
	"errors"
	"flag"
	"math"
	"math/big"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"gonum.org/v1/gonum/stat"

	"github.com/lakescale/lakescale/stats"
)

// Helpers in this file carry an "sc" prefix so they cannot collide with
// helpers in the package's other external test files.

func TestParseMethod(t *testing.T) {
	for _, name := range []string{"zscore", "minmax", "meannorm", "maxabs", "none"} {
		m, err := stats.ParseMethod(name)
		if err != nil || string(m) != name {
			t.Errorf("ParseMethod(%q) = %q, %v; want %q, nil", name, m, err, name)
		}
	}
	for _, bad := range []string{"", "ZScore", "z-score", "min_max", " none"} {
		_, err := stats.ParseMethod(bad)
		if err == nil {
			t.Errorf("ParseMethod(%q) succeeded", bad)
			continue
		}
		msg := err.Error()
		for _, name := range []string{"zscore", "minmax", "meannorm", "maxabs", "none"} {
			if !strings.Contains(msg, name) {
				t.Errorf("ParseMethod(%q) error %q does not list %q", bad, msg, name)
			}
		}
		if msg != strings.ToLower(msg[:1])+msg[1:] || strings.HasSuffix(msg, ".") {
			t.Errorf("error %q: want lowercase start and no trailing period", msg)
		}
	}
}

func TestParseStdKind(t *testing.T) {
	for _, name := range []string{"population", "sample"} {
		k, err := stats.ParseStdKind(name)
		if err != nil || string(k) != name {
			t.Errorf("ParseStdKind(%q) = %q, %v", name, k, err)
		}
	}
	for _, bad := range []string{"", "pop", "Sample", "n-1"} {
		_, err := stats.ParseStdKind(bad)
		if err == nil {
			t.Errorf("ParseStdKind(%q) succeeded", bad)
		} else if !strings.Contains(err.Error(), "population") || !strings.Contains(err.Error(), "sample") {
			t.Errorf("ParseStdKind(%q) error %q does not list the valid kinds", bad, err)
		}
	}
}

// scSummary describes xs the way pass one would, using math/big for the
// mean and standard deviations (brute force, independent of the
// package's accumulator). The standard deviations go through a 400-bit
// big.Float square root and are then rounded to float64, which can differ
// from the correctly rounded value in rare ties; the tests below only use
// them as plausible inputs to Fit, never as expected outputs.
func scSummary(xs []float64) stats.Summary {
	s := stats.Summary{Rows: uint64(len(xs)), Count: uint64(len(xs))}
	if len(xs) == 0 {
		s.Mean, s.Min, s.Max = math.NaN(), math.NaN(), math.NaN()
		s.StdPopulation, s.StdSample = math.NaN(), math.NaN()
		s.VarPopulation, s.VarSample = math.NaN(), math.NaN()
		return s
	}
	n := big.NewRat(int64(len(xs)), 1)
	sum := new(big.Rat)
	for _, x := range xs {
		sum.Add(sum, new(big.Rat).SetFloat64(x))
	}
	mean := new(big.Rat).Quo(sum, n)
	ss := new(big.Rat)
	for _, x := range xs {
		d := new(big.Rat).Sub(new(big.Rat).SetFloat64(x), mean)
		ss.Add(ss, d.Mul(d, d))
	}
	s.Mean, _ = mean.Float64()
	pop := new(big.Rat).Quo(ss, n)
	s.VarPopulation, _ = pop.Float64()
	s.StdPopulation = scSqrt(pop)
	if len(xs) > 1 {
		smp := new(big.Rat).Quo(ss, big.NewRat(int64(len(xs)-1), 1))
		s.VarSample, _ = smp.Float64()
		s.StdSample = scSqrt(smp)
	} else {
		s.VarSample, s.StdSample = math.NaN(), math.NaN()
	}
	s.Min, s.Max = slices.Min(xs), slices.Max(xs)
	return s
}

func scSqrt(r *big.Rat) float64 {
	f := new(big.Float).SetPrec(400).SetRat(r)
	f.Sqrt(f)
	v, _ := f.Float64()
	return v
}

// scSame reports whether a and b have the same bits, treating every NaN
// as the same value.
func scSame(a, b float64) bool {
	if math.IsNaN(a) || math.IsNaN(b) {
		return math.IsNaN(a) && math.IsNaN(b)
	}
	return math.Float64bits(a) == math.Float64bits(b)
}

func scFit(t *testing.T, m stats.Method, o stats.Options, s stats.Summary) stats.Params {
	t.Helper()
	p, w, err := stats.Fit(m, o, s)
	if err != nil {
		t.Fatalf("Fit(%s, %+v): %v", m, o, err)
	}
	if len(w) != 0 {
		t.Fatalf("Fit(%s, %+v): unexpected warnings %v", m, o, w)
	}
	return p
}

// TestFitTextbook checks every method on small data sets whose scaled
// values can be derived by hand.
func TestFitTextbook(t *testing.T) {
	// The data set [2, 4, 4, 4, 5, 5, 7, 9] with mean 5 and population
	// standard deviation 2 is a common textbook example (from memory); the
	// statistics are easy to verify by hand: sum 40, squared deviations
	// 9+1+1+1+0+0+4+16 = 32, 32/8 = 4.
	xs := []float64{2, 4, 4, 4, 5, 5, 7, 9}
	sum := stats.Summary{
		Rows: 8, Count: 8, Mean: 5, VarPopulation: 4, StdPopulation: 2,
		// The sample std is an input here, from gonum (an independent library).
		StdSample: stat.StdDev(xs, nil), VarSample: stat.Variance(xs, nil),
		Min: 2, Max: 9,
	}
	// Expected values are hand-derived; k/7 and k/3 stand for the float64
	// nearest those fractions, which is what a single division gives.
	cases := []struct {
		m    stats.Method
		o    stats.Options
		want []float64
	}{
		{stats.ZScore, stats.Options{}, []float64{-1.5, -0.5, -0.5, -0.5, 0, 0, 1, 2}},
		{stats.MinMax, stats.Options{}, []float64{0, 2. / 7, 2. / 7, 2. / 7, 3. / 7, 3. / 7, 5. / 7, 1}},
		// [-1, 1]: scale 7/2 = 3.5, center 2 + 3.5 = 5.5; (x - 5.5) / 3.5.
		{stats.MinMax, stats.Options{RangeMin: -1, RangeMax: 1}, []float64{-1, -3. / 7, -3. / 7, -3. / 7, -1. / 7, -1. / 7, 3. / 7, 1}},
		// [10, 24]: scale 1/2, center 2 - 5 = -3; (x + 3) * 2.
		{stats.MinMax, stats.Options{RangeMin: 10, RangeMax: 24}, []float64{10, 14, 14, 14, 16, 16, 20, 24}},
		{stats.MeanNorm, stats.Options{}, []float64{-3. / 7, -1. / 7, -1. / 7, -1. / 7, 0, 0, 2. / 7, 4. / 7}},
		{stats.MaxAbs, stats.Options{}, []float64{2. / 9, 4. / 9, 4. / 9, 4. / 9, 5. / 9, 5. / 9, 7. / 9, 1}},
		{stats.Identity, stats.Options{}, xs},
	}
	for _, c := range cases {
		p := scFit(t, c.m, c.o, sum)
		for i, x := range xs {
			if got := p.Forward(x); !scSame(got, c.want[i]) {
				t.Errorf("%s %+v: Forward(%v) = %v, want %v (params %+v)", c.m, c.o, x, got, c.want[i], p)
			}
		}
	}

	// Sample std: gonum's StdScore is (x - mean) / std in two IEEE 754
	// operations; here every x - mean is exact, so its one rounding is
	// the correctly rounded quotient Forward returns: the bits must match.
	p := scFit(t, stats.ZScore, stats.Options{Std: stats.StdSample}, sum)
	for _, x := range xs {
		if got, want := p.Forward(x), stat.StdScore(x, 5, sum.StdSample); !scSame(got, want) {
			t.Errorf("sample zscore Forward(%v) = %v, gonum StdScore %v", x, got, want)
		}
	}

	// maxabs on mixed signs: max(|-3|, |1.5|) = 3.
	p = scFit(t, stats.MaxAbs, stats.Options{}, stats.Summary{Rows: 4, Count: 4, Mean: -0.625, Min: -3, Max: 1.5})
	for x, want := range map[float64]float64{-3: -1, -1: -1. / 3, 0: 0, 1.5: 0.5} {
		if got := p.Forward(x); got != want {
			t.Errorf("maxabs Forward(%v) = %v, want %v", x, got, want)
		}
	}
}

// TestFitNIST uses NIST StRD NumAcc1 (values 10000001, 10000003, 10000002;
// certified mean 10000002 and sample std 1, both exact; population std
// 0.816496580927726 is the correctly rounded float64 from the README of our
// copy of the data).
func TestFitNIST(t *testing.T) {
	s := stats.Summary{Rows: 3, Count: 3, Mean: 10000002, StdSample: 1, VarSample: 1,
		StdPopulation: 0.816496580927726, Min: 10000001, Max: 10000003}
	xs := []float64{10000001, 10000003, 10000002}

	p := scFit(t, stats.ZScore, stats.Options{Std: stats.StdSample}, s)
	for i, want := range []float64{-1, 1, 0} {
		if got := p.Forward(xs[i]); got != want {
			t.Errorf("sample zscore of %v = %v, want %v", xs[i], got, want)
		}
	}
	p = scFit(t, stats.MinMax, stats.Options{}, s)
	for i, want := range []float64{0, 1, 0.5} {
		if got := p.Forward(xs[i]); got != want {
			t.Errorf("minmax of %v = %v, want %v", xs[i], got, want)
		}
	}
}

func TestFitRecordsOptions(t *testing.T) {
	s := scSummary([]float64{1, 2, 3})
	cases := []struct {
		m    stats.Method
		in   stats.Options
		want stats.Options
	}{
		{stats.ZScore, stats.Options{}, stats.Options{Std: stats.StdPopulation}},
		{stats.ZScore, stats.Options{Std: stats.StdSample, RangeMin: -1, RangeMax: 1}, stats.Options{Std: stats.StdSample}},
		{stats.MinMax, stats.Options{}, stats.Options{RangeMin: 0, RangeMax: 1}},
		{stats.MinMax, stats.Options{Std: stats.StdSample, RangeMin: -2, RangeMax: 5}, stats.Options{RangeMin: -2, RangeMax: 5}},
		{stats.MeanNorm, stats.Options{Std: stats.StdSample}, stats.Options{}},
		{stats.MaxAbs, stats.Options{RangeMin: 3, RangeMax: 4}, stats.Options{}},
		{stats.Identity, stats.Options{Std: stats.StdPopulation}, stats.Options{}},
	}
	for _, c := range cases {
		p := scFit(t, c.m, c.in, s)
		if p.Method != c.m || p.Options != c.want {
			t.Errorf("Fit(%s, %+v) recorded %s %+v, want %+v", c.m, c.in, p.Method, p.Options, c.want)
		}
		if err := p.Validate(); err != nil {
			t.Errorf("Fit(%s, %+v) returned params that fail Validate: %v", c.m, c.in, err)
		}
	}
}

func TestFitRejectsBadInput(t *testing.T) {
	s := scSummary([]float64{1, 2, 3})
	inf, nan := math.Inf(1), math.NaN()
	cases := []struct {
		name string
		m    stats.Method
		o    stats.Options
		s    stats.Summary
		want string
	}{
		{"unknown method", "robust", stats.Options{}, s, "unknown scaling method"},
		{"empty range", stats.MinMax, stats.Options{RangeMin: 1, RangeMax: 1}, s, "invalid target range"},
		{"reversed range", stats.MinMax, stats.Options{RangeMin: 1, RangeMax: 0}, s, "invalid target range"},
		{"nan range", stats.MinMax, stats.Options{RangeMin: nan, RangeMax: 1}, s, "invalid target range"},
		{"inf range", stats.MinMax, stats.Options{RangeMin: 0, RangeMax: inf}, s, "invalid target range"},
		{"range checked for other methods", stats.ZScore, stats.Options{RangeMin: 2, RangeMax: -2}, s, "invalid target range"},
		{"bad std", stats.ZScore, stats.Options{Std: "n-1"}, s, "unknown standard deviation kind"},
		{"bad std for other methods", stats.MinMax, stats.Options{Std: "pop"}, s, "unknown standard deviation kind"},
		{"nan min", stats.MinMax, stats.Options{}, stats.Summary{Count: 2, Min: nan, Max: 1}, "invalid summary"},
		{"min above max", stats.MaxAbs, stats.Options{}, stats.Summary{Count: 2, Min: 2, Max: 1}, "invalid summary"},
		{"nan mean", stats.MeanNorm, stats.Options{}, stats.Summary{Count: 2, Mean: nan, Min: 0, Max: 1}, "invalid summary"},
		{"nan std", stats.ZScore, stats.Options{}, stats.Summary{Count: 2, Mean: 0.5, StdPopulation: nan, Min: 0, Max: 1}, "invalid summary"},
		{"negative std", stats.ZScore, stats.Options{Std: stats.StdSample}, stats.Summary{Count: 2, Mean: 0.5, StdSample: -1, Min: 0, Max: 1}, "invalid summary"},
	}
	for _, c := range cases {
		p, w, err := stats.Fit(c.m, c.o, c.s)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: Fit = %+v, %v, %v; want error containing %q", c.name, p, w, err, c.want)
		}
	}
}

// TestFitDegenerate checks each documented fallback: finite parameters and
// exactly the expected warning.
func TestFitDegenerate(t *testing.T) {
	nan := math.NaN()
	empty := stats.Summary{Rows: 5, Count: 0, Nulls: 2, NaNs: 1, PosInf: 1, NegInf: 1,
		Mean: nan, StdPopulation: nan, StdSample: nan, VarPopulation: nan, VarSample: nan, Min: nan, Max: nan}
	one := scSummary([]float64{-7.25})
	constant := scSummary([]float64{3.5, 3.5, 3.5})
	zeros := scSummary([]float64{0, 0, math.Copysign(0, -1)})
	// Two values 0 and the smallest subnormal: the exact population std
	// is half the smallest subnormal, a tie that rounds to 0 (even).
	tiny := stats.Summary{Rows: 2, Count: 2, Mean: 0, StdPopulation: 0, StdSample: 5e-324, Min: 0, Max: 5e-324}

	cases := []struct {
		name         string
		m            stats.Method
		o            stats.Options
		s            stats.Summary
		warn         stats.Warning
		center, scal float64
		maps         [2]float64 // Forward(maps[0]) must be maps[1]
	}{
		{"zscore no finite", stats.ZScore, stats.Options{}, empty, stats.WarnNoFiniteValues, 0, 1, [2]float64{2, 2}},
		{"minmax no finite", stats.MinMax, stats.Options{RangeMin: 5, RangeMax: 6}, empty, stats.WarnNoFiniteValues, 0, 1, [2]float64{2, 2}},
		{"meannorm no finite", stats.MeanNorm, stats.Options{}, empty, stats.WarnNoFiniteValues, 0, 1, [2]float64{2, 2}},
		{"maxabs no finite", stats.MaxAbs, stats.Options{}, empty, stats.WarnNoFiniteValues, 0, 1, [2]float64{2, 2}},
		{"zscore sample one value", stats.ZScore, stats.Options{Std: stats.StdSample}, one, stats.WarnSingleValueSampleStd, -7.25, 1, [2]float64{-7.25, 0}},
		{"zscore population one value", stats.ZScore, stats.Options{}, one, stats.WarnConstantColumn, -7.25, 1, [2]float64{-7.25, 0}},
		{"zscore constant", stats.ZScore, stats.Options{}, constant, stats.WarnConstantColumn, 3.5, 1, [2]float64{3.5, 0}},
		{"zscore sample constant", stats.ZScore, stats.Options{Std: stats.StdSample}, constant, stats.WarnConstantColumn, 3.5, 1, [2]float64{3.5, 0}},
		{"minmax constant", stats.MinMax, stats.Options{}, constant, stats.WarnConstantColumn, 3.5, 1, [2]float64{3.5, 0}},
		{"minmax constant to a", stats.MinMax, stats.Options{RangeMin: -1, RangeMax: 1}, constant, stats.WarnConstantColumn, 4.5, 1, [2]float64{3.5, -1}},
		{"meannorm constant", stats.MeanNorm, stats.Options{}, constant, stats.WarnConstantColumn, 3.5, 1, [2]float64{3.5, 0}},
		{"maxabs all zero", stats.MaxAbs, stats.Options{}, zeros, stats.WarnAllZero, 0, 1, [2]float64{0, 0}},
		{"zscore std rounds to zero", stats.ZScore, stats.Options{}, tiny, stats.WarnScaleUnderflow, 0, 1, [2]float64{5e-324, 5e-324}},
		// (max - min) / (b - a) = 2^-1074 / 2^60 rounds to 0.
		{"minmax scale rounds to zero", stats.MinMax, stats.Options{RangeMin: 0, RangeMax: 0x1p60}, tiny, stats.WarnScaleUnderflow, 0, 1, [2]float64{0, 0}},
	}
	for _, c := range cases {
		p, w, err := stats.Fit(c.m, c.o, c.s)
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		if !slices.Equal(w, []stats.Warning{c.warn}) {
			t.Errorf("%s: warnings %v, want [%s]", c.name, w, c.warn)
		}
		if !scSame(p.Center, c.center) || !scSame(p.Scale, c.scal) {
			t.Errorf("%s: center %v scale %v, want %v %v", c.name, p.Center, p.Scale, c.center, c.scal)
		}
		if err := p.Validate(); err != nil {
			t.Errorf("%s: %v", c.name, err)
		}
		if got := p.Forward(c.maps[0]); got != c.maps[1] {
			t.Errorf("%s: Forward(%v) = %v, want %v", c.name, c.maps[0], got, c.maps[1])
		}
	}

	// A constant non-zero column is not degenerate for maxabs.
	p, w, err := stats.Fit(stats.MaxAbs, stats.Options{}, scSummary([]float64{-4, -4}))
	if err != nil || len(w) != 0 || p.Scale != 4 || p.Forward(-4) != -1 {
		t.Errorf("maxabs of constant -4: %+v %v %v", p, w, err)
	}
	// Identity never consults the summary and never warns.
	p, w, err = stats.Fit(stats.Identity, stats.Options{}, empty)
	if err != nil || len(w) != 0 || p.Center != 0 || p.Scale != 1 {
		t.Errorf("none of an empty column: %+v %v %v", p, w, err)
	}
}

func TestFitOverflow(t *testing.T) {
	huge := scSummary([]float64{-1e308, 1e308})
	// Mean of [-1.7e308, 1.7e308 x 9] is 1.36e308; min - mean is -3.06e308.
	skew := scSummary(append([]float64{-1.7e308}, slices.Repeat([]float64{1.7e308}, 9)...))
	cases := []struct {
		name string
		m    stats.Method
		o    stats.Options
		s    stats.Summary
	}{
		{"minmax scale", stats.MinMax, stats.Options{}, huge},
		{"minmax narrow target", stats.MinMax, stats.Options{RangeMin: 0, RangeMax: 0x1p-60}, scSummary([]float64{0, 1e300})},
		// scale 2e308 / 4 is finite, but max - center = 2e308 is not.
		{"minmax forward", stats.MinMax, stats.Options{RangeMin: 0, RangeMax: 4}, huge},
		{"minmax center", stats.MinMax, stats.Options{RangeMin: 1e300, RangeMax: 1e300 + 1e285}, scSummary([]float64{-1e308, -1e307})},
		{"meannorm scale", stats.MeanNorm, stats.Options{}, huge},
		{"zscore forward", stats.ZScore, stats.Options{}, skew},
	}
	for _, c := range cases {
		p, w, err := stats.Fit(c.m, c.o, c.s)
		if !errors.Is(err, stats.ErrParamOverflow) {
			t.Errorf("%s: Fit = %+v, %v, %v; want ErrParamOverflow", c.name, p, w, err)
			continue
		}
		if !strings.HasPrefix(err.Error(), string(c.m)+": ") {
			t.Errorf("%s: error %q does not name the method", c.name, err)
		}
	}
	// Wide but representable: zscore and maxabs of [-1e308, 1e308] are fine.
	for _, m := range []stats.Method{stats.ZScore, stats.MaxAbs} {
		p := scFit(t, m, stats.Options{}, huge)
		if y := p.Forward(1e308); math.IsInf(y, 0) || math.IsNaN(y) {
			t.Errorf("%s: Forward(1e308) = %v", m, y)
		}
	}
}

func TestCenterNeverNegativeZero(t *testing.T) {
	negz := math.Copysign(0, -1)
	s := stats.Summary{Rows: 2, Count: 2, Mean: negz, StdPopulation: 1, StdSample: 1, Min: negz, Max: 5}
	for _, m := range []stats.Method{stats.ZScore, stats.MinMax, stats.MeanNorm, stats.MaxAbs, stats.Identity} {
		p := scFit(t, m, stats.Options{}, s)
		if math.Signbit(p.Center) {
			t.Errorf("%s: center is -0", m)
		}
	}
	p, _, err := stats.Fit(stats.MinMax, stats.Options{}, stats.Summary{Count: 1, Min: negz, Max: negz})
	if err != nil || math.Signbit(p.Center) {
		t.Errorf("minmax constant -0: center %v (signbit %v), %v", p.Center, math.Signbit(p.Center), err)
	}
}

func TestParamsValidate(t *testing.T) {
	good := stats.Params{Method: stats.ZScore, Options: stats.Options{Std: stats.StdSample}, Center: -3, Scale: 0.5}
	if err := good.Validate(); err != nil {
		t.Fatalf("Validate(%+v): %v", good, err)
	}
	bad := []stats.Params{
		{Method: "", Center: 0, Scale: 1},
		{Method: stats.ZScore, Center: math.NaN(), Scale: 1},
		{Method: stats.ZScore, Center: math.Inf(-1), Scale: 1},
		{Method: stats.ZScore, Center: 0, Scale: 0},
		{Method: stats.ZScore, Center: 0, Scale: -1},
		{Method: stats.ZScore, Center: 0, Scale: math.Inf(1)},
		{Method: stats.MinMax, Options: stats.Options{RangeMin: 2, RangeMax: 1}, Center: 0, Scale: 1},
	}
	for _, p := range bad {
		if err := p.Validate(); err == nil {
			t.Errorf("Validate(%+v) succeeded", p)
		}
	}
}

// scRN rounds a big.Float to the nearest float64, ties to even (the
// documented rounding of big.Float.Float64, subnormals included).
func scRN(f *big.Float) float64 {
	v, _ := f.Float64()
	return v
}

// scRandFloat returns a finite float64 with a random sign, exponent and
// significand, covering subnormals and values near MaxFloat64.
func scRandFloat(r *rand.Rand) float64 {
	for {
		x := math.Float64frombits(r.Uint64())
		if !math.IsInf(x, 0) && !math.IsNaN(x) {
			return x
		}
	}
}

// TestFitMinMaxExact checks the minmax parameters against math/big: scale
// is RN((max - min) / (b - a)) and center is RN(min - a*scale), each the
// exact rational rounded once. The reference computes in big.Float at
// 3000 bits: max - min, b - a, a*scale and min - a*scale are then exact
// (float64 exponents span under 2200 bits), and the quotient, though
// rounded, cannot land on a float64 rounding boundary unless the exact
// quotient is on it (its denominator has under 2200 bits), so rounding it
// again to 53 bits gives RN of the exact value.
func TestFitMinMaxExact(t *testing.T) {
	r := rand.New(rand.NewPCG(7, 11))
	ranges := [][2]float64{{0, 1}, {-1, 1}, {0.1, 0.7}, {-3e-300, 5e-301}, {1e10, 1e10 + 1}, {-0x1p-1070, 0x1p-1060}, {5e-324, 1e-323}}
	bf := func(x float64) *big.Float { return new(big.Float).SetPrec(3000).SetFloat64(x) }
	checked, maxInexact1, maxBelow1 := 0, 0, 0
	for i := 0; i < 20000; i++ {
		var lo, hi float64
		switch i % 4 {
		case 0: // anywhere in the float64 range
			lo, hi = scRandFloat(r), scRandFloat(r)
		case 1: // same binade neighbourhood
			lo = scRandFloat(r)
			hi = lo + (r.Float64()-0.5)*math.Abs(lo)*math.Pow(2, -float64(r.IntN(60)))
		case 2: // moderate values
			lo, hi = (r.Float64()-0.5)*1e6, (r.Float64()-0.5)*1e6
		case 3: // integers
			lo, hi = float64(r.IntN(1000)-500), float64(r.IntN(1000)-500)
		}
		if lo > hi {
			lo, hi = hi, lo
		}
		if lo == hi || math.IsInf(hi, 0) || math.IsInf(lo, 0) {
			continue
		}
		ab := ranges[i%len(ranges)]
		s := stats.Summary{Rows: 2, Count: 2, Mean: lo/2 + hi/2, Min: lo, Max: hi}
		p, w, err := stats.Fit(stats.MinMax, stats.Options{RangeMin: ab[0], RangeMax: ab[1]}, s)

		q := new(big.Float).SetPrec(3000).Quo(new(big.Float).SetPrec(3000).Sub(bf(hi), bf(lo)), new(big.Float).SetPrec(3000).Sub(bf(ab[1]), bf(ab[0])))
		wantScale := scRN(q)
		if math.IsInf(wantScale, 0) || wantScale == 0 {
			if wantScale == 0 && (err != nil || !slices.Equal(w, []stats.Warning{stats.WarnScaleUnderflow})) {
				t.Errorf("min %v max %v range %v: scale underflows, got %+v %v %v", lo, hi, ab, p, w, err)
			}
			if math.IsInf(wantScale, 0) && !errors.Is(err, stats.ErrParamOverflow) {
				t.Errorf("min %v max %v range %v: scale overflows, got %+v %v %v", lo, hi, ab, p, w, err)
			}
			continue
		}
		wantCenter := scRN(new(big.Float).SetPrec(3000).Sub(bf(lo), new(big.Float).SetPrec(3000).Mul(bf(ab[0]), bf(wantScale))))
		if wantCenter == 0 {
			wantCenter = 0 // the package canonicalises -0
		}
		if math.IsInf(wantCenter, 0) {
			if !errors.Is(err, stats.ErrParamOverflow) {
				t.Errorf("min %v max %v range %v: center overflows, got %+v %v %v", lo, hi, ab, p, w, err)
			}
			continue
		}
		if err != nil {
			// Only the range check may reject finite parameters.
			if !errors.Is(err, stats.ErrParamOverflow) || (isFin(hi-wantCenter) && isFin(lo-wantCenter) &&
				isFin((hi-wantCenter)/wantScale) && isFin((lo-wantCenter)/wantScale)) {
				t.Errorf("min %v max %v range %v: %v", lo, hi, ab, err)
			}
			continue
		}
		checked++
		if !scSame(p.Scale, wantScale) || !scSame(p.Center, wantCenter) {
			t.Errorf("min %v max %v range %v: center %v scale %v, math/big gives %v %v", lo, hi, ab, p.Center, p.Scale, wantCenter, wantScale)
		}
		if ab == [2]float64{0, 1} {
			// Forward(max) is RN((max - min) / RN(max - min)): 1 when
			// max - min is a float64, else 1 or 1 - 2^-53 (the exact
			// quotient lies in [1 - 2^-53, 1 + 2^-53], and 1 + 2^-53 is a
			// tie that rounds to 1), never above 1.
			wantMax := 1.0
			if diff, acc := new(big.Float).SetPrec(3000).Sub(bf(hi), bf(lo)).Float64(); acc != big.Exact || diff != p.Scale {
				wantMax = scForwardRef(hi, lo, p.Scale)
				if wantMax == 1 {
					maxInexact1++
				} else {
					maxBelow1++
				}
			}
			if p.Center != lo || p.Scale != hi-lo || p.Forward(lo) != 0 || p.Forward(hi) != wantMax || (wantMax != 1 && wantMax != 1-0x1p-53) {
				t.Errorf("min %v max %v onto [0, 1]: center %v scale %v, Forward(min) %v, Forward(max) %v (want %v)",
					lo, hi, p.Center, p.Scale, p.Forward(lo), p.Forward(hi), wantMax)
			}
		}
	}
	if checked < 5000 {
		t.Errorf("only %d of 20000 cases had finite parameters", checked)
	}
	if maxBelow1 == 0 {
		t.Errorf("no case where max maps to 1 - 2^-53: the check above is vacuous")
	}
	t.Logf("onto [0, 1] with max - min inexact: max maps to 1 in %d cases, to 1 - 2^-53 in %d", maxInexact1, maxBelow1)
}

func isFin(x float64) bool { return !math.IsInf(x, 0) && !math.IsNaN(x) }

// scUlp is the gap from |x| to the next larger float64.
func scUlp(x float64) float64 {
	x = math.Abs(x)
	return math.Nextafter(x, math.Inf(1)) - x
}

// scLong enables the long sweeps (tens of millions of cases, minutes):
//
//	go test ./stats/ -run 'RoundTrip|CorrectlyRounded' -timeout 0 -args -stats.long
var scLong = flag.Bool("stats.long", false, "run the long Forward and round-trip sweeps")

// scForwardRef is the reference for Forward: the exact (x - c) / s,
// computed with math/big and rounded once to the nearest float64, ties to
// even, subnormals included (big.Float.Float64 rounds once, then checks
// the exponent range). It shares no code with the package's slow path,
// which uses big.Rat.
//
// x - c is exact in 2200 bits (float64 exponents span under 2100 bits).
// The quotient is rounded to P + 160 bits, where P = MinPrec(x - c), and
// rounding that again to float64 gives the correctly rounded quotient: a
// float64 rounding boundary m (a midpoint, subnormal ones included) that
// differs from (x-c)/s does so by a relative |(x-c) - m*s| / |x-c| of at
// least min(2^-P, 2^-109), because (x-c) - m*s is a non-zero multiple of
// the smaller of the lowest set bits of x-c and of m*s, so the first
// rounding can neither cross m nor land on it.
func scForwardRef(x, c, s float64) float64 {
	if !isFin(x) || !isFin(c) || x == c {
		return (x - c) / s // IEEE 754 signs for zero, NaN and infinities
	}
	d := new(big.Float).SetPrec(2200).Sub(new(big.Float).SetFloat64(x), new(big.Float).SetFloat64(c))
	q := new(big.Float).SetPrec(d.MinPrec()+160).Quo(d, new(big.Float).SetFloat64(s))
	return scRN(q)
}

// scSign returns +1 or -1 at random.
func scSign(r *rand.Rand) float64 { return float64(1 - 2*r.IntN(2)) }

// scSig returns a significand in [1, 2): random, or with few bits, or
// next to 1 or 2 (all ones), the cases that sit on or near binade edges.
func scSig(r *rand.Rand) float64 {
	switch r.IntN(4) {
	case 0:
		return 1 + float64(r.IntN(8))*0x1p-52
	case 1:
		return math.Nextafter(2, 0) - float64(r.IntN(8))*0x1p-52
	case 2:
		return 1 + float64(r.IntN(1024))/1024
	}
	return 1 + r.Float64()
}

// scStep moves v by k float64 steps (toward +Inf for k > 0).
func scStep(v float64, k int) float64 {
	for ; k > 0; k-- {
		v = math.Nextafter(v, math.Inf(1))
	}
	for ; k < 0; k++ {
		v = math.Nextafter(v, math.Inf(-1))
	}
	return v
}

// scForwardKinds names the kinds of (x, center, scale) scForwardCase
// draws; each stresses a different part of Forward or of the round-trip
// bound.
var scForwardKinds = []string{
	"random bits",                   // any finite x and center, any positive scale
	"data-like",                     // x around a center, scale of the spread, many magnitudes
	"center near x or -x",           // heavy cancellation in x - center, or none
	"binade edges",                  // powers of two and their neighbours everywhere
	"extreme scales",                // scale near MaxFloat64, tiny or subnormal
	"near rounding boundaries",      // (x - center)/scale at or within a hair of a midpoint
	"near exact quotients",          // (x - center)/scale at or within a hair of a float64
	"|x| far from |center|",         // one of them below the other's last bit
	"y above a power of two",        // largest relative error of y, |x| << |center|
	"tiny and subnormal",            // subnormal x, center and scale
	"near MaxFloat64",               // x - center near or past overflow
	"subnormal rounding boundaries", // subnormal quotient at or near a midpoint
}

// scForwardCase returns (x, center, scale) of the given kind.
func scForwardCase(r *rand.Rand, kind int) (x, c, s float64) {
	switch kind {
	case 0:
		return scRandFloat(r), scRandFloat(r), math.Abs(scRandFloat(r))
	case 1:
		mag := math.Ldexp(1, r.IntN(200)-100)
		c = (r.Float64() - 0.5) * mag * math.Pow(10, float64(r.IntN(8)))
		s = mag * (0.01 + r.Float64())
		return float64(c + float64(s*r.NormFloat64())*float64(1+r.IntN(5))), c, s
	case 2:
		x = math.Ldexp(scSig(r), r.IntN(200)-100) * scSign(r)
		c = scStep(x, r.IntN(401)-200)
		if r.IntN(3) == 0 {
			c = float64(x * (1 + (r.Float64()-0.5)*math.Ldexp(1, -r.IntN(60))))
		}
		if r.IntN(2) == 0 {
			c = -c
		}
		return x, c, math.Ldexp(scSig(r), r.IntN(240)-120)
	case 3:
		e := r.IntN(120) - 60
		x = scStep(math.Ldexp(scSign(r), e+r.IntN(7)-3), r.IntN(5)-2)
		c = scStep(math.Ldexp(scSign(r), e+r.IntN(121)-60), r.IntN(5)-2)
		s = scStep(math.Ldexp(1, r.IntN(121)-60), r.IntN(5)-2)
		return x, c, s
	case 4:
		x = math.Ldexp(scSig(r), r.IntN(100)-50) * scSign(r)
		c = math.Ldexp(scSig(r), r.IntN(100)-50) * scSign(r)
		switch r.IntN(3) {
		case 0:
			s = math.Ldexp(scSig(r), 900+r.IntN(124))
		case 1:
			s = math.Ldexp(scSig(r), -1022+r.IntN(100))
		default:
			s = math.Float64frombits(1 + r.Uint64()>>12) // subnormal
		}
		return x, c, s
	case 5, 6, 11:
		for {
			// m is a midpoint between two float64s (5, 11) or a float64
			// (6); x - c = m*s exactly, then c moves by 0 to 2^40 of its
			// ulps, placing the quotient at every distance from m (c is
			// below ulp(x), so one ulp of c moves it by under 2^-105 |m|).
			var y float64
			if kind == 11 {
				y = math.Float64frombits(1 + r.Uint64()>>12) // subnormal
				s = math.Ldexp(1+r.Float64(), 900+r.IntN(120))
			} else {
				y = math.Ldexp(scSig(r), r.IntN(400)-200)
				s = math.Ldexp(1+r.Float64(), r.IntN(200)-100)
			}
			if r.IntN(2) == 0 { // few significant bits: more exact splits below
				s = math.Ldexp(float64(2*r.IntN(64)+1), math.Ilogb(s)-6)
			}
			y *= scSign(r)
			m := new(big.Float).SetPrec(60).SetFloat64(y)
			if kind != 6 {
				_, e := math.Frexp(y)
				half := new(big.Float).SetMantExp(big.NewFloat(scSign(r)), max(e-1-52, -1074)-1)
				m.Add(m, half)
			}
			d := new(big.Float).SetPrec(300).Mul(m, new(big.Float).SetFloat64(s))
			x, _ = d.Float64()
			cc, acc := new(big.Float).SetPrec(300).Sub(new(big.Float).SetFloat64(x), d).Float64()
			if acc != big.Exact || !isFin(x) || cc == 0 {
				continue
			}
			c = cc
			switch r.IntN(5) {
			case 1:
				c = scStep(c, 1-2*r.IntN(2))
			case 4: // around the fast path's rounding-test threshold
				c = scStep(c, r.IntN(65)-32)
			case 2:
				c = float64(c + float64(r.IntN(1<<20)-1<<19)*scUlp(c))
			case 3:
				c = float64(c + float64(r.Int64N(1<<40)-1<<39)*scUlp(c))
			}
			if r.IntN(3) == 0 {
				x, c = -c, -x // the same x - c, roles swapped
			}
			return x, c, s
		}
	case 7:
		c = math.Ldexp(scSig(r), r.IntN(200)-100) * scSign(r)
		x = c * math.Ldexp(scSig(r), -r.IntN(130)) * scSign(r)
		s = math.Abs(c) * math.Ldexp(scSig(r), r.IntN(20)-10)
		if r.IntN(2) == 0 {
			x, c = c, x
		}
		return x, c, s
	case 8:
		y0 := math.Ldexp(1+float64(r.IntN(4))*0x1p-52, r.IntN(200)-100)
		mid := y0 + scUlp(y0)/2*(1+(r.Float64()-0.5)*0x1p-20)
		large := math.Ldexp(scSig(r), r.IntN(200)-100)
		small := large * math.Ldexp(scSig(r), -1-r.IntN(120)) * scSign(r)
		if r.IntN(2) == 0 {
			x, c = small, -large
		} else {
			x, c = large, small
		}
		s = scStep(math.Abs(float64(x-c)/mid), r.IntN(65)-32)
		if r.IntN(2) == 0 {
			x, c = -x, -c
		}
		return x, c, s
	case 9:
		x = math.Float64frombits(r.Uint64()>>(4+r.IntN(11))) * scSign(r)
		c = math.Float64frombits(r.Uint64()>>(4+r.IntN(11))) * scSign(r)
		s = math.Ldexp(scSig(r), r.IntN(80)-40)
		if r.IntN(3) == 0 {
			s = math.Float64frombits(1 + r.Uint64()>>(4+r.IntN(11)))
		}
		return x, c, s
	case 10:
		x = math.Float64frombits(math.Float64bits(math.MaxFloat64)-uint64(r.IntN(1<<20))) * scSign(r)
		if r.IntN(2) == 0 {
			x = math.Ldexp(scSig(r), 1000+r.IntN(24)) * scSign(r)
		}
		c = -math.Copysign(math.Ldexp(scSig(r), 960+r.IntN(64)), x)
		if r.IntN(4) == 0 {
			c = -math.Copysign(math.Ldexp(scSig(r), r.IntN(2000)-1000), x)
		}
		return x, c, math.Ldexp(scSig(r), r.IntN(20)-4)
	}
	panic("unknown kind")
}

// TestTransformCorrectlyRounded checks Forward, and Transform on one-value
// arrays, against math/big (scForwardRef): the exact (x - center) / scale
// rounded once to nearest, ties to even, on special values and on every
// kind of scForwardKinds, which include exact midpoints (only the slow
// path can round those), quotients within a hair of a midpoint on both
// sides of the fast path's rounding test, overflowing x - center, and
// subnormal results. TestTransform checks the other input types and the
// float32 output against Forward.
func TestTransformCorrectlyRounded(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	transform := func(x float64, p stats.Params) float64 {
		t.Helper()
		b := array.NewFloat64Builder(mem)
		defer b.Release()
		b.Append(x)
		arr := b.NewArray()
		defer arr.Release()
		out, err := stats.Transform(mem, arr, p, false)
		if err != nil {
			t.Fatal(err)
		}
		defer out.Release()
		return out.(*array.Float64).Value(0)
	}

	inf, negz := math.Inf(1), math.Copysign(0, -1)
	for _, c := range []struct{ x, c, s, want float64 }{
		{math.NaN(), 1, 2, math.NaN()},
		{inf, 1, 2, inf},
		{-inf, 1e308, 1e-300, -inf},
		{3, 3, 7, 0},
		{negz, 0, 3, negz},            // -0 - +0 = -0 (IEEE 754)
		{1e308, -1e308, 4, 1e308 / 2}, // x - c overflows, the quotient does not
		{math.MaxFloat64, -math.MaxFloat64, 2, math.MaxFloat64},
		{math.MaxFloat64, -math.MaxFloat64, 1, inf},
		{3 * 5e-324, 0, 2, 2 * 5e-324},         // subnormal tie, to even
		{5 * 5e-324, 0, 2, 2 * 5e-324},         // 2.5 ulps: tie, to even
		{1, -0x1p-53, 1, 1},                    // x - c is the midpoint 1 + 2^-53: even
		{1, -0x1.8p-53, 1, 1 + 0x1p-52},        // just above the midpoint
		{1 + 0x1p-52, 0x1p-54, 1, 1 + 0x1p-52}, // x - c = 1 + 2^-52 - 2^-54
		// minmax onto [0, 1] with min < 0 < max: max - min is inexact,
		// scale = RN(max - min) lies above it, so the exact quotient is just
		// below 1 and rounds to 1 - 2^-53 (two roundings gave 1).
		{107030.99288577455, -281200.7218292325, 388231.7147150071, 1 - 0x1p-53},
	} {
		want := c.want
		p := stats.Params{Method: stats.ZScore, Center: c.c, Scale: c.s}
		if got := p.Forward(c.x); !scSame(got, want) {
			t.Errorf("Forward(%v) with center %v scale %v = %v, want %v", c.x, c.c, c.s, got, want)
		}
		if got := transform(c.x, p); !scSame(got, want) {
			t.Errorf("Transform of %v with center %v scale %v = %v, want %v", c.x, c.c, c.s, got, want)
		}
		if ref := scForwardRef(c.x, c.c, c.s); !scSame(ref, want) {
			t.Errorf("reference for %v, %v, %v = %v, table says %v", c.x, c.c, c.s, ref, want)
		}
	}

	n := 20000
	if *scLong {
		n = 2000000
	}
	r := rand.New(rand.NewPCG(11, 13))
	for kind, name := range scForwardKinds {
		bad := 0
		for i := range n {
			x, c, s := scForwardCase(r, kind)
			if !isFin(x) || !isFin(c) || !isFin(s) || !(s > 0) {
				t.Fatalf("%s: generated x %v center %v scale %v", name, x, c, s)
			}
			p := stats.Params{Method: stats.ZScore, Center: c, Scale: s}
			got, want := p.Forward(x), scForwardRef(x, c, s)
			if i%16 == 0 {
				if tr := transform(x, p); !scSame(tr, got) {
					t.Errorf("%s: Transform of %v with center %v scale %v = %v, Forward %v", name, x, c, s, tr, got)
				}
			}
			if !scSame(got, want) {
				if bad++; bad <= 5 {
					t.Errorf("%s: Forward(%v) with center %v scale %v = %v, math/big gives %v", name, x, c, s, got, want)
				}
			}
		}
		if bad > 0 {
			t.Errorf("%s: %d of %d not correctly rounded", name, bad, n)
		}
	}
	t.Logf("%d kinds x %d cases correctly rounded", len(scForwardKinds), n)
}

// scRoundTripBound is the round-trip bound the product requires:
// |Inverse(Forward(x)) - x| <= ulp(x) + ulp(center), with ulp(v) the gap
// from |v| to the next larger float64 (scUlp). When y = Forward(x) is
// subnormal, or zero although x != center, y carries an absolute error of
// up to half the subnormal spacing, 2^-1075, which Inverse multiplies by
// the scale, so the bound then adds scale * 2^-1075.
func scRoundTripBound(p stats.Params, x, y float64) float64 {
	b := scUlp(x) + scUlp(p.Center)
	if scSubnormalY(p, x, y) {
		b += math.Ldexp(p.Scale, -1075)
	}
	return b
}

func scSubnormalY(p stats.Params, x, y float64) bool {
	return math.Abs(y) < 0x1p-1022 && x != p.Center
}

// Why the bound holds (a sketch; the sweeps below are the evidence). Let
// D = x - center exactly, s the scale, u = 2^-53, B = ulp(x) + ulp(center).
// Forward is correctly rounded, so for a normal y, y = (D/s)(1 + d) with
// |d| <= u/(1+u), the optimal bound for rounding to nearest (Jeannerod and
// Rump, "On relative errors of floating-point operations", Math. Comp. 87,
// 2018; from memory). Inverse rounds y*s + center once (math.FMA), so
// x' = RN(x + e) with e = y*s - D and |e| <= u|D|/(1+u) <=
// u(|x| + |center|)/(1+u) < B, because u|v| < ulp(v) for every float64 v
// (u|v| is ulp(v) times half the significand, which is below 2). Rounding
// x + e to nearest could still land beyond x ± B where x ± B is not a
// float64. While x ± B stays within a binade of x it is a float64, or a
// power of two at most half a float64 spacing past one on x's side
// (x ± ulp(x) is a float64 and ulp(center) a power of two), so rounding
// stops at or before it. It leaves that range only when
// |center| > 2^52 |x|, and there B - |e| > u ulp(center), at least half
// the float64 spacing at x ± B. For a subnormal y,
// |e| <= s 2^-1075 instead, and the bound gains that term.
//
// The previous Forward, fl(fl(x - c)/s), and Inverse, fl(fl(y*s) + c),
// exceeded B in 0.5% to 0.7% of TestRoundTrip's round trips for zscore,
// minmax and meannorm (worst 2.82 B): the rounding of x - c alone can use
// up the whole of u|D|.

// scRoundTripData returns data sets for round-trip tests: random
// distributions over many magnitudes and adversarial ones (huge and
// subnormal values, mixed signs, all-ones significands, powers of two).
func scRoundTripData(r *rand.Rand, i int) []float64 {
	n := 2 + r.IntN(30)
	xs := make([]float64, n)
	mag := math.Pow(2, float64(r.IntN(200)-100))
	for j := range xs {
		switch i % 9 {
		case 0: // normal around a random offset
			xs[j] = (r.Float64()-0.5)*mag*1e3 + r.NormFloat64()*mag
		case 1: // uniform, mixed signs
			xs[j] = (r.Float64() - 0.5) * mag
		case 2: // positive, far from zero relative to spread (large center)
			xs[j] = mag * (1e6 + r.Float64())
		case 3: // random bits anywhere in the float64 range, one binade band
			xs[j] = math.Ldexp(1+r.Float64(), r.IntN(40)+900) * float64(1-2*r.IntN(2))
		case 4: // subnormal and tiny normal values
			xs[j] = math.Float64frombits(r.Uint64()&(1<<54-1)) * float64(1-2*r.IntN(2))
		case 5: // significands with every bit set, around powers of two
			xs[j] = math.Ldexp(math.Nextafter(2, 0), r.IntN(20)-10) * float64(1-2*r.IntN(2))
		case 6: // powers of two
			xs[j] = math.Ldexp(1, r.IntN(60)-30) * float64(1-2*r.IntN(2))
		case 7: // heavy tail
			xs[j] = math.Exp(r.NormFloat64()*20) * float64(1-2*r.IntN(2))
		case 8: // huge and subnormal together, so that y can be subnormal
			xs[j] = []float64{1e300, -2e299, 1e-300, 5e-324, -3e-310, 0}[r.IntN(6)]
		}
	}
	return xs
}

// TestRoundTrip checks |Inverse(Forward(x)) - x| <= ulp(x) + ulp(center)
// (scRoundTripBound) for every method, on random and adversarial data
// sets fitted with Fit, with x drawn from the data, the endpoints and
// center, their neighbours, and random points of [min, max]. The worst
// ratio to the bound is logged (-v); 1 means the bound is attained.
func TestRoundTrip(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 5))
	type tally struct {
		checked   int     // round trips with a normal y (or x == center)
		underflow int     // round trips with a subnormal or zero y, x != center
		worst     float64 // largest |x' - x| / bound, normal y
		worstSub  float64 // the same, subnormal y
		worstX    float64
		worstP    stats.Params
	}
	var tallies [5]tally
	methods := []stats.Method{stats.ZScore, stats.MinMax, stats.MeanNorm, stats.MaxAbs, stats.Identity}
	opts := []stats.Options{{}, {Std: stats.StdSample}, {RangeMin: -1, RangeMax: 1}, {RangeMin: 0.25, RangeMax: 100}}
	sets := 4000
	if *scLong {
		sets = 200000
	}
	for i := 0; i < sets; i++ {
		xs := scRoundTripData(r, i)
		s := scSummary(xs)
		for mi, m := range methods {
			p, _, err := stats.Fit(m, opts[i%len(opts)], s)
			if errors.Is(err, stats.ErrParamOverflow) {
				continue // documented refusal, covered by TestFitOverflow
			}
			if err != nil {
				t.Fatalf("%s on %v: %v", m, xs, err)
			}
			probe := slices.Clone(xs)
			for _, v := range []float64{s.Min, s.Max, p.Center} {
				if v >= s.Min && v <= s.Max {
					probe = append(probe, v, math.Nextafter(v, math.Inf(1)), math.Nextafter(v, math.Inf(-1)))
				}
			}
			for range 20 {
				probe = append(probe, s.Min+r.Float64()*(s.Max/2-s.Min/2)*2)
			}
			ta := &tallies[mi]
			for _, x := range probe {
				if x < s.Min || x > s.Max || !isFin(x) {
					continue
				}
				y := p.Forward(x)
				got := p.Inverse(y)
				if m == stats.Identity && !scSame(got, x) {
					t.Errorf("none: %v round-trips to %v", x, got)
				}
				bound := scRoundTripBound(p, x, y)
				ratio := math.Abs(got-x) / bound
				if !(ratio <= 1) {
					t.Errorf("%s %+v: x %v -> %v -> %v, error %g above ulp(x) + ulp(center) = %g",
						m, p, x, y, got, math.Abs(got-x), bound)
				}
				if scSubnormalY(p, x, y) {
					ta.underflow++
					ta.worstSub = max(ta.worstSub, ratio)
					continue
				}
				ta.checked++
				if ratio > ta.worst {
					ta.worst, ta.worstX, ta.worstP = ratio, x, p
				}
			}
		}
	}
	for mi, m := range methods {
		ta := tallies[mi]
		if ta.checked < 10000 {
			t.Errorf("%s: only %d round trips checked", m, ta.checked)
		}
		t.Logf("%-8s %8d round trips with normal y, worst %.4g of ulp(x)+ulp(center) (x=%v center=%v scale=%v); %d with subnormal y, worst %.4g of the bound",
			m, ta.checked, ta.worst, ta.worstX, ta.worstP.Center, ta.worstP.Scale, ta.underflow, ta.worstSub)
	}
}

// TestRoundTripKinds checks the same bound on (x, center, scale) drawn
// directly from scForwardKinds, not through Fit: any finite x whose y and
// round trip are finite, with centers near ±x, far from x, near overflow,
// and quotients on rounding boundaries.
func TestRoundTripKinds(t *testing.T) {
	n := 20000
	if *scLong {
		n = 2000000
	}
	r := rand.New(rand.NewPCG(17, 19))
	total := 0
	for kind, name := range scForwardKinds {
		checked, sub, bad := 0, 0, 0
		worst, worstSub := 0.0, 0.0
		for range n {
			x, c, s := scForwardCase(r, kind)
			if !isFin(x) || !isFin(c) || !isFin(s) || !(s > 0) {
				t.Fatalf("%s: generated x %v center %v scale %v", name, x, c, s)
			}
			p := stats.Params{Method: stats.ZScore, Center: c, Scale: s}
			y := p.Forward(x)
			got := p.Inverse(y)
			if !isFin(y) || !isFin(got) {
				continue // outside the range Fit accepts
			}
			ratio := math.Abs(got-x) / scRoundTripBound(p, x, y)
			if !(ratio <= 1) {
				if bad++; bad <= 5 {
					t.Errorf("%s: x %v center %v scale %v -> %v -> %v: %.4g times the bound", name, x, c, s, y, got, ratio)
				}
			}
			if scSubnormalY(p, x, y) {
				sub++
				worstSub = max(worstSub, ratio)
			} else {
				checked++
				worst = max(worst, ratio)
			}
		}
		total += checked + sub
		t.Logf("%-30s %8d normal y, worst %.4g; %8d subnormal y, worst %.4g", name, checked, worst, sub, worstSub)
	}
	if total < len(scForwardKinds)*n/2 {
		t.Errorf("only %d of %d round trips were finite", total, len(scForwardKinds)*n)
	}
}

// TestInverseSingleRounding checks that Inverse is y*s + c rounded once
// (math.FMA), against math/big: the product is exact in 106 bits and the
// sum exact in 2200, then rounded once by big.Float.Float64. The inputs
// are those where rounding y*s first (the unfused evaluation) gives
// different bits, plus ones where y*s alone overflows or is subnormal.
// The reference does not depend on the target, so running this test with
// GOAMD64=v1 and with GOAMD64=v3 (or on arm64) checks that Inverse has the
// same bits on each: a hardware FMA instruction and Go's software FMA must
// both agree with it.
func TestInverseSingleRounding(t *testing.T) {
	exact := func(y, s, c float64) float64 {
		prod := new(big.Float).SetPrec(106).Mul(big.NewFloat(y), big.NewFloat(s))
		return scRN(new(big.Float).SetPrec(2200).Add(prod, big.NewFloat(c)))
	}
	for _, c := range [][3]float64{
		// y*s = 3e308 overflows; y*s + c = 1.3e308 does not.
		{1.5e308, 2, -1.7e308},
		// y*s = 1.5 * 2^-1075 rounds to 2^-1074, and 2^-1074 + c = +0;
		// rounded once, y*s + c = -2^-1076 gives -0.
		{0x1p-600, 0x1.8p-475, -0x1p-1074},
		// y*s = 1 + 2^-53 - 2^-105 rounds to 1, and 1 + c = 0; rounded
		// once, y*s + c = 2^-53 - 2^-105 is exact.
		{1 + 0x1p-52, 1 - 0x1p-53, -1},
		{-3e-320, 7.5, 2e-319}, // subnormal throughout
	} {
		p := stats.Params{Method: stats.ZScore, Center: c[2], Scale: c[1]}
		if got, want := p.Inverse(c[0]), exact(c[0], c[1], c[2]); !scSame(got, want) {
			t.Errorf("Inverse(%v) with center %v scale %v = %v, want %v", c[0], c[2], c[1], got, want)
		}
	}
	r := rand.New(rand.NewPCG(1, 1))
	found := 0
	for i := 0; i < 200000 && found < 2000; i++ {
		y, s, c := r.NormFloat64(), 0.5+r.Float64(), float64(r.NormFloat64()*3)
		if i%2 == 1 { // y from Forward of a random x, as in a real round trip
			y = stats.Params{Method: stats.ZScore, Center: c, Scale: s}.Forward(float64(c + r.NormFloat64()*s))
		}
		want := exact(y, s, c)
		prod := new(big.Float).SetPrec(53).Mul(big.NewFloat(y), big.NewFloat(s))
		if unfused := scRN(new(big.Float).SetPrec(53).Add(prod, big.NewFloat(c))); unfused == want {
			continue // keep only inputs where the single rounding matters
		}
		found++
		p := stats.Params{Method: stats.ZScore, Center: c, Scale: s}
		if got := p.Inverse(y); !scSame(got, want) {
			t.Errorf("Inverse(%v) with center %v scale %v = %v, want one rounding %v", y, c, s, got, want)
		}
	}
	if found < 2000 {
		t.Fatalf("only %d inputs where one rounding differs from two", found)
	}
}

// TestFitFromAccumulator runs pass one and pass two back to back: arrays
// through the Accumulator, Fit on its Summary, then Transform.
func TestFitFromAccumulator(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)

	run := func(arr arrow.Array, m stats.Method, o stats.Options) []float64 {
		t.Helper()
		defer arr.Release()
		k, ok := stats.KindOf(arr.DataType())
		if !ok {
			t.Fatalf("KindOf(%s) not supported", arr.DataType())
		}
		acc := stats.NewAccumulator(k)
		if err := acc.Add(arr); err != nil {
			t.Fatal(err)
		}
		p, w, err := stats.Fit(m, o, acc.Summary())
		if err != nil || len(w) != 0 {
			t.Fatalf("Fit(%s): %+v %v %v", m, p, w, err)
		}
		out, err := stats.Transform(mem, arr, p, false)
		if err != nil {
			t.Fatal(err)
		}
		defer out.Release()
		return append([]float64(nil), out.(*array.Float64).Float64Values()...)
	}

	fromJSON := func(dt arrow.DataType, json string) arrow.Array {
		t.Helper()
		arr, _, err := array.FromJSON(mem, dt, strings.NewReader(json))
		if err != nil {
			t.Fatal(err)
		}
		return arr
	}

	// NIST StRD NumAcc1: certified mean 10000002 and sample std 1, exact.
	numAcc1 := `[10000001, 10000003, 10000002]`
	got := run(fromJSON(arrow.PrimitiveTypes.Float64, numAcc1), stats.ZScore, stats.Options{Std: stats.StdSample})
	if want := []float64{-1, 1, 0}; !slices.Equal(got, want) {
		t.Errorf("NumAcc1 sample zscore = %v, want %v", got, want)
	}
	got = run(fromJSON(arrow.PrimitiveTypes.Float64, numAcc1), stats.MinMax, stats.Options{})
	if want := []float64{0, 1, 0.5}; !slices.Equal(got, want) {
		t.Errorf("NumAcc1 minmax = %v, want %v", got, want)
	}
	// int64 extremes: min -2^63, max 2^63 - 1 (rounds to 2^63 in float64
	// both in the Summary and in Transform's conversion), so scale 2^64,
	// center -2^63; 0 maps to 1/2 and 2^60 to 1/2 + 1/16 (hand-derived).
	// Built with a builder: FromJSON reads numbers through float64.
	b := array.NewInt64Builder(mem)
	b.AppendValues([]int64{math.MinInt64, math.MaxInt64, 0, 1 << 60}, nil)
	b.AppendNull()
	ints := b.NewArray()
	b.Release()
	got = run(ints, stats.MinMax, stats.Options{})
	if want := []float64{0, 1, 0.5, 0.5625}; !slices.Equal(got[:4], want) {
		t.Errorf("int64 minmax = %v, want %v", got[:4], want)
	}
}

// FuzzFit checks Fit's contract on arbitrary summaries: either an error,
// or parameters that pass Validate and map the column's min and max to
// finite values and back to finite values; a warning only with its
// documented fallback scale of 1.
func FuzzFit(f *testing.F) {
	f.Add(uint8(0), uint64(8), 5.0, 2.0, 2.0, 9.0, 0.0, 0.0)
	f.Add(uint8(1), uint64(2), 0.0, 1e308, -1e308, 1e308, -1.0, 1.0)
	f.Add(uint8(2), uint64(1), 3.0, 0.0, 3.0, 3.0, 0.0, 0.0)
	f.Add(uint8(3), uint64(3), 0.0, 0.0, 0.0, 0.0, 0.0, 0.0)
	f.Add(uint8(1), uint64(2), 2.5e-324, 2.5e-324, 0.0, 5e-324, 0.0, 0x1p60)
	f.Fuzz(func(t *testing.T, mi uint8, n uint64, mean, std, lo, hi, a, b float64) {
		methods := []stats.Method{stats.ZScore, stats.MinMax, stats.MeanNorm, stats.MaxAbs, stats.Identity}
		m := methods[int(mi)%len(methods)]
		o := stats.Options{RangeMin: a, RangeMax: b}
		if mi&8 != 0 {
			o.Std = stats.StdSample
		}
		s := stats.Summary{Rows: n, Count: n, Mean: mean, StdPopulation: std, StdSample: std, Min: lo, Max: hi}
		p, w, err := stats.Fit(m, o, s)
		if err != nil {
			if len(w) != 0 || p != (stats.Params{}) {
				t.Fatalf("error %v with params %+v and warnings %v", err, p, w)
			}
			return
		}
		if err := p.Validate(); err != nil {
			t.Fatalf("Fit(%s, %+v, %+v) = %+v: %v", m, o, s, p, err)
		}
		if len(w) > 1 || (len(w) == 1 && p.Scale != 1) {
			t.Fatalf("warnings %v with scale %v", w, p.Scale)
		}
		if n == 0 || m == stats.Identity {
			return
		}
		for _, x := range []float64{lo, hi} {
			if y := p.Forward(x); !isFin(y) || !isFin(p.Inverse(y)) {
				t.Fatalf("Fit(%s, %+v, %+v) = %+v: %v -> %v -> %v", m, o, s, p, x, y, p.Inverse(y))
			}
		}
	})
}
