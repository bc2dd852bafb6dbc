package stats

import (
	"errors"
	"fmt"
	"math"
	"math/big"
	"math/bits"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
)

// Kind is the arithmetic an Accumulator uses for a column.
type Kind uint8

const (
	KindFloat    Kind = iota + 1 // float32 (widened exactly) and float64
	KindSigned                   // int8, int16, int32, int64
	KindUnsigned                 // uint8, uint16, uint32, uint64
)

// String names the kind for error messages.
func (k Kind) String() string {
	switch k {
	case KindFloat:
		return "float"
	case KindSigned:
		return "signed integer"
	case KindUnsigned:
		return "unsigned integer"
	}
	return fmt.Sprintf("kind(%d)", uint8(k))
}

func (k Kind) valid() bool { return k >= KindFloat && k <= KindUnsigned }

// Sentinel errors, for errors.Is.
var (
	// ErrKindMismatch: an array or a state of one kind was given to an
	// accumulator of another.
	ErrKindMismatch = errors.New("kind mismatch")
	// ErrUnsupportedType: the Arrow type is not one KindOf accepts.
	ErrUnsupportedType = errors.New("unsupported column type")
	// ErrCountOverflow: a counter would pass 2^64 - 1.
	ErrCountOverflow = errors.New("row count overflows uint64")
	// ErrCorruptState: UnmarshalBinary rejected its input.
	ErrCorruptState = errors.New("corrupt accumulator state")
)

// KindOf reports the accumulator kind for an Arrow type, and false for
// types lakescale does not scale (decimal, float16, temporal, nested and
// extension types among them).
func KindOf(t arrow.DataType) (Kind, bool) {
	if t == nil {
		return 0, false
	}
	switch t.ID() {
	case arrow.FLOAT32, arrow.FLOAT64:
		return KindFloat, true
	case arrow.INT8, arrow.INT16, arrow.INT32, arrow.INT64:
		return KindSigned, true
	case arrow.UINT8, arrow.UINT16, arrow.UINT32, arrow.UINT64:
		return KindUnsigned, true
	}
	return 0, false
}

// Accumulator holds the exact running state of one column.
//
// The state is: the counters (finite values, nulls, NaN, +Inf, -Inf, all
// uint64), the smallest and largest finite value, and the exact sums
// S = Σx and Q = Σx² as integers. For KindFloat they are kept scaled,
// S·2^1074 and Q·2^2148, which are integers because every finite float64
// is a multiple of 2^-1074; integer kinds use scale 1 and never pass a
// value through float64. No floating-point arithmetic touches the sums, so
// the state does not depend on the order in which values arrive: Merge is
// associative and commutative, and merging the states of any partitioning
// of a column, in any order, gives exactly the state (and the
// MarshalBinary bytes) of one accumulator fed every value.
//
// While values are being added, KindFloat sums live in per-exponent
// fixed-width integer slots (for each biased exponent, 128-bit sums of the
// integer significands m and a 192-bit sum of m²), after R. M. Neal, "Fast
// exact summation using small and large superaccumulators",
// arXiv:1505.05571 (2015). Integer kinds keep a 128-bit sum and a 192-bit
// sum of squares. A decoded state holds S and Q as big.Int; the two forms
// are folded together on Marshal, Merge and Summary, so a decoded state and
// a live one merge freely.
//
// NaN and ±Inf are counted and excluded from the moments, min and max.
// Min and max compare order-preserving integer keys, and -0 orders below
// +0: the min of {-0, +0} is -0 and the max is +0, whatever the
// partitioning.
//
// The zero value has no kind: Add, Merge and MarshalBinary fail on it, but
// it can be the target of UnmarshalBinary. An Accumulator is not safe for
// concurrent use.
type Accumulator struct {
	kind Kind

	// n counts finite values; rows = n + nulls + nans + posInf + negInf.
	n, nulls, nans, posInf, negInf uint64

	// minKey and maxKey are order-preserving keys of the extremes (see
	// floatKey, signedKey). Empty: minKey = MaxUint64, maxKey = 0, the
	// identities of min and max.
	minKey, maxKey uint64

	fs *floatSlots // KindFloat live sums, allocated on first use
	w  wideSums    // integer kinds' live sums

	// s and q are the folded part of S and Q (decoded or merged-in state),
	// at the kind's scale.
	s, q big.Int
}

