package stats

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// valuesCase builds one column of random rows for TestAddValuesMatchesAdd:
// the Arrow array Add takes, and the same rows cut into batches of dense
// non-null values and null counts, as a Parquet reader hands them out.
type valuesCase struct {
	name    string
	kind    Kind
	arr     arrow.Array
	batches []any
	nulls   []int
}

// denseBatches cuts vals (valid marks non-nulls) at random points.
func denseBatches[T any](rng *rand.Rand, vals []T, valid []bool) (batches []any, nulls []int) {
	for lo := 0; lo < len(vals); {
		hi := min(len(vals), lo+rng.IntN(300))
		var dense []T
		n := 0
		for i := lo; i < hi; i++ {
			if valid[i] {
				dense = append(dense, vals[i])
			} else {
				n++
			}
		}
		batches, nulls = append(batches, dense), append(nulls, n)
		lo = hi
	}
	return batches, nulls
}

func newValuesCase[T any](rng *rand.Rand, name string, kind Kind, b interface {
	AppendValues([]T, []bool)
	NewArray() arrow.Array
	Release()
}, gen func() T) valuesCase {
	const n = 2000
	vals := make([]T, n)
	valid := make([]bool, n)
	for i := range vals {
		vals[i] = gen()
		valid[i] = i%500 >= 100 || rng.IntN(3) == 0 // a long all-null stretch too
		if i%500 < 50 {
			valid[i] = false
		}
	}
	b.AppendValues(vals, valid)
	arr := b.NewArray()
	b.Release()
	batches, nulls := denseBatches(rng, vals, valid)
	return valuesCase{name, kind, arr, batches, nulls}
}

// TestAddValuesMatchesAdd: rows fed as dense batches leave exactly the
// state (MarshalBinary bytes) that Add leaves for the same rows as an
// Arrow array, for every accepted Go type, including NaN, infinities,
// signed zeros, subnormals and the integer extremes.
func TestAddValuesMatchesAdd(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rng := rand.New(rand.NewPCG(43, 47))
	specials := []float64{math.NaN(), math.Inf(1), math.Inf(-1), math.Copysign(0, -1), 0,
		math.SmallestNonzeroFloat64, -5e-310, math.MaxFloat64, -math.MaxFloat64}
	f64 := func() float64 {
		if rng.IntN(20) == 0 {
			return specials[rng.IntN(len(specials))]
		}
		return math.Ldexp(rng.NormFloat64(), rng.IntN(40)-20)
	}
	cases := []valuesCase{
		newValuesCase(rng, "float64", KindFloat, array.NewFloat64Builder(mem), f64),
		newValuesCase(rng, "float32", KindFloat, array.NewFloat32Builder(mem), func() float32 { return float32(f64()) }),
		newValuesCase(rng, "int8", KindSigned, array.NewInt8Builder(mem), func() int8 { return int8(rng.Uint32()) }),
		newValuesCase(rng, "int16", KindSigned, array.NewInt16Builder(mem), func() int16 { return int16(rng.Uint32()) }),
		newValuesCase(rng, "int32", KindSigned, array.NewInt32Builder(mem), func() int32 { return int32(rng.Uint32()) }),
		newValuesCase(rng, "int64", KindSigned, array.NewInt64Builder(mem), func() int64 {
			return []int64{math.MinInt64, math.MaxInt64, int64(rng.Uint64())}[rng.IntN(3)]
		}),
		newValuesCase(rng, "uint8", KindUnsigned, array.NewUint8Builder(mem), func() uint8 { return uint8(rng.Uint32()) }),
		newValuesCase(rng, "uint16", KindUnsigned, array.NewUint16Builder(mem), func() uint16 { return uint16(rng.Uint32()) }),
		newValuesCase(rng, "uint32", KindUnsigned, array.NewUint32Builder(mem), rng.Uint32),
		newValuesCase(rng, "uint64", KindUnsigned, array.NewUint64Builder(mem), func() uint64 {
			return []uint64{math.MaxUint64, 0, rng.Uint64()}[rng.IntN(3)]
		}),
	}
	for _, c := range cases {
		want := NewAccumulator(c.kind)
		if err := want.Add(c.arr); err != nil {
			t.Fatal(err)
		}
		c.arr.Release()
		got := NewAccumulator(c.kind)
		for i, b := range c.batches {
			if err := got.AddValues(b, c.nulls[i]); err != nil {
				t.Fatalf("%s: %v", c.name, err)
			}
		}
		if !accSameBytes(t, got, want) {
			t.Errorf("%s: AddValues state differs from Add's: %+v, want %+v", c.name, got.Summary(), want.Summary())
		}
	}
}

func TestAddValuesErrors(t *testing.T) {
	a := NewAccumulator(KindFloat)
	if err := a.AddValues([]int32{1}, 0); !errors.Is(err, ErrKindMismatch) {
		t.Errorf("int32 into float: %v, want ErrKindMismatch", err)
	}
	if err := a.AddValues([]string{"x"}, 0); !errors.Is(err, ErrUnsupportedType) {
		t.Errorf("strings: %v, want ErrUnsupportedType", err)
	}
	if err := a.AddValues([]float64{1}, -1); err == nil {
		t.Error("negative null count accepted")
	}
	if err := NewAccumulator(KindUnsigned).AddValues([]int64{1}, 0); !errors.Is(err, ErrKindMismatch) {
		t.Errorf("int64 into unsigned: %v, want ErrKindMismatch", err)
	}
	full := NewAccumulator(KindFloat)
	full.nulls = math.MaxUint64 - 1
	if err := full.AddValues([]float64{1}, 1); !errors.Is(err, ErrCountOverflow) {
		t.Errorf("overflow: %v, want ErrCountOverflow", err)
	}
	if err := full.AddValues([]float64{1, 2}, 0); !errors.Is(err, ErrCountOverflow) {
		t.Errorf("overflow: %v, want ErrCountOverflow", err)
	}
	if got := a.Summary(); got.Count != 0 || got.Nulls != 0 {
		t.Errorf("failed adds changed the state: %+v", got)
	}
}
