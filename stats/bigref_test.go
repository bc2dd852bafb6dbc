package stats

// Brute-force reference: the statistics computed straight from the
// definitions in math/big rationals, written without using any of the
// accumulator's code. It sums the values as big.Rat (not as scaled
// integers), takes the variance two-pass as Σ(x - mean)² with the exact
// rational mean (not as n·Q - S²), rounds ratios with big.Rat.Float64 (Go's
// documented nearest-float64 conversion), and rounds square roots with a
// big.Int.Sqrt estimate that is then corrected by comparing the squares of
// the neighbouring float64 midpoints exactly.

import (
	"bytes"
	"math"
	"math/big"
	"math/rand/v2"
	"strconv"
	"testing"

	"github.com/apache/arrow/go/v17/arrow/memory"
)

// refFloats is the reference for a float column; valid[i] false is a null.
func refFloats(vals []float64, valid []bool) Summary {
	var s Summary
	var fin []float64
	for i, x := range vals {
		s.Rows++
		switch {
		case valid != nil && !valid[i]:
			s.Nulls++
		case math.IsNaN(x):
			s.NaNs++
		case math.IsInf(x, 1):
			s.PosInf++
		case math.IsInf(x, -1):
			s.NegInf++
		default:
			fin = append(fin, x)
		}
	}
	s.Count = uint64(len(fin))
	rats := make([]*big.Rat, len(fin))
	for i, x := range fin {
		rats[i] = new(big.Rat).SetFloat64(x) // exact for finite x
	}
	refMoments(&s, rats)
	if len(fin) > 0 {
		// IEEE 754 totalOrder on finite values: -0 before +0.
		less := func(x, y float64) bool {
			return x < y || (x == 0 && y == 0 && math.Signbit(x) && !math.Signbit(y))
		}
		s.Min, s.Max = fin[0], fin[0]
		for _, x := range fin[1:] {
			if less(x, s.Min) {
				s.Min = x
			}
			if less(s.Max, x) {
				s.Max = x
			}
		}
	}
	return s
}

// refInts is the reference for an integer column (no nulls).
func refInts(vals []*big.Int) Summary {
	s := Summary{Rows: uint64(len(vals)), Count: uint64(len(vals))}
	rats := make([]*big.Rat, len(vals))
	for i, x := range vals {
		rats[i] = new(big.Rat).SetInt(x)
	}
	refMoments(&s, rats)
	if len(vals) > 0 {
		lo, hi := vals[0], vals[0]
		for _, x := range vals[1:] {
			if x.Cmp(lo) < 0 {
				lo = x
			}
			if x.Cmp(hi) > 0 {
				hi = x
			}
		}
		s.Min, _ = new(big.Rat).SetInt(lo).Float64()
		s.Max, _ = new(big.Rat).SetInt(hi).Float64()
	}
	return s
}

// refMoments fills the moments from exact rationals; NaN where undefined.
func refMoments(s *Summary, xs []*big.Rat) {
	nan := math.NaN()
	s.Mean, s.VarSample, s.VarPopulation, s.StdSample, s.StdPopulation = nan, nan, nan, nan, nan
	s.Min, s.Max = nan, nan
	n := int64(len(xs))
	if n == 0 {
		return
	}
	sum := new(big.Rat)
	for _, x := range xs {
		sum.Add(sum, x)
	}
	mean := new(big.Rat).Quo(sum, new(big.Rat).SetInt64(n))
	s.Mean, _ = mean.Float64() // Rat.Float64 keeps the sign, and 0 is +0
	ss := new(big.Rat)
	d := new(big.Rat)
	for _, x := range xs {
		d.Sub(x, mean)
		ss.Add(ss, d.Mul(d, d))
	}
	pop := new(big.Rat).Quo(ss, new(big.Rat).SetInt64(n))
	s.VarPopulation, _ = pop.Float64()
	s.StdPopulation = refSqrt(pop)
	if n > 1 {
		smp := new(big.Rat).Quo(ss, new(big.Rat).SetInt64(n-1))
		s.VarSample, _ = smp.Float64()
		s.StdSample = refSqrt(smp)
	}
}

