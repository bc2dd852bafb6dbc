package stats

import (
	"bytes"
	"encoding/binary"
	"errors"
	"hash/crc32"
	"math"
	"math/big"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"unsafe"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/bitutil"
	"github.com/apache/arrow/go/v17/arrow/decimal128"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"gonum.org/v1/gonum/stat"
)

// ---- helpers ----

func accFloat64Array(mem memory.Allocator, vals []float64, valid []bool) arrow.Array {
	b := array.NewFloat64Builder(mem)
	defer b.Release()
	b.AppendValues(vals, valid)
	return b.NewArray()
}

func accFloat32Array(mem memory.Allocator, vals []float32, valid []bool) arrow.Array {
	b := array.NewFloat32Builder(mem)
	defer b.Release()
	b.AppendValues(vals, valid)
	return b.NewArray()
}

func accInt64Array(mem memory.Allocator, vals []int64, valid []bool) arrow.Array {
	b := array.NewInt64Builder(mem)
	defer b.Release()
	b.AppendValues(vals, valid)
	return b.NewArray()
}

func accUint64Array(mem memory.Allocator, vals []uint64, valid []bool) arrow.Array {
	b := array.NewUint64Builder(mem)
	defer b.Release()
	b.AppendValues(vals, valid)
	return b.NewArray()
}

func accFeedFloat64(t testing.TB, mem memory.Allocator, vals []float64, valid []bool) *Accumulator {
	t.Helper()
	arr := accFloat64Array(mem, vals, valid)
	defer arr.Release()
	a := NewAccumulator(KindFloat)
	if err := a.Add(arr); err != nil {
		t.Fatal(err)
	}
	return a
}

// accRandomCuts returns k+1 sorted boundaries 0 = c[0] ≤ ... ≤ c[k] = n; parts
// may be empty.
func accRandomCuts(rng *rand.Rand, n, k int) []int {
	c := []int{0, n}
	for range k - 1 {
		c = append(c, rng.IntN(n+1))
	}
	slices.Sort(c)
	return c
}

// accEvenCuts splits n into k nearly equal parts.
func accEvenCuts(n, k int) []int {
	c := make([]int, k+1)
	for i := range c {
		c[i] = i * n / k
	}
	return c
}

// accPartsOf adds zero-copy slices [cuts[i], cuts[i+1]) of arr (so the slices
// have offsets) to one accumulator each.
func accPartsOf(t testing.TB, arr arrow.Array, k Kind, cuts []int) []*Accumulator {
	t.Helper()
	var parts []*Accumulator
	for i := 0; i+1 < len(cuts); i++ {
		s := array.NewSlice(arr, int64(cuts[i]), int64(cuts[i+1]))
		a := NewAccumulator(k)
		if err := a.Add(s); err != nil {
			t.Fatal(err)
		}
		s.Release()
		parts = append(parts, a)
	}
	return parts
}

func accPartsFloat64(t testing.TB, mem memory.Allocator, vals []float64, valid []bool, cuts []int) []*Accumulator {
	arr := accFloat64Array(mem, vals, valid)
	defer arr.Release()
	return accPartsOf(t, arr, KindFloat, cuts)
}

func accPartsInt64(t testing.TB, mem memory.Allocator, vals []int64, cuts []int) []*Accumulator {
	arr := accInt64Array(mem, vals, nil)
	defer arr.Release()
	return accPartsOf(t, arr, KindSigned, cuts)
}

// accMergeShuffled merges parts along a random tree; about a third of the
// operands go through MarshalBinary/UnmarshalBinary first.
func accMergeShuffled(t testing.TB, parts []*Accumulator, rng *rand.Rand) *Accumulator {
	t.Helper()
	parts = slices.Clone(parts)
	for len(parts) > 1 {
		i, j := rng.IntN(len(parts)), rng.IntN(len(parts)-1)
		if j >= i {
			j++
		}
		src := parts[j]
		if rng.IntN(3) == 0 {
			src = accRoundTrip(t, src)
		}
		if rng.IntN(3) == 0 {
			parts[i] = accRoundTrip(t, parts[i])
		}
		if err := parts[i].Merge(src); err != nil {
			t.Fatal(err)
		}
		parts = slices.Delete(parts, j, j+1)
	}
	return parts[0]
}

func accRoundTrip(t testing.TB, a *Accumulator) *Accumulator {
	t.Helper()
	b, err := a.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	var d Accumulator
	if err := d.UnmarshalBinary(b); err != nil {
		t.Fatal(err)
	}
	return &d
}

