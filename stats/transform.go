package stats

import (
	"fmt"
	"math"
	"math/big"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/bitutil"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// InverseTransform maps a float64 or float32 array of scaled values back to
// original units with Inverse, into a new float64 array allocated from mem.
// Nulls stay null, NaN stays NaN. Any other input type is an error wrapping
// arrow.ErrType.
func InverseTransform(mem memory.Allocator, arr arrow.Array, p Params) (arrow.Array, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	switch arr.(type) {
	case *array.Float64, *array.Float32:
	default:
		return nil, fmt.Errorf("%w: cannot invert scaled values of type %s", arrow.ErrType, arr.DataType())
	}
	n := arr.Len()
	values := memory.NewResizableBuffer(mem)
	defer values.Release()
	values.Resize(arrow.Float64Traits.BytesRequired(n))
	dst := arrow.Float64Traits.CastFromBytes(values.Bytes())
	switch a := arr.(type) {
	case *array.Float64:
		tfInverse(dst, a.Float64Values(), p.Center, p.Scale)
	case *array.Float32:
		tfInverse(dst, a.Float32Values(), p.Center, p.Scale)
	}
	return tfFinish(mem, arr, arrow.PrimitiveTypes.Float64, values), nil
}

func tfTransform(mem memory.Allocator, arr arrow.Array, p Params, asFloat32 bool) (arrow.Array, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	if _, ok := KindOf(arr.DataType()); !ok {
		return nil, fmt.Errorf("%w: cannot scale values of type %s", arrow.ErrType, arr.DataType())
	}
	n := arr.Len()
	values := memory.NewResizableBuffer(mem)
	defer values.Release()
	if asFloat32 {
		values.Resize(arrow.Float32Traits.BytesRequired(n))
		tfForwardArray(arrow.Float32Traits.CastFromBytes(values.Bytes()), arr, p.Center, p.Scale)
		return tfFinish(mem, arr, arrow.PrimitiveTypes.Float32, values), nil
	}
	values.Resize(arrow.Float64Traits.BytesRequired(n))
	tfForwardArray(arrow.Float64Traits.CastFromBytes(values.Bytes()), arr, p.Center, p.Scale)
	return tfFinish(mem, arr, arrow.PrimitiveTypes.Float64, values), nil
}

// tfForwardArray scales every slot of arr (one of the numeric types KindOf
// accepts) into dst; the type switch runs once per array, not per value.
func tfForwardArray[D float32 | float64](dst []D, arr arrow.Array, c, s float64) {
	switch a := arr.(type) {
	case *array.Int8:
		tfForward(dst, a.Int8Values(), c, s)
	case *array.Int16:
		tfForward(dst, a.Int16Values(), c, s)
	case *array.Int32:
		tfForward(dst, a.Int32Values(), c, s)
	case *array.Int64:
		tfForward(dst, a.Int64Values(), c, s)
	case *array.Uint8:
		tfForward(dst, a.Uint8Values(), c, s)
	case *array.Uint16:
		tfForward(dst, a.Uint16Values(), c, s)
	case *array.Uint32:
		tfForward(dst, a.Uint32Values(), c, s)
	case *array.Uint64:
		tfForward(dst, a.Uint64Values(), c, s)
	case *array.Float32:
		tfForward(dst, a.Float32Values(), c, s)
	case *array.Float64:
		tfForward(dst, a.Float64Values(), c, s)
	}
}

// tfNumber is every element type Transform reads. Each instantiation below
// gets its own machine code (one GC shape per basic type), so the loops
// carry no interface or dictionary call per value.
type tfNumber interface {
	~int8 | ~int16 | ~int32 | ~int64 |
		~uint8 | ~uint16 | ~uint32 | ~uint64 |
		~float32 | ~float64
}

// Bounds of the fast path of tfForward (see there).
const (
	tfHiMin = 0x1p-966 // |x - c| at least this: the division remainder is exact
	tfQMin  = 0x1p-922 // |q| at least this: q, q*2^-100 and the correction are normal
)

// tfForward writes Forward(float64(src[i])) into dst[i]: the exact
// (x - c) / s rounded once to float64, and then, for a float32 dst, rounded
// once more from that float64 to float32. Params.Forward is its one-value
// case.
//
// The fast path, for |q| in [2^-922, MaxFloat64] and |x - c| >= 2^-966
// (u = 2^-53, fl an IEEE 754 operation rounded to nearest):
//
//  1. hi + lo = x - c exactly: hi = fl(x - c) and lo its rounding error by
//     TwoSum, six additions and no branch (Knuth, TAOCP vol. 2, 3rd ed.,
//     section 4.2.2, Theorem B; from memory). It is exact when hi is
//     finite, and its other additions cannot overflow then (Boldo,
//     Graillat and Muller, "On the robustness of the 2Sum and Fast2Sum
//     algorithms", ACM TOMS 44(1), 2017; from memory);
//     TestTransformCorrectlyRounded probes values near MaxFloat64.
//  2. q = fl(hi / s), and r = hi - q*s exactly with one math.FMA: the
//     remainder of a quotient rounded to nearest is a float64 unless it
//     underflows (Boldo and Daumas, "Representable correcting terms for
//     possibly underflowing floating point operations", ARITH 16, 2003;
//     from memory), and |hi| >= 2^-966 keeps it clear of underflow.
//  3. The exact quotient is q + d with d = (r + lo) / s, |d| < 1.5 ulp(q).
//     corr = fl(fl(r + lo) / s) has |corr - d| <= (2u + u^2)|d| + 2^-1075,
//     below 2^-103 |q| (the standard model of floating-point arithmetic:
//     Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed.,
//     section 2.2).
//  4. Rounding test, after Ziv (ACM TOMS 17(3), 1991; from memory): with
//     b = |q| 2^-100, fl(corr - b) <= d <= fl(corr + b), and rounding to
//     nearest is monotone, so when fl(q + fl(corr - b)) equals
//     fl(q + fl(corr + b)) that value is RN(q + d), the correctly rounded
//     quotient. Otherwise a rounding boundary lies within 2^-46 ulp(q) of
//     the exact quotient and the slow path decides (exact midpoints always
//     get there).
//
// Everything else (zero, NaN, infinities, an overflowing x - c, tiny or
// huge quotients, undecided rounding) goes to tfForwardSlow. The explicit
// float64 conversions forbid the compiler to fuse any step (The Go
// Programming Language Specification, Arithmetic operators); math.FMA is
// exactly one rounding on every platform. The steps are written out in the
// loop rather than called, so the fast path makes no call per value.
func tfForward[T tfNumber, D float32 | float64](dst []D, src []T, c, s float64) {
	dst = dst[:len(src)]
	for i, v := range src {
		x := float64(v)
		hi := float64(x - c)
		q := float64(hi / s)
		if a := math.Abs(q); a >= tfQMin && a <= math.MaxFloat64 && math.Abs(hi) >= tfHiMin {
			z := float64(hi - x)
			lo := float64(x-float64(hi-z)) - float64(c+z)
			corr := float64(float64(math.FMA(-q, s, hi)+lo) / s)
			b := float64(a * 0x1p-100)
			if y := float64(q + float64(corr-b)); y == float64(q+float64(corr+b)) {
				dst[i] = D(y)
				continue
			}
		}
		dst[i] = D(tfForwardSlow(x, c, s))
	}
}

// tfForwardSlow is tfForward's path for the values its fast path cannot
// decide. It tries, in order:
//
//   - zero, NaN or infinite x - c, or Params that fail Validate: the IEEE
//     754 quotient float64(x-c) / s;
//   - x - c exact (lo == 0, which includes c == 0): a single IEEE 754
//     division of it is already correctly rounded;
//   - inside the fast path's range, where the rounding test failed: if
//     r + lo and (r + lo) / s are both exact (checked with TwoSum and
//     math.FMA), the quotient is exactly q + corr and one IEEE 754
//     addition rounds it correctly, ties included. Exact ties (the
//     quotient on a midpoint) always pass this check: the midpoint minus q
//     is then ± a power of two, times s a float64;
//   - otherwise the exact rational (x - c) / s from math/big, rounded to
//     nearest by big.Rat.Float64 (correctly rounded, subnormals included;
//     a result that underflows to zero keeps its sign).
func tfForwardSlow(x, c, s float64) float64 {
	hi := x - c
	if hi == 0 || !scaleFinite(x) || !scaleFinite(c) || !scaleFinite(s) || s == 0 {
		return hi / s
	}
	if !math.IsInf(hi, 0) {
		z := float64(hi - x)
		lo := float64(x-float64(hi-z)) - float64(c+z)
		if lo == 0 {
			return hi / s
		}
		q := float64(hi / s)
		if a := math.Abs(q); a >= tfQMin && a <= math.MaxFloat64 && math.Abs(hi) >= tfHiMin {
			r := math.FMA(-q, s, hi) // exact, as on the fast path
			t := float64(r + lo)
			w := float64(t - r)
			if float64(r-float64(t-w))+float64(lo-w) == 0 { // TwoSum: t == r + lo exactly
				corr := float64(t / s)
				// With corr and s normal and ec + es >= -970, the last bits of
				// corr and s multiply to at least 2^-1074, so corr*s - t is a
				// multiple of 2^-1074 and math.FMA rounds it to 0 only when it
				// is exactly 0.
				ec, es := math.Ilogb(corr), math.Ilogb(s)
				if ec >= -1022 && es >= -1022 && ec+es >= -970 && math.FMA(corr, s, -t) == 0 {
					return q + corr
				}
			}
		}
	}
	r := new(big.Rat).Sub(exactRat(x), exactRat(c))
	y, _ := r.Quo(r, exactRat(s)).Float64()
	return y
}

// tfInverse writes Inverse(float64(src[i])) into dst[i]: math.FMA, one
// rounding on every platform, as in Params.Inverse.
func tfInverse[T float32 | float64](dst []float64, src []T, c, s float64) {
	dst = dst[:len(src)]
	for i, y := range src {
		dst[i] = math.FMA(float64(y), s, c)
	}
}

// tfFinish wraps values into a new array of type dt with the length and
// validity of arr. It does not take over the caller's reference to values.
func tfFinish(mem memory.Allocator, arr arrow.Array, dt arrow.DataType, values *memory.Buffer) arrow.Array {
	validity, nulls := tfValidity(mem, arr)
	if validity != nil {
		defer validity.Release()
	}
	data := array.NewData(dt, arr.Len(), []*memory.Buffer{validity, values}, nil, nulls, 0)
	defer data.Release()
	return array.MakeFromData(data)
}

// tfValidity returns a reference to a validity bitmap for arr's slots at
// offset 0, or nil when arr has no nulls. It shares arr's bitmap when the
// offset allows (0, or a whole number of bytes) and copies it otherwise.
func tfValidity(mem memory.Allocator, arr arrow.Array) (*memory.Buffer, int) {
	nulls := arr.NullN()
	if nulls == 0 {
		return nil, 0
	}
	data := arr.Data()
	src := data.Buffers()[0]
	off, n := data.Offset(), data.Len()
	switch {
	case off == 0:
		src.Retain()
		return src, nulls
	case off%8 == 0:
		return memory.SliceBuffer(src, off/8, int(bitutil.BytesForBits(int64(n)))), nulls
	}
	dst := memory.NewResizableBuffer(mem)
	dst.Resize(int(bitutil.BytesForBits(int64(n))))
	bitutil.CopyBitmap(src.Bytes(), off, n, dst.Bytes(), 0)
	return dst, nulls
}

// TransformValues is Transform for a batch of dense values: it writes
// Forward(float64(src[i])) into dst[i] for every i. src is a []int8 to
// []int64, []uint8 to []uint64, []float32 or []float64; dst is a []float64,
// or a []float32 (each value rounded once from the float64 result), at
// least as long as src. Values equal Transform's bit for bit.
func TransformValues(dst, src any, p Params) error {
	if err := p.Validate(); err != nil {
		return err
	}
	switch d := dst.(type) {
	case []float64:
		return forwardValues(d, src, p)
	case []float32:
		return forwardValues(d, src, p)
	}
	return fmt.Errorf("%w: cannot scale into %T", arrow.ErrType, dst)
}

func forwardValues[D float32 | float64](dst []D, src any, p Params) error {
	c, s := p.Center, p.Scale
	switch v := src.(type) {
	case []int8:
		return forwardInto(dst, v, c, s)
	case []int16:
		return forwardInto(dst, v, c, s)
	case []int32:
		return forwardInto(dst, v, c, s)
	case []int64:
		return forwardInto(dst, v, c, s)
	case []uint8:
		return forwardInto(dst, v, c, s)
	case []uint16:
		return forwardInto(dst, v, c, s)
	case []uint32:
		return forwardInto(dst, v, c, s)
	case []uint64:
		return forwardInto(dst, v, c, s)
	case []float32:
		return forwardInto(dst, v, c, s)
	case []float64:
		return forwardInto(dst, v, c, s)
	}
	return fmt.Errorf("%w: cannot scale values of Go type %T", arrow.ErrType, src)
}

func forwardInto[T tfNumber, D float32 | float64](dst []D, src []T, c, s float64) error {
	if len(dst) < len(src) {
		return fmt.Errorf("%w: %d values into room for %d", arrow.ErrIndex, len(src), len(dst))
	}
	tfForward(dst, src, c, s)
	return nil
}

// InverseValues is InverseTransform for a batch of dense values: it writes
// Inverse(float64(src[i])) into dst[i]. src is a []float64 or []float32;
// dst is at least as long.
func InverseValues(dst []float64, src any, p Params) error {
	if err := p.Validate(); err != nil {
		return err
	}
	n := 0
	switch v := src.(type) {
	case []float64:
		n = len(v)
	case []float32:
		n = len(v)
	default:
		return fmt.Errorf("%w: cannot invert scaled values of Go type %T", arrow.ErrType, src)
	}
	if len(dst) < n {
		return fmt.Errorf("%w: %d values into room for %d", arrow.ErrIndex, n, len(dst))
	}
	switch v := src.(type) {
	case []float64:
		tfInverse(dst, v, p.Center, p.Scale)
	case []float32:
		tfInverse(dst, v, p.Center, p.Scale)
	}
	return nil
}
