package stats_test

import (
	"errors"
	"fmt"
	"math"
	"math/big"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"gonum.org/v1/gonum/stat"

	"github.com/lakescale/lakescale/stats"
)

// Helpers in this file carry a "tf" prefix so they cannot collide with
// helpers in the package's other external test files.

type tfBuilder[T any] interface {
	array.Builder
	AppendValues(v []T, valid []bool)
}

// tfMake builds an array from vals; every fifth slot (and slot 1) is null.
func tfMake[T any](b tfBuilder[T], vals []T) arrow.Array {
	defer b.Release()
	valid := make([]bool, len(vals))
	for i := range valid {
		valid[i] = i%5 != 0 && i != 1
	}
	b.AppendValues(vals, valid)
	return b.NewArray()
}

// tfRN converts through math/big, rounding to nearest, ties to even: an
// independent reference for Go's integer-to-float64 conversion.
func tfRN(f *big.Float) float64 {
	v, _ := f.Float64()
	return v
}

// tfValues returns the float64 value of every slot of a numeric array
// (through math/big for integers) and whether it is valid, using only the
// arrays' public per-slot accessors.
func tfValues(t *testing.T, arr arrow.Array) ([]float64, []bool) {
	t.Helper()
	n := arr.Len()
	vals, valid := make([]float64, n), make([]bool, n)
	for i := range n {
		valid[i] = arr.IsValid(i)
		switch a := arr.(type) {
		case *array.Int8:
			vals[i] = tfRN(new(big.Float).SetInt64(int64(a.Value(i))))
		case *array.Int16:
			vals[i] = tfRN(new(big.Float).SetInt64(int64(a.Value(i))))
		case *array.Int32:
			vals[i] = tfRN(new(big.Float).SetInt64(int64(a.Value(i))))
		case *array.Int64:
			vals[i] = tfRN(new(big.Float).SetInt64(a.Value(i)))
		case *array.Uint8:
			vals[i] = tfRN(new(big.Float).SetUint64(uint64(a.Value(i))))
		case *array.Uint16:
			vals[i] = tfRN(new(big.Float).SetUint64(uint64(a.Value(i))))
		case *array.Uint32:
			vals[i] = tfRN(new(big.Float).SetUint64(uint64(a.Value(i))))
		case *array.Uint64:
			vals[i] = tfRN(new(big.Float).SetUint64(a.Value(i)))
		case *array.Float32:
			vals[i] = float64(a.Value(i)) // widening is exact
		case *array.Float64:
			vals[i] = a.Value(i)
		default:
			t.Fatalf("unexpected type %s", arr.DataType())
		}
	}
	return vals, valid
}

// tfInputs builds one array of every supported type with extremes, values
// beyond 2^53, NaN, infinities, -0 and subnormals where the type has them.
func tfInputs(mem memory.Allocator, r *rand.Rand) []arrow.Array {
	const n = 67
	ints := func(lo, hi int64, extremes ...int64) []int64 {
		v := append([]int64{}, extremes...)
		for len(v) < n {
			v = append(v, lo+int64(r.Uint64N(uint64(hi-lo))))
		}
		return v
	}
	i8, i16, i32, i64 := make([]int8, 0, n), make([]int16, 0, n), make([]int32, 0, n), make([]int64, 0, n)
	for _, x := range ints(math.MinInt8, math.MaxInt8, math.MinInt8, math.MaxInt8, 0, -1) {
		i8 = append(i8, int8(x))
	}
	for _, x := range ints(math.MinInt16, math.MaxInt16, math.MinInt16, math.MaxInt16, 0) {
		i16 = append(i16, int16(x))
	}
	for _, x := range ints(math.MinInt32, math.MaxInt32, math.MinInt32, math.MaxInt32, 0) {
		i32 = append(i32, int32(x))
	}
	i64 = append(i64, math.MinInt64, math.MaxInt64, 1<<53+1, -(1<<53 + 3), 1<<62+1<<9+1, 0)
	for len(i64) < n {
		i64 = append(i64, int64(r.Uint64()))
	}
	u8, u16, u32, u64 := []uint8{0, math.MaxUint8}, []uint16{0, math.MaxUint16}, []uint32{0, math.MaxUint32}, []uint64{0, math.MaxUint64, 1<<53 + 1, 1<<63 + 1<<10 + 1}
	for len(u8) < n {
		u8, u16, u32, u64 = append(u8, uint8(r.Uint32())), append(u16, uint16(r.Uint32())), append(u32, r.Uint32()), append(u64, r.Uint64())
	}
	specials := []float64{math.NaN(), math.Inf(1), math.Inf(-1), math.Copysign(0, -1), 0, 5e-324, -2.5e-310, math.MaxFloat64, -math.MaxFloat64, 1e-320}
	f64 := append([]float64{}, specials...)
	f32 := []float32{float32(math.NaN()), float32(math.Inf(1)), float32(math.Inf(-1)), float32(math.Copysign(0, -1)), math.SmallestNonzeroFloat32, math.MaxFloat32, -math.MaxFloat32}
	for len(f64) < n {
		f64 = append(f64, r.NormFloat64()*math.Pow(10, float64(r.IntN(20)-10)))
	}
	for len(f32) < n {
		f32 = append(f32, float32(r.NormFloat64()*100))
	}
	return []arrow.Array{
		tfMake[int8](array.NewInt8Builder(mem), i8),
		tfMake[int16](array.NewInt16Builder(mem), i16),
		tfMake[int32](array.NewInt32Builder(mem), i32),
		tfMake[int64](array.NewInt64Builder(mem), i64),
		tfMake[uint8](array.NewUint8Builder(mem), u8),
		tfMake[uint16](array.NewUint16Builder(mem), u16),
		tfMake[uint32](array.NewUint32Builder(mem), u32),
		tfMake[uint64](array.NewUint64Builder(mem), u64),
		tfMake[float32](array.NewFloat32Builder(mem), f32),
		tfMake[float64](array.NewFloat64Builder(mem), f64),
	}
}