func accSameBytes(t testing.TB, a, b *Accumulator) bool {
	t.Helper()
	x, err := a.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	y, err := b.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	return bytes.Equal(x, y)
}

// ---- tests ----

func TestKindOf(t *testing.T) {
	// Expected kinds follow the Arrow type names (arrow/datatype_numeric.gen.go).
	cases := []struct {
		dt   arrow.DataType
		kind Kind
		ok   bool
	}{
		{arrow.PrimitiveTypes.Float64, KindFloat, true},
		{arrow.PrimitiveTypes.Float32, KindFloat, true},
		{arrow.PrimitiveTypes.Int8, KindSigned, true},
		{arrow.PrimitiveTypes.Int16, KindSigned, true},
		{arrow.PrimitiveTypes.Int32, KindSigned, true},
		{arrow.PrimitiveTypes.Int64, KindSigned, true},
		{arrow.PrimitiveTypes.Uint8, KindUnsigned, true},
		{arrow.PrimitiveTypes.Uint16, KindUnsigned, true},
		{arrow.PrimitiveTypes.Uint32, KindUnsigned, true},
		{arrow.PrimitiveTypes.Uint64, KindUnsigned, true},
		{arrow.FixedWidthTypes.Float16, 0, false},
		{arrow.FixedWidthTypes.Boolean, 0, false},
		{arrow.FixedWidthTypes.Timestamp_us, 0, false},
		{arrow.FixedWidthTypes.Date32, 0, false},
		{arrow.BinaryTypes.String, 0, false},
		{&arrow.Decimal128Type{Precision: 10, Scale: 2}, 0, false},
		{arrow.ListOf(arrow.PrimitiveTypes.Float64), 0, false},
		{nil, 0, false},
	}
	for _, c := range cases {
		k, ok := KindOf(c.dt)
		if k != c.kind || ok != c.ok {
			t.Errorf("KindOf(%v) = %v, %v; want %v, %v", c.dt, k, ok, c.kind, c.ok)
		}
	}
}