// wideSums is an integer column's live state: sum as 128-bit two's
// complement (KindSigned) or unsigned (KindUnsigned), s1:s0, and the sum of
// squares as 192-bit unsigned, q2:q1:q0. Neither can wrap: at most 2^64 - 1
// values of magnitude at most 2^64 are ever added.
type wideSums struct {
	s0, s1     uint64
	q0, q1, q2 uint64
}

// NewAccumulator returns an empty accumulator of kind k. With a k that is
// not one of the Kind constants, every later Add, Merge and MarshalBinary
// fails.
func NewAccumulator(k Kind) *Accumulator {
	return &Accumulator{kind: k, minKey: math.MaxUint64}
}

// Compact folds the live sums of a KindFloat accumulator into its exact
// integer form and drops their per-exponent slots (128 KiB). The state is
// unchanged: Summary, Merge and MarshalBinary give exactly what they gave
// before, and values may still be added (into new slots). Call it once a
// column's values are in (a file is done), so that keeping one state per
// file costs hundreds of bytes, not the slots; not between batches, where
// the next value would allocate the slots again.
func (a *Accumulator) Compact() {
	if a.fs == nil {
		return
	}
	a.fs.foldInto(&a.s, &a.q)
	a.fs = nil
}

// Footprint is the memory, in bytes, a holds beyond its own struct: the
// live slots of a KindFloat accumulator (128 KiB until Compact) and the
// words of its folded sums.
func (a *Accumulator) Footprint() int {
	n := 8 * (len(a.s.Bits()) + len(a.q.Bits()))
	if a.fs != nil {
		n += nSlots * slotBytes
	}
	return n
}

// Kind reports the accumulator's kind.
func (a *Accumulator) Kind() Kind { return a.kind }

func (a *Accumulator) rows() (uint64, bool) {
	r, c1 := bits.Add64(a.n, a.nulls, 0)
	r, c2 := bits.Add64(r, a.nans, 0)
	r, c3 := bits.Add64(r, a.posInf, 0)
	r, c4 := bits.Add64(r, a.negInf, 0)
	return r, c1|c2|c3|c4 == 0
}

// Add feeds every slot of arr (nulls, NaN and infinities are counted,
// finite values enter the moments). arr's type must be of a's kind.
func (a *Accumulator) Add(arr arrow.Array) error {
	k, ok := KindOf(arr.DataType())
	if !ok {
		return fmt.Errorf("add %s array: %w", arr.DataType(), ErrUnsupportedType)
	}
	if k != a.kind {
		return fmt.Errorf("add %s array to %s accumulator: %w", arr.DataType(), a.kind, ErrKindMismatch)
	}
	rows, _ := a.rows()
	if _, c := bits.Add64(rows, uint64(arr.Len()), 0); c != 0 {
		return fmt.Errorf("add %s array: %w", arr.DataType(), ErrCountOverflow)
	}
	nulls := arr.NullN()
	a.nulls += uint64(nulls)
	if nulls == arr.Len() {
		return nil
	}
	bm, off := arr.NullBitmapBytes(), arr.Data().Offset()
	if nulls == 0 {
		bm = nil
	}
	switch arr := arr.(type) {
	case *array.Float64:
		addFloats(a, arr.Float64Values(), bm, off)
	case *array.Float32:
		addFloats(a, arr.Float32Values(), bm, off)
	case *array.Int8:
		eachValidRun(arr.Int8Values(), bm, off, func(v []int8) { addSigned(a, v) })
	case *array.Int16:
		eachValidRun(arr.Int16Values(), bm, off, func(v []int16) { addSigned(a, v) })
	case *array.Int32:
		eachValidRun(arr.Int32Values(), bm, off, func(v []int32) { addSigned(a, v) })
	case *array.Int64:
		eachValidRun(arr.Int64Values(), bm, off, func(v []int64) { addSigned(a, v) })
	case *array.Uint8:
		eachValidRun(arr.Uint8Values(), bm, off, func(v []uint8) { addUnsigned(a, v) })
	case *array.Uint16:
		eachValidRun(arr.Uint16Values(), bm, off, func(v []uint16) { addUnsigned(a, v) })
	case *array.Uint32:
		eachValidRun(arr.Uint32Values(), bm, off, func(v []uint32) { addUnsigned(a, v) })
	case *array.Uint64:
		eachValidRun(arr.Uint64Values(), bm, off, func(v []uint64) { addUnsigned(a, v) })
	default:
		a.nulls -= uint64(nulls)
		return fmt.Errorf("add %s array of Go type %T: %w", arr.DataType(), arr, ErrUnsupportedType)
	}
	return nil
}