// TestTransform checks Transform against Forward value by value for every
// input type, on whole arrays and on slices at bit offsets 3 and 13 (the
// validity bitmap is copied) and 8 (it is shared), with nulls, NaN,
// infinities and -0. Input values go through math/big rather than Go's
// conversions, and float32 output is compared with math/big's rounding of
// the float64 result (round once, ties to even).
func TestTransform(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)

	r := rand.New(rand.NewPCG(42, 1))
	inputs := tfInputs(mem, r)
	defer func() {
		for _, a := range inputs {
			a.Release()
		}
	}()
	params := []stats.Params{
		{Method: stats.ZScore, Options: stats.Options{Std: stats.StdPopulation}, Center: -12.5, Scale: 3.1},
		{Method: stats.MaxAbs, Center: 0, Scale: 9.2e18},
		{Method: stats.MinMax, Options: stats.Options{RangeMin: 0, RangeMax: 1}, Center: 1e-310, Scale: 7e-300},
	}
	for _, whole := range inputs {
		for _, cut := range [][2]int64{{0, int64(whole.Len())}, {3, 60}, {8, 67}, {13, 14}, {5, 5}} {
			arr := array.NewSlice(whole, cut[0], cut[1])
			want, valid := tfValues(t, arr)
			for _, p := range params {
				for _, as32 := range []bool{false, true} {
					name := fmt.Sprintf("%s[%d:%d] %s f32=%v", arr.DataType(), cut[0], cut[1], p.Method, as32)
					out, err := stats.Transform(mem, arr, p, as32)
					if err != nil {
						t.Fatalf("%s: %v", name, err)
					}
					tfCheckForward(t, name, out, p, want, valid, as32)
					out.Release()
				}
			}
			arr.Release()
		}
	}
}

func tfCheckForward(t *testing.T, name string, out arrow.Array, p stats.Params, in []float64, valid []bool, as32 bool) {
	t.Helper()
	if out.Len() != len(in) || out.Data().Offset() != 0 {
		t.Fatalf("%s: length %d offset %d, want %d 0", name, out.Len(), out.Data().Offset(), len(in))
	}
	nulls := 0
	for i, x := range in {
		if out.IsNull(i) != !valid[i] {
			t.Errorf("%s: slot %d null %v, want %v", name, i, out.IsNull(i), !valid[i])
		}
		if !valid[i] {
			nulls++
			continue
		}
		y := p.Forward(x)
		if as32 {
			o, ok := out.(*array.Float32)
			if !ok {
				t.Fatalf("%s: output type %s, want float32", name, out.DataType())
			}
			want, _ := new(big.Float).SetFloat64(y).Float32()
			if math.IsNaN(y) {
				if !math.IsNaN(float64(o.Value(i))) {
					t.Errorf("%s: slot %d (%v) = %v, want NaN", name, i, x, o.Value(i))
				}
				continue
			}
			if math.Float32bits(o.Value(i)) != math.Float32bits(want) {
				t.Errorf("%s: slot %d (%v) = %v, want %v", name, i, x, o.Value(i), want)
			}
			continue
		}
		o, ok := out.(*array.Float64)
		if !ok {
			t.Fatalf("%s: output type %s, want float64", name, out.DataType())
		}
		if !scSame(o.Value(i), y) {
			t.Errorf("%s: slot %d (%v) = %v, want %v", name, i, x, o.Value(i), y)
		}
		if math.IsNaN(x) != math.IsNaN(o.Value(i)) {
			t.Errorf("%s: slot %d: NaN not preserved (%v -> %v)", name, i, x, o.Value(i))
		}
	}
	if out.NullN() != nulls {
		t.Errorf("%s: NullN %d, want %d", name, out.NullN(), nulls)
	}
}