// TestSummaryFromJSON: small columns whose statistics follow by hand.
// Expected values are exact decimal arithmetic written as Go constant
// expressions (Go evaluates untyped constants exactly and rounds once on
// conversion to float64), math.Sqrt of an exactly representable variance
// (IEEE 754 requires a correctly rounded square root), and in every case
// all fields are also checked against the big.Rat reference.
func TestSummaryFromJSON(t *testing.T) {
	nan := math.NaN()
	cases := []struct {
		name string
		dt   arrow.DataType
		json string
		want Summary
	}{
		{"float64 1..4", arrow.PrimitiveTypes.Float64, `[1, 2, 3, 4]`, Summary{
			Rows: 4, Count: 4, Mean: 2.5, VarPopulation: 1.25, VarSample: 5.0 / 3,
			StdPopulation: math.Sqrt(1.25), StdSample: 1.2909944487358056, Min: 1, Max: 4}},
		{"int32 1..4", arrow.PrimitiveTypes.Int32, `[1, 2, 3, 4]`, Summary{
			Rows: 4, Count: 4, Mean: 2.5, VarPopulation: 1.25, VarSample: 5.0 / 3,
			StdPopulation: math.Sqrt(1.25), StdSample: 1.2909944487358056, Min: 1, Max: 4}},
		{"float64 with null", arrow.PrimitiveTypes.Float64, `[1, null, 3]`, Summary{
			Rows: 3, Count: 2, Nulls: 1, Mean: 2, VarPopulation: 1, VarSample: 2,
			StdPopulation: 1, StdSample: math.Sqrt(2), Min: 1, Max: 3}},
		{"float32 quarters", arrow.PrimitiveTypes.Float32, `[0.5, 0.25]`, Summary{
			Rows: 2, Count: 2, Mean: 0.375, VarPopulation: 0.015625, VarSample: 0.03125,
			StdPopulation: 0.125, StdSample: math.Sqrt(0.03125), Min: 0.25, Max: 0.5}},
		{"int8 extremes", arrow.PrimitiveTypes.Int8, `[-128, 127, null]`, Summary{
			Rows: 3, Count: 2, Nulls: 1, Mean: -0.5, VarPopulation: 127.5 * 127.5, VarSample: 255 * 255 / 2.0,
			StdPopulation: 127.5, StdSample: math.Sqrt(255 * 255 / 2.0), Min: -128, Max: 127}},
		{"uint8 extremes", arrow.PrimitiveTypes.Uint8, `[0, 255]`, Summary{
			Rows: 2, Count: 2, Mean: 127.5, VarPopulation: 127.5 * 127.5, VarSample: 255 * 255 / 2.0,
			StdPopulation: 127.5, StdSample: math.Sqrt(255 * 255 / 2.0), Min: 0, Max: 255}},
		{"uint32 single", arrow.PrimitiveTypes.Uint32, `[7]`, Summary{
			Rows: 1, Count: 1, Mean: 7, VarPopulation: 0, VarSample: nan,
			StdPopulation: 0, StdSample: nan, Min: 7, Max: 7}},
		{"int16 empty", arrow.PrimitiveTypes.Int16, `[]`, Summary{
			Mean: nan, VarPopulation: nan, VarSample: nan, StdPopulation: nan, StdSample: nan, Min: nan, Max: nan}},
		{"uint16 all null", arrow.PrimitiveTypes.Uint16, `[null, null]`, Summary{
			Rows: 2, Nulls: 2,
			Mean: nan, VarPopulation: nan, VarSample: nan, StdPopulation: nan, StdSample: nan, Min: nan, Max: nan}},
		// array.FromJSON reads integers through float64 (9223372036854775807
		// comes back as MinInt64), so 64-bit extremes use builders.
		{"int64 extremes", arrow.PrimitiveTypes.Int64, "", Summary{
			Rows: 2, Count: 2, Mean: -0.5, VarPopulation: 0x1p126, VarSample: 0x1p127,
			StdPopulation: 0x1p63, StdSample: math.Sqrt(0x1p127), Min: -0x1p63, Max: 0x1p63}},
		{"uint64 max", arrow.PrimitiveTypes.Uint64, "", Summary{
			Rows: 2, Count: 2, Mean: 0x1p63, VarPopulation: 0x1p126, VarSample: 0x1p127,
			StdPopulation: 0x1p63, StdSample: math.Sqrt(0x1p127), Min: 0, Max: 0x1p64}},
	}
	// 1.2909944487358056 is √(5/3) = 1.29099444873580562839... rounded to
	// float64 (from memory; every case is also checked against the reference).
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
			defer mem.AssertSize(t, 0)
			var arr arrow.Array
			switch {
			case c.json != "":
				var err error
				if arr, _, err = array.FromJSON(mem, c.dt, strings.NewReader(c.json)); err != nil {
					t.Fatal(err)
				}
			case c.dt.ID() == arrow.INT64:
				arr = accInt64Array(mem, []int64{math.MinInt64, math.MaxInt64}, nil)
			default:
				arr = accUint64Array(mem, []uint64{math.MaxUint64, 0}, nil)
			}
			defer arr.Release()
			k, ok := KindOf(c.dt)
			if !ok {
				t.Fatalf("KindOf(%v) = false", c.dt)
			}
			a := NewAccumulator(k)
			if err := a.Add(arr); err != nil {
				t.Fatal(err)
			}
			got := a.Summary()
			accCheckSummary(t, "by hand", got, c.want)
			accCheckSummary(t, "reference", got, refArray(t, arr))
		})
	}
}

// refArray runs the big.Rat reference on an Arrow array's values.
func refArray(t *testing.T, arr arrow.Array) Summary {
	t.Helper()
	if k, _ := KindOf(arr.DataType()); k == KindFloat {
		vals := make([]float64, arr.Len())
		valid := make([]bool, arr.Len())
		for i := range vals {
			valid[i] = arr.IsValid(i)
			switch a := arr.(type) {
			case *array.Float64:
				vals[i] = a.Value(i)
			case *array.Float32:
				vals[i] = float64(a.Value(i))
			}
		}
		return refFloats(vals, valid)
	}
	var ints []*big.Int
	nulls := 0
	for i := 0; i < arr.Len(); i++ {
		if arr.IsNull(i) {
			nulls++
			continue
		}
		x, ok := new(big.Int).SetString(arr.ValueStr(i), 10)
		if !ok {
			t.Fatalf("parse %q", arr.ValueStr(i))
		}
		ints = append(ints, x)
	}
	s := refInts(ints)
	s.Rows += uint64(nulls)
	s.Nulls = uint64(nulls)
	return s
}

