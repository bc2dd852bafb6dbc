package stats

import (
	"bytes"
	"encoding/binary"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// fuzzColumn turns fuzz bytes into a column: data[0] picks the kind, each
// following 8 bytes are one value's bits, and seed picks nulls.
func fuzzColumn(mem memory.Allocator, data []byte, seed uint64) (arrow.Array, Kind) {
	kind := KindFloat
	if len(data) > 0 {
		kind = Kind(data[0]%3) + KindFloat
		data = data[1:]
	}
	n := len(data) / 8
	rng := rand.New(rand.NewPCG(seed, seed>>32))
	valid := make([]bool, n)
	for i := range valid {
		valid[i] = seed&1 == 0 || rng.IntN(4) != 0
	}
	word := func(i int) uint64 { return binary.LittleEndian.Uint64(data[8*i:]) }
	switch kind {
	case KindFloat:
		v := make([]float64, n)
		for i := range v {
			v[i] = math.Float64frombits(word(i))
		}
		return accFloat64Array(mem, v, valid), kind
	case KindSigned:
		v := make([]int64, n)
		for i := range v {
			v[i] = int64(word(i))
		}
		return accInt64Array(mem, v, valid), kind
	default:
		v := make([]uint64, n)
		for i := range v {
			v[i] = word(i)
		}
		return accUint64Array(mem, v, valid), kind
	}
}

func fuzzBytes(kind byte, vals ...uint64) []byte {
	b := []byte{kind}
	for _, v := range vals {
		b = binary.LittleEndian.AppendUint64(b, v)
	}
	return b
}

// FuzzMergeInvariance: random values, a random partitioning into zero-copy
// slices and a random merge tree (with encode/decode on the way) give the
// same encoded state as one accumulator fed the whole column, whichever
// float loop each side used; small columns are also checked against the
// big.Rat reference.
func FuzzMergeInvariance(f *testing.F) {
	nz := math.Float64bits(math.Copysign(0, -1))
	f.Add(fuzzBytes(0, math.Float64bits(1), math.Float64bits(1e100), math.Float64bits(1), math.Float64bits(-1e100)), uint64(1))
	f.Add(fuzzBytes(0, nz, 0, nz, math.Float64bits(math.NaN()), math.Float64bits(math.Inf(-1))), uint64(2))
	f.Add(fuzzBytes(0, math.Float64bits(math.MaxFloat64), math.Float64bits(-math.MaxFloat64), 1, 0x8000000000000001), uint64(3))
	f.Add(fuzzBytes(1, 1<<63, 1<<63-1, 0, 1<<63), uint64(4))
	f.Add(fuzzBytes(2, math.MaxUint64, math.MaxUint64, 0, 1<<53+1), uint64(5))
	f.Add([]byte{}, uint64(0))
	f.Add(fuzzBytes(0, math.Float64bits(0.1), math.Float64bits(-3e-320), math.Float64bits(7e300), 0), uint64(1<<40|2<<50))
	f.Add(fuzzBytes(0, math.Float64bits(2), math.Float64bits(3), math.Float64bits(-2.5), math.Float64bits(math.NaN())), uint64(2<<40|1<<50))
	f.Fuzz(func(t *testing.T, data []byte, seed uint64) {
		mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
		defer mem.AssertSize(t, 0)
		arr, kind := fuzzColumn(mem, data, seed)
		defer arr.Release()
		// The whole column and the parts may go through different float
		// loops (adaptive, runs only, direct only): same state required.
		defer func() { floatLoop = loopAdaptive }()
		floatLoop = int(seed>>40) % 3
		whole := NewAccumulator(kind)
		if err := whole.Add(arr); err != nil {
			t.Fatal(err)
		}
		floatLoop = int(seed>>50) % 3
		want, err := whole.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		rng := rand.New(rand.NewPCG(seed, 99))
		cuts := accRandomCuts(rng, arr.Len(), 1+rng.IntN(12))
		merged := accMergeShuffled(t, accPartsOf(t, arr, kind, cuts), rng)
		got, err := merged.MarshalBinary()
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got, want) {
			t.Fatalf("cuts %v: merged state differs from the whole-column state", cuts)
		}
		sum := whole.Summary()
		accCheckSummary(t, "decoded", accRoundTrip(t, whole).Summary(), sum)
		if arr.Len() <= 64 {
			accCheckSummary(t, "reference", sum, refArray(t, arr))
		}
	})
}

// FuzzUnmarshal: arbitrary bytes never panic, and an accepted input
// re-encodes to exactly the same bytes and yields a sane Summary. Each
// input is tried as is and again with its CRC recomputed, so the fuzzer
// also reaches the layout and consistency checks behind the checksum.
func FuzzUnmarshal(f *testing.F) {
	mem := memory.NewGoAllocator()
	for _, vals := range [][]float64{{}, {1.5, -2, 1e300, 5e-324}, {math.NaN()}, {7}, {-1, 1}} {
		arr := accFloat64Array(mem, vals, nil)
		a := NewAccumulator(KindFloat)
		_ = a.Add(arr)
		arr.Release()
		b, _ := a.MarshalBinary()
		f.Add(b)
		f.Add(b[:len(b)-4])
	}
	for _, k := range []Kind{KindSigned, KindUnsigned} {
		b := array.NewInt64Builder(mem)
		b.AppendValues([]int64{3, -5, math.MaxInt64}, nil)
		arr := b.NewArray()
		b.Release()
		if k == KindUnsigned {
			arr.Release()
			arr = accUint64Array(mem, []uint64{math.MaxUint64, 2, 0}, nil)
		}
		a := NewAccumulator(k)
		_ = a.Add(arr)
		arr.Release()
		e, _ := a.MarshalBinary()
		f.Add(e)
		f.Add(e[:len(e)-4])
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		for _, in := range [][]byte{data, accWithCRC(data)} {
			var a Accumulator
			if err := a.UnmarshalBinary(in); err != nil {
				continue
			}
			out, err := a.MarshalBinary()
			if err != nil {
				t.Fatalf("accepted state does not encode: %v", err)
			}
			if !bytes.Equal(out, in) {
				t.Fatalf("accepted input re-encodes differently:\n in %x\nout %x", in, out)
			}
			s := a.Summary()
			if s.Rows != s.Count+s.Nulls+s.NaNs+s.PosInf+s.NegInf {
				t.Fatalf("rows %d do not add up: %+v", s.Rows, s)
			}
			if s.Count > 0 {
				if !(s.Min <= s.Max) || !(s.VarPopulation >= 0) || !(s.StdPopulation >= 0) || math.IsNaN(s.Mean) {
					t.Fatalf("accepted state has an inconsistent summary: %+v", s)
				}
				if !(s.Min <= s.Mean && s.Mean <= s.Max) {
					t.Fatalf("mean %v outside [%v, %v]", s.Mean, s.Min, s.Max)
				}
			}
			if err := a.Merge(&a); err != nil && s.Rows <= math.MaxUint64/2 {
				t.Fatalf("self-merge of an accepted state: %v", err)
			}
		}
	})
}