// TestTransformJSON uses the JSON fixture style of the Arrow Go tests: the
// expected values are hand-derived from (x - 10) / 4.
func TestTransformJSON(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)

	arr, _, err := array.FromJSON(mem, arrow.PrimitiveTypes.Int32, strings.NewReader(`[2, null, 10, 16, null, 11]`))
	if err != nil {
		t.Fatal(err)
	}
	defer arr.Release()
	p := stats.Params{Method: stats.MeanNorm, Center: 10, Scale: 4}
	out, err := stats.Transform(mem, arr, p, false)
	if err != nil {
		t.Fatal(err)
	}
	defer out.Release()
	want := `[-2,null,0,1.5,null,0.25]`
	if got, _ := out.(*array.Float64).MarshalJSON(); string(got) != want {
		t.Errorf("Transform = %s, want %s", got, want)
	}
}

// TestTransformOutlivesInput releases the input before reading the output:
// the output must hold its own references to every buffer it shares.
func TestTransformOutlivesInput(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)

	p := stats.Params{Method: stats.ZScore, Center: 1, Scale: 2}
	for _, off := range []int64{0, 8, 3} {
		whole := tfMake[float64](array.NewFloat64Builder(mem), []float64{0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16, 17})
		arr := array.NewSlice(whole, off, 18)
		whole.Release()
		out, err := stats.Transform(mem, arr, p, false)
		arr.Release()
		if err != nil {
			t.Fatal(err)
		}
		o := out.(*array.Float64)
		for i := range o.Len() {
			x := float64(int64(i) + off)
			if valid := int(x)%5 != 0 && int(x) != 1; o.IsValid(i) != valid {
				t.Errorf("offset %d: slot %d valid %v, want %v", off, i, o.IsValid(i), valid)
			} else if valid && o.Value(i) != (x-1)/2 {
				t.Errorf("offset %d: slot %d = %v, want %v", off, i, o.Value(i), (x-1)/2)
			}
		}
		out.Release()
	}
}

func TestTransformRejects(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)

	good := stats.Params{Method: stats.ZScore, Center: 0, Scale: 1}
	for _, c := range []struct {
		typ  arrow.DataType
		json string
	}{
		{arrow.BinaryTypes.String, `["a", null]`},
		{arrow.FixedWidthTypes.Boolean, `[true, false]`},
		{arrow.FixedWidthTypes.Date32, `[1, 2]`},
		{arrow.FixedWidthTypes.Float16, `[1.5]`},
	} {
		arr, _, err := array.FromJSON(mem, c.typ, strings.NewReader(c.json))
		if err != nil {
			t.Fatalf("%s: %v", c.typ, err)
		}
		for _, as32 := range []bool{false, true} {
			if out, err := stats.Transform(mem, arr, good, as32); !errors.Is(err, arrow.ErrType) {
				t.Errorf("Transform(%s) = %v, %v; want arrow.ErrType", c.typ, out, err)
			}
		}
		if out, err := stats.InverseTransform(mem, arr, good); !errors.Is(err, arrow.ErrType) {
			t.Errorf("InverseTransform(%s) = %v, %v; want arrow.ErrType", c.typ, out, err)
		}
		arr.Release()
	}

	arr := tfMake[float64](array.NewFloat64Builder(mem), []float64{1, 2, 3})
	defer arr.Release()
	for _, p := range []stats.Params{
		{Method: stats.ZScore, Center: 0, Scale: 0},
		{Method: stats.ZScore, Center: math.NaN(), Scale: 1},
		{Center: 0, Scale: 1},
	} {
		if out, err := stats.Transform(mem, arr, p, false); err == nil {
			out.Release()
			t.Errorf("Transform with %+v succeeded", p)
		}
		if out, err := stats.InverseTransform(mem, arr, p); err == nil {
			out.Release()
			t.Errorf("InverseTransform with %+v succeeded", p)
		}
	}
	// An integer array is not a scaled array.
	ints := tfMake[int32](array.NewInt32Builder(mem), []int32{1, 2})
	defer ints.Release()
	if out, err := stats.InverseTransform(mem, ints, good); !errors.Is(err, arrow.ErrType) {
		t.Errorf("InverseTransform(int32) = %v, %v; want arrow.ErrType", out, err)
	}
}