// TestSignedZero: -0 orders below +0 in min and max whatever the
// partitioning and merge order, and an exactly zero mean is +0 (the rule
// documented on Accumulator and Summary).
func TestSignedZero(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	nz := math.Copysign(0, -1)
	for _, vals := range [][]float64{{nz, 0}, {0, nz}, {0, nz, 0, nz}, {nz, nz, 0}} {
		for cut := 0; cut <= len(vals); cut++ {
			for _, order := range []bool{false, true} {
				p := accPartsFloat64(t, mem, vals, nil, []int{0, cut, len(vals)})
				if order {
					p[0], p[1] = p[1], p[0]
				}
				if err := p[0].Merge(p[1]); err != nil {
					t.Fatal(err)
				}
				s := p[0].Summary()
				if !accSameFloat(s.Min, nz) || !accSameFloat(s.Max, 0) || !accSameFloat(s.Mean, 0) {
					t.Errorf("%v cut %d swapped %v: min %v max %v mean %v; want -0 +0 +0",
						vals, cut, order, accFmt(s.Min), accFmt(s.Max), accFmt(s.Mean))
				}
			}
		}
	}
}

// TestSpecials: NaN and infinities are counted and kept out of the moments
// and extremes.
func TestSpecials(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	vals := []float64{math.NaN(), 1, math.Inf(1), math.Inf(-1), 3, 5, math.Inf(1),
		math.Float64frombits(0xFFF8_0000_0000_0001)} // a negative NaN with payload
	valid := []bool{true, true, true, true, true, false, true, true}
	a := accFeedFloat64(t, mem, vals, valid)
	s := a.Summary()
	// By hand: finite valid values are {1, 3}.
	want := Summary{Rows: 8, Count: 2, Nulls: 1, NaNs: 2, PosInf: 2, NegInf: 1,
		Mean: 2, VarPopulation: 1, VarSample: 2, StdPopulation: 1, StdSample: math.Sqrt(2), Min: 1, Max: 3}
	accCheckSummary(t, "specials", s, want)
	accCheckSummary(t, "specials reference", s, refFloats(vals, valid))
}

// TestSlicedArrays: arrays with offsets and null bitmaps that do not start
// on a byte or word boundary give the reference result on the same window.
func TestSlicedArrays(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(29, 31))
	const n = 700
	vals := make([]float64, n)
	valid := make([]bool, n)
	for i := range vals {
		vals[i] = float64(rng.IntN(2001) - 1000)
		// Long runs of valid and null slots, and stretches of alternation.
		switch {
		case i%300 < 150:
			valid[i] = true
		case i%300 < 200:
			valid[i] = rng.IntN(2) == 0
		}
	}
	arr := accFloat64Array(mem, vals, valid)
	defer arr.Release()
	for range 200 {
		lo := rng.IntN(n)
		hi := lo + rng.IntN(n-lo+1)
		s := array.NewSlice(arr, int64(lo), int64(hi))
		a := NewAccumulator(KindFloat)
		if err := a.Add(s); err != nil {
			t.Fatal(err)
		}
		s.Release()
		accCheckSummary(t, "slice", a.Summary(), refFloats(vals[lo:hi], valid[lo:hi]))
	}
}

// TestLoadBits compares loadBits with Arrow's bitutil.BitIsSet.
func TestLoadBits(t *testing.T) {
	rng := rand.New(rand.NewPCG(37, 41))
	bm := make([]byte, 19)
	for i := range bm {
		bm[i] = byte(rng.Uint32())
	}
	for i := 0; i < len(bm)*8; i++ {
		for n := 1; n <= 64 && i+n <= len(bm)*8; n++ {
			got := loadBits(bm, i, n)
			for j := 0; j < 64; j++ {
				want := j < n && bitutil.BitIsSet(bm, i+j)
				if (got>>uint(j))&1 == 1 != want {
					t.Fatalf("loadBits(i=%d, n=%d) bit %d = %v, want %v", i, n, j, !want, want)
				}
			}
		}
	}
}

// TestIntegerAndFloatAgree: integers below 2^53 are exact float64s, so an
// integer column and the same values as float64 must give the same
// Summary (both are exact statistics rounded once).
func TestIntegerAndFloatAgree(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(43, 47))
	ints := make([]int64, 3000)
	fl := make([]float64, len(ints))
	for i := range ints {
		ints[i] = rng.Int64N(1<<53) - 1<<52
		fl[i] = float64(ints[i])
	}
	ia := accInt64Array(mem, ints, nil)
	defer ia.Release()
	ai := NewAccumulator(KindSigned)
	if err := ai.Add(ia); err != nil {
		t.Fatal(err)
	}
	af := accFeedFloat64(t, mem, fl, nil)
	accCheckSummary(t, "int vs float", ai.Summary(), af.Summary())
}