// refSqrt rounds √r (r ≥ 0) to the nearest float64, ties to even. A first
// guess from big.Int.Sqrt at a fixed 2^-1300 resolution is moved to the
// neighbour until r lies between the squares of the midpoints around it.
func refSqrt(r *big.Rat) float64 {
	if r.Sign() == 0 {
		return 0
	}
	const k = 1300
	t := new(big.Int).Lsh(r.Num(), 2*k)
	t.Quo(t, r.Denom())
	c, _ := new(big.Rat).SetFrac(new(big.Int).Sqrt(t), new(big.Int).Lsh(big.NewInt(1), k)).Float64()
	sq := func(x *big.Rat) *big.Rat { return new(big.Rat).Mul(x, x) }
	mid := func(x, y float64) *big.Rat {
		m := new(big.Rat).Add(new(big.Rat).SetFloat64(x), new(big.Rat).SetFloat64(y))
		return m.Quo(m, big.NewRat(2, 1))
	}
	// The midpoint between MaxFloat64 and the next power of two, 2^1024.
	top := new(big.Rat).SetInt(new(big.Int).Lsh(big.NewInt(1), 1024))
	top.Add(top, new(big.Rat).SetFloat64(math.MaxFloat64))
	top.Quo(top, big.NewRat(2, 1))
	odd := func(x float64) bool { return math.Float64bits(x)&1 == 1 }
	for {
		if math.IsInf(c, 1) {
			if r.Cmp(sq(top)) >= 0 { // tie goes to the even 2^1024, which is +Inf
				return c
			}
			c = math.MaxFloat64
			continue
		}
		var hi *big.Rat
		up := math.Nextafter(c, math.Inf(1))
		if math.IsInf(up, 1) {
			hi = top
		} else {
			hi = mid(c, up)
		}
		lo := mid(math.Nextafter(c, 0), c)
		switch cHi, cLo := r.Cmp(sq(hi)), r.Cmp(sq(lo)); {
		case cHi > 0:
			c = up
		case cLo < 0:
			c = math.Nextafter(c, 0)
		case cHi == 0 && odd(c):
			return up
		case cLo == 0 && odd(c):
			return math.Nextafter(c, 0)
		default:
			return c
		}
	}
}

// accSameFloat: bit-identical, or both NaN.
func accSameFloat(x, y float64) bool {
	if math.IsNaN(x) || math.IsNaN(y) {
		return math.IsNaN(x) && math.IsNaN(y)
	}
	return math.Float64bits(x) == math.Float64bits(y)
}

func accCheckSummary(t *testing.T, name string, got, want Summary) {
	t.Helper()
	type cnt struct {
		f    string
		g, w uint64
	}
	for _, c := range []cnt{
		{"Rows", got.Rows, want.Rows}, {"Count", got.Count, want.Count}, {"Nulls", got.Nulls, want.Nulls},
		{"NaNs", got.NaNs, want.NaNs}, {"PosInf", got.PosInf, want.PosInf}, {"NegInf", got.NegInf, want.NegInf},
	} {
		if c.g != c.w {
			t.Errorf("%s: %s = %d, want %d", name, c.f, c.g, c.w)
		}
	}
	type flt struct {
		f    string
		g, w float64
	}
	for _, c := range []flt{
		{"Mean", got.Mean, want.Mean}, {"VarSample", got.VarSample, want.VarSample},
		{"VarPopulation", got.VarPopulation, want.VarPopulation}, {"StdSample", got.StdSample, want.StdSample},
		{"StdPopulation", got.StdPopulation, want.StdPopulation}, {"Min", got.Min, want.Min}, {"Max", got.Max, want.Max},
	} {
		if !accSameFloat(c.g, c.w) {
			t.Errorf("%s: %s = %s, want %s", name, c.f, accFmt(c.g), accFmt(c.w))
		}
	}
}

func accFmt(x float64) string {
	return strconv.FormatFloat(x, 'g', -1, 64) + " (" + strconv.FormatFloat(x, 'x', -1, 64) + ")"
}

// TestRefSqrtKnown checks the reference's own square root where the answer
// is known without it: exact squares, and math.Sqrt, which IEEE 754
// requires to be correctly rounded, on float64 inputs.
func TestRefSqrtKnown(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for i := 0; i < 2000; i++ {
		x := math.Float64frombits(rng.Uint64() &^ (1 << 63))
		if math.IsNaN(x) || math.IsInf(x, 0) {
			continue
		}
		// IEEE 754-2019 §5.4.1: squareRoot is correctly rounded.
		if got, want := refSqrt(new(big.Rat).SetFloat64(x)), math.Sqrt(x); got != want {
			t.Fatalf("refSqrt(%g) = %g, math.Sqrt = %g", x, got, want)
		}
	}
	// Exact squares: √(9/4) = 1.5 by hand.
	if got := refSqrt(big.NewRat(9, 4)); got != 1.5 {
		t.Errorf("refSqrt(9/4) = %g, want 1.5", got)
	}
}

type accAdversarial struct {
	name  string
	vals  []float64
	valid []bool
}