// TestInverseTransform checks InverseTransform against Inverse value by
// value, and Inverse against y*s + c rounded once, computed with math/big
// (the product exact in 106 bits, the sum exact in 2200, then rounded to
// float64 once: the fused result math.FMA gives on every platform).
func TestInverseTransform(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)

	r := rand.New(rand.NewPCG(9, 9))
	f64 := []float64{math.NaN(), math.Inf(1), math.Inf(-1), math.Copysign(0, -1), 0, 1, -1}
	f32 := []float32{float32(math.NaN()), float32(math.Inf(-1)), 0, 1, -1}
	for len(f64) < 50 {
		f64 = append(f64, r.NormFloat64()*3)
	}
	for len(f32) < 50 {
		f32 = append(f32, float32(r.NormFloat64()*3))
	}
	wholes := []arrow.Array{tfMake[float64](array.NewFloat64Builder(mem), f64), tfMake[float32](array.NewFloat32Builder(mem), f32)}
	p := stats.Params{Method: stats.ZScore, Center: 17.3, Scale: 0.37}
	for _, whole := range wholes {
		for _, cut := range [][2]int64{{0, 50}, {3, 41}, {16, 50}} {
			arr := array.NewSlice(whole, cut[0], cut[1])
			ys, valid := tfValues(t, arr)
			out, err := stats.InverseTransform(mem, arr, p)
			if err != nil {
				t.Fatal(err)
			}
			o := out.(*array.Float64)
			for i, y := range ys {
				if o.IsNull(i) != !valid[i] {
					t.Errorf("%s[%d:%d] slot %d: null %v, want %v", arr.DataType(), cut[0], cut[1], i, o.IsNull(i), !valid[i])
				}
				if !valid[i] {
					continue
				}
				want := p.Inverse(y)
				if isFin(y) {
					prod := new(big.Float).SetPrec(106).Mul(big.NewFloat(y), big.NewFloat(p.Scale))
					want = tfRN(new(big.Float).SetPrec(2200).Add(prod, big.NewFloat(p.Center)))
				}
				if !scSame(o.Value(i), want) {
					t.Errorf("%s[%d:%d] slot %d: Inverse(%v) = %v, want %v", arr.DataType(), cut[0], cut[1], i, y, o.Value(i), want)
				}
			}
			out.Release()
			arr.Release()
		}
		whole.Release()
	}
}