func TestAccumulatorErrors(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	ints := accInt64Array(mem, []int64{1}, nil)
	defer ints.Release()
	f := NewAccumulator(KindFloat)
	if err := f.Add(ints); !errors.Is(err, ErrKindMismatch) {
		t.Errorf("Add int64 to float accumulator: %v, want ErrKindMismatch", err)
	}
	if err := f.Merge(NewAccumulator(KindSigned)); !errors.Is(err, ErrKindMismatch) {
		t.Errorf("Merge signed into float: %v, want ErrKindMismatch", err)
	}
	sb := array.NewStringBuilder(mem)
	sb.Append("x")
	str := sb.NewArray()
	sb.Release()
	defer str.Release()
	if err := f.Add(str); !errors.Is(err, ErrUnsupportedType) {
		t.Errorf("Add string: %v, want ErrUnsupportedType", err)
	}
	db := array.NewDecimal128Builder(mem, &arrow.Decimal128Type{Precision: 5, Scale: 1})
	db.Append(decimal128.FromI64(12))
	dec := db.NewArray()
	db.Release()
	defer dec.Release()
	if err := f.Add(dec); !errors.Is(err, ErrUnsupportedType) {
		t.Errorf("Add decimal: %v, want ErrUnsupportedType", err)
	}
	if s := f.Summary(); s.Rows != 0 {
		t.Errorf("rejected arrays changed the state: rows %d", s.Rows)
	}
	var zero Accumulator
	if err := zero.Add(ints); err == nil {
		t.Error("Add to zero-value accumulator succeeded")
	}
	if _, err := zero.MarshalBinary(); err == nil {
		t.Error("MarshalBinary of zero-value accumulator succeeded")
	}
	if err := zero.Merge(&zero); err == nil {
		t.Error("Merge of zero-value accumulators succeeded")
	}
	// Error text: lowercase, no trailing punctuation, names the kinds.
	err := f.Add(ints)
	if msg := err.Error(); msg != "add int64 array to float accumulator: kind mismatch" {
		t.Errorf("error text %q", msg)
	}
}

// TestCountOverflow: merging past 2^64 - 1 rows fails and leaves a unchanged.
func TestCountOverflow(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	// A valid state of 2^64 - 2 zeros, built field by field.
	big0 := NewAccumulator(KindFloat)
	big0.n = math.MaxUint64 - 1
	big0.minKey, big0.maxKey = floatKey(0), floatKey(0)
	before, err := big0.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	if err := accRoundTrip(t, big0).Merge(big0); !errors.Is(err, ErrCountOverflow) {
		t.Errorf("merge overflow: %v, want ErrCountOverflow", err)
	}
	small := accFeedFloat64(t, mem, []float64{1, 2, 3}, nil)
	if err := big0.Merge(small); !errors.Is(err, ErrCountOverflow) {
		t.Errorf("merge overflow: %v, want ErrCountOverflow", err)
	}
	arr := accFloat64Array(mem, []float64{1, 2, 3}, nil)
	defer arr.Release()
	if err := big0.Add(arr); !errors.Is(err, ErrCountOverflow) {
		t.Errorf("add overflow: %v, want ErrCountOverflow", err)
	}
	after, _ := big0.MarshalBinary()
	if !bytes.Equal(before, after) {
		t.Error("failed merge changed the state")
	}
}

// TestMergeSelf: a.Merge(a) is the state of every value fed twice.
func TestMergeSelf(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	vals := []float64{1.5, -2, 1e300, 5e-324, math.NaN()}
	a := accFeedFloat64(t, mem, vals, nil)
	if err := a.Merge(a); err != nil {
		t.Fatal(err)
	}
	b := accFeedFloat64(t, mem, append(slices.Clone(vals), vals...), nil)
	if !accSameBytes(t, a, b) {
		t.Error("self-merge differs from feeding twice")
	}
	ints := accInt64Array(mem, []int64{math.MinInt64, 3}, nil)
	defer ints.Release()
	c, d := NewAccumulator(KindSigned), NewAccumulator(KindSigned)
	for _, x := range []*Accumulator{c, d, d} {
		if err := x.Add(ints); err != nil {
			t.Fatal(err)
		}
	}
	if err := c.Merge(c); err != nil {
		t.Fatal(err)
	}
	if !accSameBytes(t, c, d) {
		t.Error("signed self-merge differs from feeding twice")
	}
}

