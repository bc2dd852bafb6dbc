package stats

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

const benchN = 1 << 20

// benchValid returns nil (no nulls) or a validity mask with about 10% nulls.
func benchValid(rng *rand.Rand, nulls bool) []bool {
	if !nulls {
		return nil
	}
	v := make([]bool, benchN)
	for i := range v {
		v[i] = rng.IntN(10) != 0
	}
	return v
}

func benchArray(b *testing.B, typ string, nulls bool) (arrow.Array, Kind) {
	rng := rand.New(rand.NewPCG(1, 2))
	mem := memory.NewGoAllocator()
	valid := benchValid(rng, nulls)
	switch typ {
	case "float64-1exp": // all values in [1, 2): one exponent, the slot stays in registers
		v := make([]float64, benchN)
		for i := range v {
			v[i] = 1 + rng.Float64()
		}
		return accFloat64Array(mem, v, valid), KindFloat
	case "float64-normal": // N(0, 1): values change exponent every few values
		v := make([]float64, benchN)
		for i := range v {
			v[i] = rng.NormFloat64()
		}
		return accFloat64Array(mem, v, valid), KindFloat
	case "float64-normal100": // N(100, 1): mostly one exponent (64..128)
		v := make([]float64, benchN)
		for i := range v {
			v[i] = 100 + rng.NormFloat64()
		}
		return accFloat64Array(mem, v, valid), KindFloat
	case "float32":
		v := make([]float32, benchN)
		for i := range v {
			v[i] = float32(100 + rng.NormFloat64())
		}
		return accFloat32Array(mem, v, valid), KindFloat
	case "int64":
		v := make([]int64, benchN)
		for i := range v {
			v[i] = int64(rng.Uint64())
		}
		return accInt64Array(mem, v, valid), KindSigned
	case "int32":
		bld := array.NewInt32Builder(mem)
		defer bld.Release()
		v := make([]int32, benchN)
		for i := range v {
			v[i] = int32(rng.Uint32())
		}
		bld.AppendValues(v, valid)
		return bld.NewArray(), KindSigned
	case "uint64":
		v := make([]uint64, benchN)
		for i := range v {
			v[i] = rng.Uint64()
		}
		return accUint64Array(mem, v, valid), KindUnsigned
	}
	b.Fatalf("unknown type %s", typ)
	return nil, 0
}

// BenchmarkAdd reports ns/value for Add on 2^20-value arrays.
func BenchmarkAdd(b *testing.B) {
	for _, typ := range []string{"float64-1exp", "float64-normal100", "float64-normal", "float32", "int64", "int32", "uint64"} {
		for _, nulls := range []bool{false, true} {
			name := typ + "/nonulls"
			if nulls {
				name = typ + "/nulls10pct"
			}
			b.Run(name, func(b *testing.B) {
				arr, kind := benchArray(b, typ, nulls)
				defer arr.Release()
				a := NewAccumulator(kind)
				b.ReportAllocs()
				best := time.Duration(math.MaxInt64)
				for b.Loop() {
					t0 := time.Now()
					if err := a.Add(arr); err != nil {
						b.Fatal(err)
					}
					best = min(best, time.Since(t0))
				}
				b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N)/benchN, "ns/value")
				// The machine is shared: the fastest pass is the least
				// disturbed estimate of the loop's own cost.
				b.ReportMetric(float64(best.Nanoseconds())/benchN, "min-ns/value")
			})
		}
	}
}

// BenchmarkSummary: finalising one column (fold, rationals, integer roots).
func BenchmarkSummary(b *testing.B) {
	arr, _ := benchArray(b, "float64-normal", false)
	defer arr.Release()
	a := NewAccumulator(KindFloat)
	if err := a.Add(arr); err != nil {
		b.Fatal(err)
	}
	var s Summary
	for b.Loop() {
		s = a.Summary()
	}
	if math.IsNaN(s.Mean) {
		b.Fatal("NaN mean")
	}
}

// BenchmarkMarshalMerge: encode a state, decode it and merge it into a
// live one, as pass one does per partition.
func BenchmarkMarshalMerge(b *testing.B) {
	arr, _ := benchArray(b, "float64-normal", false)
	defer arr.Release()
	a, dst := NewAccumulator(KindFloat), NewAccumulator(KindFloat)
	if err := a.Add(arr); err != nil {
		b.Fatal(err)
	}
	for b.Loop() {
		enc, err := a.MarshalBinary()
		if err != nil {
			b.Fatal(err)
		}
		var d Accumulator
		if err := d.UnmarshalBinary(enc); err != nil {
			b.Fatal(err)
		}
		if err := dst.Merge(&d); err != nil {
			b.Fatal(err)
		}
	}
}