// TestZScoreMatchesGonum compares zscore output with gonum.org/v1/gonum/stat:
// StdScore(x, mean, std) with gonum's own PopMeanStdDev.
//
// On data whose statistics float64 arithmetic gets exactly (pairs m +- d
// with integer m and half-integer d, n a power of two: every sum, the
// division by n, every deviation and its square are exact, and math.Sqrt
// is correctly rounded)
// gonum's mean and std are the correctly rounded values, so the z-scores
// must agree bit for bit.
//
// On general random data gonum's mean and std carry floating-point error
// that grows with n (a priori bound of order n*u for the two-pass
// algorithm, from memory; the error analysis is in Chan, Golub and LeVeque,
// The American Statistician 37(3), 1983), while ours are exact statistics
// rounded once. There the check is |z - z_gonum| <= 4 ulp(z) +
// 4 ulp(mean)/std + |z| n u, and the largest difference is logged in ulps.
func TestZScoreMatchesGonum(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)

	run := func(xs []float64) (ours []float64, gm, gs float64) {
		t.Helper()
		p := scFit(t, stats.ZScore, stats.Options{}, scSummary(xs))
		b := array.NewFloat64Builder(mem)
		defer b.Release()
		b.AppendValues(xs, nil)
		arr := b.NewArray()
		defer arr.Release()
		out, err := stats.Transform(mem, arr, p, false)
		if err != nil {
			t.Fatal(err)
		}
		defer out.Release()
		gm, gs = stat.PopMeanStdDev(xs, nil)
		return append([]float64(nil), out.(*array.Float64).Float64Values()...), gm, gs
	}

	r := rand.New(rand.NewPCG(2024, 6))
	for trial := range 40 {
		n := 1 << (1 + r.IntN(12))
		xs := make([]float64, n)
		m := float64(r.IntN(200001) - 100000)
		for i := range n / 2 {
			d := float64(r.IntN(2001)) / 2
			xs[i], xs[n-1-i] = m+d, m-d
		}
		xs[0], xs[n-1] = m+1001, m-1001 // never constant
		ours, gm, gs := run(xs)
		for i, x := range xs {
			if want := stat.StdScore(x, gm, gs); !scSame(ours[i], want) {
				t.Errorf("exact trial %d: z(%v) = %v, gonum %v", trial, x, ours[i], want)
			}
		}
	}

	const u = 0x1p-53
	worst := 0.0
	for trial := range 30 {
		n := 2 + r.IntN(2000)
		xs := make([]float64, n)
		loc := (r.Float64() - 0.5) * math.Pow(10, float64(r.IntN(12)))
		spread := math.Pow(10, float64(r.IntN(16)-8)) + math.Abs(loc)*1e-6
		for i := range xs {
			switch trial % 3 {
			case 0:
				xs[i] = loc + r.NormFloat64()*spread
			case 1:
				xs[i] = loc + r.ExpFloat64()*spread
			case 2:
				xs[i] = loc + (r.Float64()-0.5)*spread
			}
		}
		ours, gm, gs := run(xs)
		for i, x := range xs {
			want := stat.StdScore(x, gm, gs)
			d := math.Abs(ours[i] - want)
			if tol := 4*scUlp(want) + 4*scUlp(gm)/gs + math.Abs(want)*float64(n)*u; !(d <= tol) {
				t.Errorf("trial %d (n %d): z(%v) = %v, gonum %v (mean %v/%v, std %v/%v)", trial, n, x, ours[i], want, ours[i], gm, gs, gs)
			}
			worst = max(worst, d/(scUlp(want)+scUlp(gm)/gs))
		}
	}
	t.Logf("general data: largest difference from gonum %.1f (ulp(z) + ulp(mean)/std)", worst)
}

func tfBench(b *testing.B, arr arrow.Array, as32 bool) {
	mem := memory.NewGoAllocator()
	p := stats.Params{Method: stats.ZScore, Center: 0.25, Scale: 1.75}
	b.ResetTimer()
	for range b.N {
		out, err := stats.Transform(mem, arr, p, as32)
		if err != nil {
			b.Fatal(err)
		}
		out.Release()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(arr.Len()), "ns/value")
}

const tfBenchN = 1 << 16

func tfBenchFloat64(nulls bool) arrow.Array {
	bld := array.NewFloat64Builder(memory.NewGoAllocator())
	defer bld.Release()
	r := rand.New(rand.NewPCG(1, 2))
	for i := range tfBenchN + 3 {
		if nulls && i%7 == 0 {
			bld.AppendNull()
		} else {
			bld.Append(r.NormFloat64())
		}
	}
	return bld.NewArray()
}

func BenchmarkTransformFloat64(b *testing.B) {
	arr := tfBenchFloat64(false)
	defer arr.Release()
	tfBench(b, arr, false)
}

func BenchmarkTransformFloat64ToFloat32(b *testing.B) {
	arr := tfBenchFloat64(false)
	defer arr.Release()
	tfBench(b, arr, true)
}

// BenchmarkTransformFloat64NullsSliced slices at bit offset 3, so the
// validity bitmap is copied rather than shared.
func BenchmarkTransformFloat64NullsSliced(b *testing.B) {
	whole := tfBenchFloat64(true)
	defer whole.Release()
	arr := array.NewSlice(whole, 3, int64(whole.Len()))
	defer arr.Release()
	tfBench(b, arr, false)
}

func BenchmarkTransformInt64(b *testing.B) {
	bld := array.NewInt64Builder(memory.NewGoAllocator())
	r := rand.New(rand.NewPCG(1, 2))
	for range tfBenchN {
		bld.Append(int64(r.Uint64() >> 8))
	}
	arr := bld.NewArray()
	bld.Release()
	defer arr.Release()
	tfBench(b, arr, false)
}

func BenchmarkInverseTransformFloat64(b *testing.B) {
	arr := tfBenchFloat64(false)
	defer arr.Release()
	mem := memory.NewGoAllocator()
	p := stats.Params{Method: stats.ZScore, Center: 0.25, Scale: 1.75}
	b.ResetTimer()
	for range b.N {
		out, err := stats.InverseTransform(mem, arr, p)
		if err != nil {
			b.Fatal(err)
		}
		out.Release()
	}
	b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/float64(arr.Len()), "ns/value")
}