// TestEncodingRoundTrip: decode(encode(s)) encodes to the same bytes and has the
// same Summary, and decoded states merge with live ones to the state of
// one accumulator fed everything.
func TestEncodingRoundTrip(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(53, 59))
	var states []*Accumulator
	for _, k := range []Kind{KindFloat, KindSigned, KindUnsigned} {
		states = append(states, NewAccumulator(k))
	}
	for _, c := range accAdversarialFloats() {
		if len(c.vals) < 5000 {
			states = append(states, accFeedFloat64(t, mem, c.vals, c.valid))
		}
	}
	for i, a := range states {
		b1, err := a.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		d := accRoundTrip(t, a)
		b2, _ := d.MarshalBinary()
		if !bytes.Equal(b1, b2) {
			t.Errorf("state %d: re-encoding differs", i)
		}
		accCheckSummary(t, "decoded", d.Summary(), a.Summary())
		if d.Kind() != a.Kind() {
			t.Errorf("state %d: kind %v, want %v", i, d.Kind(), a.Kind())
		}
	}
	// Decoded + live, both orders, equals all live.
	vals := make([]float64, 5000)
	for i := range vals {
		vals[i] = rng.NormFloat64() * 1e6
	}
	whole := accFeedFloat64(t, mem, vals, nil)
	p := accPartsFloat64(t, mem, vals, nil, []int{0, 2000, 5000})
	dec := accRoundTrip(t, p[0])
	if err := dec.Merge(p[1]); err != nil {
		t.Fatal(err)
	}
	if !accSameBytes(t, dec, whole) {
		t.Error("decoded.Merge(live) differs from whole")
	}
	p = accPartsFloat64(t, mem, vals, nil, []int{0, 2000, 5000})
	if err := p[1].Merge(accRoundTrip(t, p[0])); err != nil {
		t.Fatal(err)
	}
	// And the live side keeps accepting values after merging a decoded one.
	if !accSameBytes(t, p[1], whole) {
		t.Error("live.Merge(decoded) differs from whole")
	}
}

// accWithCRC appends a valid CRC-32C (hash/crc32, Castagnoli) to body.
func accWithCRC(body []byte) []byte {
	return binary.BigEndian.AppendUint32(slices.Clone(body), crc32.Checksum(body, crc32.MakeTable(crc32.Castagnoli)))
}