// AddValues feeds a batch of rows given as its non-null values, densely
// packed, and the count of nulls among them: the batch is len(vals) + nulls
// rows. vals is a []float64 or []float32 (KindFloat), []int8 to []int64
// (KindSigned) or []uint8 to []uint64 (KindUnsigned). It leaves the same
// state as Add given the same rows as an Arrow array; Parquet readers hand
// out values in this form, without the cost of building arrays.
func (a *Accumulator) AddValues(vals any, nulls int) error {
	switch v := vals.(type) {
	case []float64:
		return addDense(a, KindFloat, v, nulls, func(a *Accumulator, v []float64) { addFloats(a, v, nil, 0) })
	case []float32:
		return addDense(a, KindFloat, v, nulls, func(a *Accumulator, v []float32) { addFloats(a, v, nil, 0) })
	case []int8:
		return addDense(a, KindSigned, v, nulls, addSigned[int8])
	case []int16:
		return addDense(a, KindSigned, v, nulls, addSigned[int16])
	case []int32:
		return addDense(a, KindSigned, v, nulls, addSigned[int32])
	case []int64:
		return addDense(a, KindSigned, v, nulls, addSigned[int64])
	case []uint8:
		return addDense(a, KindUnsigned, v, nulls, addUnsigned[uint8])
	case []uint16:
		return addDense(a, KindUnsigned, v, nulls, addUnsigned[uint16])
	case []uint32:
		return addDense(a, KindUnsigned, v, nulls, addUnsigned[uint32])
	case []uint64:
		return addDense(a, KindUnsigned, v, nulls, addUnsigned[uint64])
	}
	return fmt.Errorf("add values of Go type %T: %w", vals, ErrUnsupportedType)
}

// addDense checks a batch for AddValues (kind k) and adds it with add.
func addDense[T any](a *Accumulator, k Kind, vals []T, nulls int, add func(*Accumulator, []T)) error {
	if k != a.kind {
		return fmt.Errorf("add %T to %s accumulator: %w", vals, a.kind, ErrKindMismatch)
	}
	if nulls < 0 {
		return fmt.Errorf("add %T: negative null count %d", vals, nulls)
	}
	rows, _ := a.rows()
	if r, c := bits.Add64(rows, uint64(len(vals)), 0); c != 0 || r+uint64(nulls) < r {
		return fmt.Errorf("add %T: %w", vals, ErrCountOverflow)
	}
	a.nulls += uint64(nulls)
	if len(vals) > 0 {
		add(a, vals)
	}
	return nil
}

// Merge adds b's state into a. Kinds must match. b is not modified; a and
// b may be the same accumulator.
func (a *Accumulator) Merge(b *Accumulator) error {
	if !a.kind.valid() {
		return fmt.Errorf("merge into %s accumulator: %w", a.kind, ErrKindMismatch)
	}
	if a.kind != b.kind {
		return fmt.Errorf("merge %s state into %s accumulator: %w", b.kind, a.kind, ErrKindMismatch)
	}
	ra, _ := a.rows()
	rb, _ := b.rows()
	if _, c := bits.Add64(ra, rb, 0); c != 0 {
		return fmt.Errorf("merge %s states: %w", a.kind, ErrCountOverflow)
	}
	a.n += b.n
	a.nulls += b.nulls
	a.nans += b.nans
	a.posInf += b.posInf
	a.negInf += b.negInf
	a.minKey = min(a.minKey, b.minKey)
	a.maxKey = max(a.maxKey, b.maxKey)

	switch {
	case b.fs != nil && a.fs != nil:
		a.fs.addSlots(b.fs) // safe when a == b: each slot reads then writes itself
	case b.fs != nil:
		b.fs.foldInto(&a.s, &a.q)
	}
	w := b.w
	var c uint64
	a.w.s0, c = bits.Add64(a.w.s0, w.s0, 0)
	a.w.s1, _ = bits.Add64(a.w.s1, w.s1, c)
	a.w.q0, c = bits.Add64(a.w.q0, w.q0, 0)
	a.w.q1, c = bits.Add64(a.w.q1, w.q1, c)
	a.w.q2, _ = bits.Add64(a.w.q2, w.q2, c)
	a.s.Add(&a.s, &b.s)
	a.q.Add(&a.q, &b.q)
	return nil
}