func accAdversarialFloats() []accAdversarial {
	mx := math.MaxFloat64
	sub := math.SmallestNonzeroFloat64
	negZero := math.Copysign(0, -1)
	rng := rand.New(rand.NewPCG(7, 11))
	var wide, around1e9, million []float64
	for len(wide) < 2000 {
		x := math.Float64frombits(rng.Uint64())
		if !math.IsNaN(x) && !math.IsInf(x, 0) {
			wide = append(wide, x)
		}
	}
	for range 10000 {
		around1e9 = append(around1e9, 1e9+rng.NormFloat64()*1e-3)
	}
	for range 1 << 20 {
		million = append(million, 0.1)
	}
	var mixed []float64
	var mixedValid []bool
	for i := range 3000 {
		switch rng.IntN(10) {
		case 0:
			mixed = append(mixed, math.NaN())
		case 1:
			mixed = append(mixed, math.Inf(1-2*rng.IntN(2)))
		case 2:
			mixed = append(mixed, 42) // under a null: must not count
			mixedValid = append(mixedValid, false)
			continue
		default:
			mixed = append(mixed, rng.NormFloat64()*math.Ldexp(1, rng.IntN(200)-100))
		}
		mixedValid = append(mixedValid, true)
		_ = i
	}
	return []accAdversarial{
		{name: "near max", vals: []float64{mx, -mx, mx, math.Nextafter(mx, 0), 1e308}},
		{name: "all max", vals: []float64{mx, mx, mx}},
		{name: "max both signs", vals: []float64{mx, -mx}},
		{name: "max and zero", vals: []float64{mx, 0, 0, 0}},
		{name: "subnormals", vals: []float64{sub, 2 * sub, -sub, 0x1p-1022, 99 * sub, -3000 * sub}},
		{name: "half smallest positive mean", vals: []float64{sub, 0}},
		{name: "half smallest negative mean", vals: []float64{-sub, 0}},
		{name: "third smallest negative mean", vals: []float64{-sub, 0, negZero}},
		{name: "zeros mixed", vals: []float64{negZero, 0, negZero}},
		{name: "negative zeros", vals: []float64{negZero, negZero}},
		{name: "one negative zero", vals: []float64{negZero}},
		{name: "1 1e100 1 -1e100", vals: []float64{1, 1e100, 1, -1e100}},
		{name: "1e308 1e308 -1e308", vals: []float64{1e308, 1e308, -1e308}},
		{name: "cancellation 1e16", vals: []float64{1e16, 1, -1e16, 3}},
		{name: "single", vals: []float64{3.5}},
		{name: "empty", vals: nil},
		{name: "only specials", vals: []float64{math.NaN(), math.Inf(1), math.Inf(-1)}},
		{name: "only nulls", vals: []float64{1, 2}, valid: []bool{false, false}},
		{name: "random bit patterns", vals: wide},
		{name: "mean 1e9 std 1e-3", vals: around1e9},
		{name: "2^20 equal values", vals: million},
		{name: "specials and nulls", vals: mixed, valid: mixedValid},
	}
}

// TestBruteForceFloat compares every Summary field bit for bit with the
// big.Rat reference, for the whole column and for a random partitioning
// merged in random order.
func TestBruteForceFloat(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(3, 5))
	for _, c := range accAdversarialFloats() {
		want := refFloats(c.vals, c.valid)
		whole := accFeedFloat64(t, mem, c.vals, c.valid)
		accCheckSummary(t, c.name, whole.Summary(), want)
		merged := accMergeShuffled(t, accPartsFloat64(t, mem, c.vals, c.valid, accRandomCuts(rng, len(c.vals), 5)), rng)
		accCheckSummary(t, c.name+" merged", merged.Summary(), want)
		if !accSameBytes(t, whole, merged) {
			t.Errorf("%s: merged state differs from the whole-column state", c.name)
		}
	}
}

// TestBruteForceFloatAsFloat32 feeds float32 columns: the reference gets
// the same values widened, which is exact (IEEE 754-2019 §5.4.2).
func TestBruteForceFloat32(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(13, 17))
	f32 := []float32{math.MaxFloat32, -math.MaxFloat32, math.SmallestNonzeroFloat32, 0.1, float32(math.NaN()), float32(math.Inf(-1))}
	for range 1000 {
		f32 = append(f32, math.Float32frombits(rng.Uint32()))
	}
	wide := make([]float64, len(f32))
	for i, v := range f32 {
		wide[i] = float64(v)
	}
	b := accFloat32Array(mem, f32, nil)
	defer b.Release()
	a := NewAccumulator(KindFloat)
	if err := a.Add(b); err != nil {
		t.Fatal(err)
	}
	accCheckSummary(t, "float32", a.Summary(), refFloats(wide, nil))
}