// TestUnmarshalRejects: every truncation and every single-bit flip is
// rejected (a CRC whose generator has more than one term detects every
// single-bit error: Peterson & Brown, "Cyclic codes for error detection",
// Proc. IRE 49(1), 1961), and so are well-checksummed bodies that break the
// layout or describe a state no values could produce.
func TestUnmarshalRejects(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	a := accFeedFloat64(t, mem, []float64{-3, 1.5, 1e100, 5e-324, math.NaN()}, []bool{true, true, true, true, false})
	good, err := a.MarshalBinary()
	if err != nil {
		t.Fatal(err)
	}
	var d Accumulator
	if err := d.UnmarshalBinary(good); err != nil {
		t.Fatalf("valid input rejected: %v", err)
	}
	for n := 0; n < len(good); n++ {
		if err := d.UnmarshalBinary(good[:n]); !errors.Is(err, ErrCorruptState) {
			t.Fatalf("truncation to %d bytes: %v", n, err)
		}
	}
	if err := d.UnmarshalBinary(append(slices.Clone(good), 0)); !errors.Is(err, ErrCorruptState) {
		t.Fatalf("extra byte: %v", err)
	}
	for i := 0; i < len(good)*8; i++ {
		bad := slices.Clone(good)
		bad[i/8] ^= 1 << uint(i%8)
		if err := d.UnmarshalBinary(bad); !errors.Is(err, ErrCorruptState) {
			t.Fatalf("bit flip %d accepted: %v", i, err)
		}
	}
	if s := d.Summary(); s.Count != 4 || s.Nulls != 1 {
		t.Errorf("a rejected input changed the state: %+v", s)
	}

	body := good[:len(good)-4]
	sOff := encHeaderLen // S: sign, length, magnitude
	sLen := int(binary.BigEndian.Uint16(body[sOff+1:]))
	qOff := sOff + 3 + sLen
	edit := func(f func(b []byte) []byte) []byte { return accWithCRC(f(slices.Clone(body))) }
	put64 := func(off int, v uint64) func([]byte) []byte {
		return func(b []byte) []byte { binary.BigEndian.PutUint64(b[off:], v); return b }
	}
	cases := map[string][]byte{
		"bad magic":      edit(func(b []byte) []byte { b[0] = 'X'; return b }),
		"version 2":      edit(func(b []byte) []byte { b[4] = 2; return b }),
		"kind 0":         edit(func(b []byte) []byte { b[5] = 0; return b }),
		"kind 4":         edit(func(b []byte) []byte { b[5] = 4; return b }),
		"count zero":     edit(put64(6, 0)),
		"count one":      edit(put64(6, 1)),
		"rows overflow":  edit(put64(14, math.MaxUint64)),
		"min above max":  edit(put64(46, floatKey(math.Float64bits(2e100)))),
		"min is NaN":     edit(put64(46, floatKey(math.Float64bits(math.NaN())))),
		"max is +Inf":    edit(put64(54, floatKey(math.Float64bits(math.Inf(1))))),
		"sign byte 2":    edit(func(b []byte) []byte { b[sOff] = 2; return b }),
		"S negated":      edit(func(b []byte) []byte { b[sOff] ^= 1; return b }),
		"Q negative":     edit(func(b []byte) []byte { b[qOff] = 1; return b }),
		"S length long":  edit(func(b []byte) []byte { binary.BigEndian.PutUint16(b[sOff+1:], uint16(sLen+1)); return b }),
		"trailing bytes": edit(func(b []byte) []byte { return append(b, 0) }),
		"leading zero": edit(func(b []byte) []byte {
			out := slices.Clone(b[:sOff+1])
			out = binary.BigEndian.AppendUint16(out, uint16(sLen+1))
			out = append(out, 0)
			return append(out, b[sOff+3:]...)
		}),
		"negative zero S": accWithCRC(func() []byte {
			e, _ := NewAccumulator(KindFloat).MarshalBinary()
			b := slices.Clone(e[:len(e)-4])
			b[encHeaderLen] = 1
			return b
		}()),
	}
	// States that break exactly one consistency rule, encoded field by
	// field (MarshalBinary does not validate). Integer kinds: scale 1.
	craft := func(k Kind, n uint64, lo, hi int64, sum, sq int64) []byte {
		c := NewAccumulator(k)
		c.n = n
		if k == KindSigned {
			c.minKey, c.maxKey = signedKey(lo), signedKey(hi)
		} else {
			c.minKey, c.maxKey = uint64(lo), uint64(hi)
		}
		c.s.SetInt64(sum)
		c.q.SetInt64(sq)
		b, err := c.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	// Control: a consistent crafted state ({-1, 1, 1}) is accepted.
	if err := d.UnmarshalBinary(craft(KindSigned, 3, -1, 1, 1, 3)); err != nil {
		t.Fatalf("consistent crafted state rejected: %v", err)
	}
	for name, bad := range map[string][]byte{
		"S² > n·Q only":            craft(KindSigned, 3, -1, 1, 3, 1),
		"two values, wrong Q":      craft(KindSigned, 2, 1, 5, 6, 25),
		"Q above n·max²":           craft(KindSigned, 3, 0, 2, 3, 13),
		"one value, Q not S²":      craft(KindUnsigned, 1, 5, 5, 5, 26),
		"empty with a sum":         craft(KindSigned, 0, 0, 0, 0, 0),
		"sum below n·min":          craft(KindUnsigned, 3, 2, 9, 5, 100),
		"unsigned one value wrong": craft(KindUnsigned, 1, 5, 5, 4, 25),
	} {
		if err := d.UnmarshalBinary(bad); !errors.Is(err, ErrCorruptState) {
			t.Errorf("%s: accepted or wrong error: %v", name, err)
		}
	}
	for name, bad := range cases {
		if err := d.UnmarshalBinary(bad); !errors.Is(err, ErrCorruptState) {
			t.Errorf("%s: accepted or wrong error: %v", name, err)
		}
	}
}

// TestGonumAgreement compares with gonum.org/v1/gonum/stat, a general-purpose
// library that computes in float64, on random, well-conditioned data (mean
// several standard deviations from zero). Gonum's results carry the
// rounding error of float summation over n terms: the deterministic bound
// is about (n-1)·u relative (Higham, "Accuracy and Stability of Numerical
// Algorithms", 2nd ed., 2002, §4.2), the typical error grows like √n. We
// allow 4 + √n ulps (common practice), and check that our values are the
// big.Rat reference's exactly, so any gap is gonum's rounding.
func TestGonumAgreement(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(61, 67))
	worst := uint64(0)
	for trial := range 50 {
		n := 2 + rng.IntN(300)
		loc, sc := 1+9*rng.Float64(), math.Exp(rng.NormFloat64()*3)
		x := make([]float64, n)
		for i := range x {
			x[i] = sc * (loc + rng.NormFloat64())
		}
		if trial%5 == 0 {
			for i := range x {
				x[i] = math.Exp(x[i] / (10 * sc)) // lognormal, all positive
			}
		}
		s := accFeedFloat64(t, mem, x, nil).Summary()
		accCheckSummary(t, "gonum data vs reference", s, refFloats(x, nil))
		tol := 4 + uint64(math.Sqrt(float64(n)))
		check := func(what string, got, want float64) {
			d := accULPDiff(got, want)
			worst = max(worst, d)
			if d > tol {
				t.Errorf("trial %d n=%d %s: ours %v, gonum %v: %d ulps apart (tolerance %d)", trial, n, what, got, want, d, tol)
			}
		}
		check("mean", s.Mean, stat.Mean(x, nil))
		check("sample variance", s.VarSample, stat.Variance(x, nil))
		check("population variance", s.VarPopulation, stat.PopVariance(x, nil))
		check("sample std", s.StdSample, stat.StdDev(x, nil))
		check("population std", s.StdPopulation, stat.PopStdDev(x, nil))
	}
	t.Logf("largest difference from gonum: %d ulps", worst)
}