// totals returns fresh big.Ints holding the whole S and Q at the kind's
// scale, without changing a.
func (a *Accumulator) totals() (s, q *big.Int) {
	s = new(big.Int).Set(&a.s)
	q = new(big.Int).Set(&a.q)
	switch a.kind {
	case KindFloat:
		if a.fs != nil {
			a.fs.foldInto(s, q)
		}
	case KindSigned:
		var t big.Int
		s.Add(s, setInt128(&t, a.w.s1, a.w.s0))
		q.Add(q, setUint192(&t, a.w.q2, a.w.q1, a.w.q0))
	case KindUnsigned:
		var t big.Int
		s.Add(s, setUint192(&t, 0, a.w.s1, a.w.s0))
		q.Add(q, setUint192(&t, a.w.q2, a.w.q1, a.w.q0))
	}
	return s, q
}

// scale is the power of two S is kept at: S·2^scale is an integer.
func (k Kind) scale() uint {
	if k == KindFloat {
		return floatScale
	}
	return 0
}

// Summary returns the correctly rounded statistics of the state.
//
// Each float is the exact statistic rounded once to the nearest float64,
// ties to even: mean = S/n, population variance = (nQ - S²)/n², sample
// variance = (nQ - S²)/(n(n-1)), and each std the square root of the exact
// variance, rounded once (not the root of a rounded variance). A variance
// can round to +Inf while its std is finite.
//
// Undefined statistics are NaN: with no finite values every moment, Min and
// Max; with one finite value the sample variance and std. A mean that is
// exactly zero is +0; a nonzero mean too small for float64 rounds to a zero
// of its own sign. Min and Max follow the -0 < +0 rule of Accumulator. For
// integer kinds Min and Max are the exact extremes rounded to float64, so
// integers beyond 2^53 in magnitude may round here, and only here.
func (a *Accumulator) Summary() Summary {
	rows, _ := a.rows()
	sum := Summary{
		Rows: rows, Count: a.n, Nulls: a.nulls, NaNs: a.nans,
		PosInf: a.posInf, NegInf: a.negInf,
	}
	nan := math.NaN()
	sum.Mean, sum.VarSample, sum.VarPopulation = nan, nan, nan
	sum.StdSample, sum.StdPopulation, sum.Min, sum.Max = nan, nan, nan, nan
	if a.n == 0 || !a.kind.valid() {
		return sum
	}
	s, q := a.totals()
	sc := a.kind.scale()
	n := new(big.Int).SetUint64(a.n)

	sum.Mean = roundRatio(s, new(big.Int).Lsh(n, sc))

	// n2 = nQ - S² ≥ 0 (Cauchy–Schwarz), at scale 2^(2·sc).
	n2 := new(big.Int).Mul(n, q)
	n2.Sub(n2, new(big.Int).Mul(s, s))
	den := new(big.Int).Mul(n, n)
	den.Lsh(den, 2*sc)
	sum.VarPopulation = roundRatio(n2, den)
	sum.StdPopulation = roundSqrtRatio(n2, den)
	if a.n > 1 {
		den.Mul(n, new(big.Int).SetUint64(a.n-1))
		den.Lsh(den, 2*sc)
		sum.VarSample = roundRatio(n2, den)
		sum.StdSample = roundSqrtRatio(n2, den)
	}
	sum.Min = a.keyValue(a.minKey)
	sum.Max = a.keyValue(a.maxKey)
	return sum
}

// keyValue rounds the value behind an order-preserving key to float64.
func (a *Accumulator) keyValue(k uint64) float64 {
	switch a.kind {
	case KindFloat:
		return keyFloat(k)
	case KindSigned:
		f, _ := new(big.Float).SetInt64(keySigned(k)).Float64()
		return f
	default:
		f, _ := new(big.Float).SetUint64(k).Float64()
		return f
	}
}

// Summary is what pass one reports per column. Every float is the exact
// statistic rounded once to the nearest float64; a statistic that is
// undefined (no finite values; n = 1 for sample variance) is NaN.
type Summary struct {
	Rows   uint64 // every slot seen: Count + Nulls + NaNs + PosInf + NegInf
	Count  uint64 // finite values, the n of every moment
	Nulls  uint64
	NaNs   uint64
	PosInf uint64
	NegInf uint64

	Mean          float64
	VarSample     float64
	VarPopulation float64
	StdSample     float64
	StdPopulation float64
	Min, Max      float64 // over finite values
}
