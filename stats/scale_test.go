package stats_test

import (
	"errors"
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

	// Sample std: gonum's StdScore is (x - mean) / std, the same two
	// operations as Forward, so with the same inputs the bits must match.
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
	checked := 0
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
			if p.Center != lo || p.Scale != hi-lo || p.Forward(lo) != 0 || p.Forward(hi) != 1 {
				t.Errorf("min %v max %v onto [0, 1]: center %v scale %v, Forward(min) %v, Forward(max) %v",
					lo, hi, p.Center, p.Scale, p.Forward(lo), p.Forward(hi))
			}
		}
	}
	if checked < 5000 {
		t.Errorf("only %d of 20000 cases had finite parameters", checked)
	}
}

func isFin(x float64) bool { return !math.IsInf(x, 0) && !math.IsNaN(x) }

// scUlp is the gap from |x| to the next larger float64.
func scUlp(x float64) float64 {
	x = math.Abs(x)
	return math.Nextafter(x, math.Inf(1)) - x
}

// Round-trip error bounds, derived from the standard model of floating-point
// arithmetic with gradual underflow (N. J. Higham, Accuracy and Stability of
// Numerical Algorithms, 2nd ed., SIAM 2002, section 2.2, from memory):
// fl(a op b) = (a op b)(1 + d) + e with |d| <= u = 2^-53, |e| <= eta/2,
// eta = 2^-1074, and e = 0 for + and - (IEEE 754 sums that land in the
// subnormal range are exact). With D = x - c, Forward and Inverse compute
//
//	d  = fl(x - c)  = D(1 + d1)
//	y  = fl(d / s)  = (d/s)(1 + d2) + e2
//	t  = fl(y * s)  = y s (1 + d3) + e3
//	x' = fl(t + c)  = (t + c)(1 + d4)
//
// so E = |t + c - x| <= |D|(u + (1+u)(2u + u^2)) + (eta/2)(s(1+u) + 1) and
// |x' - x| <= E + u(|x| + E). The terms with eta matter only when y is
// subnormal, i.e. |x - c| < 2^-1022 s. That is the bound checked for the
// methods with a center. For c = 0 (maxabs, none) d1 = 0 and t = x(1 + d2)
// lies strictly within one ulp of x when y is normal, so fl rounds it to x or
// a neighbour: |x' - x| <= ulp(x), plus s*eta + eta/2 if y is subnormal.
func scRoundTripBound(p stats.Params, x float64) float64 {
	const u, eta = 0x1p-53, 0x1p-1074
	// eta/2 underflows to 0 in float64, so the eta terms below use eta,
	// doubling them; a product with eta can also round down by eta/2.
	if p.Center == 0 {
		return scUlp(x) + (p.Scale+1)*eta
	}
	D := math.Abs(x-p.Center) * (1 + 2*u) // |fl(x - c)| can be |x - c|(1 - u)
	E := D*(u+(1+u)*(2*u+u*u)) + (p.Scale*(1+u)+1)*eta
	return (E + u*(math.Abs(x)+E)) * (1 + 0x1p-40) // slack for evaluating the bound in float64
}

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

// TestRoundTrip checks |Inverse(Forward(x)) - x| against the proved bound
// for every method on random and adversarial data, with x drawn from the
// data, the endpoints and center, their neighbours, and random points of
// [min, max] (data with huge and subnormal values together make y
// subnormal, where the eta terms of the bound are needed). It also measures how often the simpler figure
// ulp(x) + ulp(center) is exceeded (logged with -v; see the package report).
func TestRoundTrip(t *testing.T) {
	r := rand.New(rand.NewPCG(3, 5))
	type tally struct {
		checked, over1 int     // round trips with a normal y (or x == c)
		underflow      int     // round trips with a subnormal or zero y, x != c
		worst          float64 // largest |x' - x| / (ulp(x) + ulp(c))
		worstX         float64
		worstP         stats.Params
	}
	var tallies [5]tally
	methods := []stats.Method{stats.ZScore, stats.MinMax, stats.MeanNorm, stats.MaxAbs, stats.Identity}
	opts := []stats.Options{{}, {Std: stats.StdSample}, {RangeMin: -1, RangeMax: 1}, {RangeMin: 0.25, RangeMax: 100}}
	for i := 0; i < 4000; i++ {
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
				got := p.Inverse(p.Forward(x))
				if m == stats.Identity && got != x {
					t.Errorf("none: %v round-trips to %v", x, got)
				}
				err := math.Abs(got - x)
				if bound := scRoundTripBound(p, x); !(err <= bound) {
					t.Errorf("%s %+v: x %v -> %v -> %v, error %g above bound %g",
						m, p, x, p.Forward(x), got, err, bound)
				}
				if y := p.Forward(x); math.Abs(y) < 0x1p-1022 && x != p.Center {
					ta.underflow++
					continue // y lost bits to underflow; tallied apart
				}
				ta.checked++
				if ratio := err / (scUlp(x) + scUlp(p.Center)); ratio > 1 {
					ta.over1++
					if ratio > ta.worst {
						ta.worst, ta.worstX, ta.worstP = ratio, x, p
					}
				}
			}
		}
	}
	for mi, m := range methods {
		ta := tallies[mi]
		if ta.checked < 10000 {
			t.Errorf("%s: only %d round trips checked", m, ta.checked)
		}
		t.Logf("%-8s %7d round trips with normal y, %5d above ulp(x)+ulp(center), worst %.3g times (x=%v center=%v scale=%v); %d with subnormal y",
			m, ta.checked, ta.over1, ta.worst, ta.worstX, ta.worstP.Center, ta.worstP.Scale, ta.underflow)
	}
	// Identity is exact.
	if tallies[4].over1 != 0 {
		t.Errorf("none: %d inexact round trips", tallies[4].over1)
	}
}

// TestInverseNotFused checks that Inverse rounds y*s before adding c, as
// the unfused IEEE 754 operations do, on inputs where a fused multiply-add
// (math.FMA) gives different bits. The reference is math/big at 53 bits.
func TestInverseNotFused(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 1))
	found := 0
	for i := 0; i < 100000 && found < 200; i++ {
		// The conversions round each input here. Without them the Go
		// spec lets the compiler fuse the product NormFloat64()*3 into
		// Inverse's final addition once inlined (observed with
		// GOAMD64=v3), which would test unrounded inputs.
		y, s, c := float64(r.NormFloat64()), float64(0.5+r.Float64()), float64(r.NormFloat64()*3)
		prod := new(big.Float).SetPrec(53).Mul(big.NewFloat(y), big.NewFloat(s))
		want := scRN(new(big.Float).SetPrec(53).Add(prod, big.NewFloat(c)))
		if want == math.FMA(y, s, c) {
			continue // keep only inputs where fusing changes the answer
		}
		found++
		p := stats.Params{Method: stats.ZScore, Center: c, Scale: s}
		if got := p.Inverse(y); got != want {
			t.Errorf("Inverse(%v) with center %v scale %v = %v, want unfused %v (fused %v)", y, c, s, got, want, math.FMA(y, s, c))
		}
	}
	if found < 200 {
		t.Fatalf("only %d inputs where fusing differs", found)
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