// accULPDiff counts the float64s between x and y (same-sign finite inputs).
func accULPDiff(x, y float64) uint64 {
	if math.Signbit(x) != math.Signbit(y) {
		return math.MaxUint64
	}
	a, b := math.Float64bits(math.Abs(x)), math.Float64bits(math.Abs(y))
	if a > b {
		return a - b
	}
	return b - a
}

// TestCompact: compacting leaves the state as it was (MarshalBinary bytes
// and Summary equal to an accumulator never compacted), values may follow
// a compaction, and the accumulators made after it start from zero: fed
// {1, 2.5}, one has the exact mean 1.75 and population variance 0.5625 (by
// hand: deviations ±0.75).
func TestCompact(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	for _, c := range accAdversarialFloats() {
		whole := accFeedFloat64(t, mem, c.vals, c.valid)
		parts := NewAccumulator(KindFloat)
		for lo := 0; lo < len(c.vals); lo += 700 {
			hi := min(lo+700, len(c.vals))
			var valid []bool
			if c.valid != nil {
				valid = c.valid[lo:hi]
			}
			arr := accFloat64Array(mem, c.vals[lo:hi], valid)
			if err := parts.Add(arr); err != nil {
				t.Fatal(err)
			}
			arr.Release()
			parts.Compact()
			if parts.fs != nil {
				t.Fatalf("%s: slots kept after Compact", c.name)
			}
		}
		if !accSameBytes(t, whole, parts) {
			t.Errorf("%s: compacted in parts of 700 differs from one accumulator", c.name)
		}
		accCheckSummary(t, c.name+", compacted", parts.Summary(), whole.Summary())
		whole.Compact()
		fresh := accFeedFloat64(t, mem, []float64{1, 2.5}, nil)
		if s := fresh.Summary(); s.Mean != 1.75 || s.VarPopulation != 0.5625 {
			t.Fatalf("%s: after a compaction, a new accumulator fed {1, 2.5} gives mean %v, variance %v", c.name, s.Mean, s.VarPopulation)
		}
		fresh.Compact()
	}
}

// TestFootprint: a float accumulator holds its 128 KiB of slots until
// Compact, then only the words of its folded sums.
func TestFootprint(t *testing.T) {
	if got := int(unsafe.Sizeof(slot{})); got != slotBytes {
		t.Fatalf("a slot is %d bytes, slotBytes says %d", got, slotBytes)
	}
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	a := accFeedFloat64(t, mem, []float64{1e300, -3.25, 5e-324}, nil)
	if got := a.Footprint(); got < nSlots*slotBytes {
		t.Errorf("live footprint %d, want at least %d", got, nSlots*slotBytes)
	}
	a.Compact()
	if got := a.Footprint(); got == 0 || got > 2048 {
		t.Errorf("compacted footprint %d, want the folded sums' words (1..2048 bytes)", got)
	}
}