func TestBruteForceInt(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(19, 23))
	const p53 = 1 << 53
	randInts := make([]int64, 5000)
	for i := range randInts {
		randInts[i] = int64(rng.Uint64())
	}
	signed := []struct {
		name string
		vals []int64
	}{
		{"min and max int64", []int64{math.MinInt64, math.MaxInt64}},
		{"three MinInt64", []int64{math.MinInt64, math.MinInt64, math.MinInt64}},
		{"near MaxInt64", []int64{math.MaxInt64, math.MaxInt64, math.MaxInt64, math.MaxInt64 - 1}},
		{"beyond 2^53", []int64{p53 + 1, p53 + 3, -p53 - 1}},
		{"single MinInt64", []int64{math.MinInt64}},
		{"random int64", randInts},
	}
	for _, c := range signed {
		ref := make([]*big.Int, len(c.vals))
		for i, v := range c.vals {
			ref[i] = big.NewInt(v)
		}
		want := refInts(ref)
		arr := accInt64Array(mem, c.vals, nil)
		a := NewAccumulator(KindSigned)
		if err := a.Add(arr); err != nil {
			t.Fatal(err)
		}
		arr.Release()
		accCheckSummary(t, c.name, a.Summary(), want)
		m := accMergeShuffled(t, accPartsInt64(t, mem, c.vals, accRandomCuts(rng, len(c.vals), 4)), rng)
		accCheckSummary(t, c.name+" merged", m.Summary(), want)
		if !accSameBytes(t, a, m) {
			t.Errorf("%s: merged state differs", c.name)
		}
	}
	randU := make([]uint64, 5000)
	for i := range randU {
		randU[i] = rng.Uint64()
	}
	unsigned := []struct {
		name string
		vals []uint64
	}{
		{"uint64 max", []uint64{math.MaxUint64, math.MaxUint64, 0}},
		{"single uint64 max", []uint64{math.MaxUint64}},
		{"uint64 beyond 2^53", []uint64{p53 + 1, 1<<63 + 1025, math.MaxUint64 - 1024}},
		{"random uint64", randU},
	}
	for _, c := range unsigned {
		ref := make([]*big.Int, len(c.vals))
		for i, v := range c.vals {
			ref[i] = new(big.Int).SetUint64(v)
		}
		want := refInts(ref)
		arr := accUint64Array(mem, c.vals, nil)
		a := NewAccumulator(KindUnsigned)
		if err := a.Add(arr); err != nil {
			t.Fatal(err)
		}
		arr.Release()
		accCheckSummary(t, c.name, a.Summary(), want)
	}
}

// TestFloatLoops: the two float loops (and the adaptive switch between
// them) build byte-identical states, equal to the reference's statistics,
// on the adversarial sets and on a column built to switch loops often:
// long runs (past the 1024-value chunk), exponent changes at every value,
// zeros and subnormals, NaN, infinities and nulls.
func TestFloatLoops(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	defer func() { floatLoop = loopAdaptive }()
	rng := rand.New(rand.NewPCG(83, 89))
	var vals []float64
	var valid []bool
	for len(vals) < 15000 {
		n := 1 + rng.IntN(3000)
		kind := rng.IntN(5)
		for range n {
			var x float64
			switch kind {
			case 0: // one exponent
				x = 1 + rng.Float64()
			case 1: // exponent changes almost every value
				x = rng.NormFloat64() * math.Ldexp(1, rng.IntN(40)-20)
			case 2: // zeros and subnormals of both signs
				x = math.Float64frombits(rng.Uint64()&(1<<52-1)) * float64(1-2*rng.IntN(2))
				if rng.IntN(4) == 0 {
					x = math.Copysign(0, float64(1-2*rng.IntN(2)))
				}
			case 3: // specials among ordinary values
				x = []float64{math.NaN(), math.Inf(1), math.Inf(-1), 3, -3}[rng.IntN(5)]
			default: // negative values in one exponent
				x = -(1 + rng.Float64())
			}
			vals = append(vals, x)
			valid = append(valid, rng.IntN(20) != 0)
		}
	}
	sets := []accAdversarial{{name: "loop switching", vals: vals, valid: valid}, {name: "loop switching, no nulls", vals: vals}}
	for _, c := range accAdversarialFloats() {
		if len(c.vals) < 1<<20 {
			sets = append(sets, c)
		}
	}
	for _, c := range sets {
		var enc [3][]byte
		for i, mode := range []int{loopAdaptive, loopRuns, loopDirect} {
			floatLoop = mode
			a := accFeedFloat64(t, mem, c.vals, c.valid)
			var err error
			if enc[i], err = a.MarshalBinary(); err != nil {
				t.Fatal(err)
			}
			if i == 0 {
				accCheckSummary(t, c.name, a.Summary(), refFloats(c.vals, c.valid))
			}
		}
		if !bytes.Equal(enc[0], enc[1]) || !bytes.Equal(enc[0], enc[2]) {
			t.Errorf("%s: adaptive, runs-only and direct-only states differ", c.name)
		}
	}
}
