package stats

import (
	"math"
	"math/big"
	"math/bits"
)

const (
	// floatScale: every finite float64 is an integer multiple of 2^-1074,
	// so S·2^1074 and Q·2^2148 are integers (IEEE 754-2019, binary64).
	floatScale = 1074

	expMask  = 0x7FF
	fracMask = 1<<52 - 1
	nSlots   = 2048
)

// slot is the live sum of one biased exponent e: Σ±m as 128-bit two's
// complement (s1:s0) and Σm² as 192-bit unsigned (q2:q1:q0), where each
// value is ±m·2^(e-1075) with m < 2^53. Headroom: more than 2^74 values
// before the sum could wrap, 2^86 before the squares could.
type slot struct {
	s0, s1     uint64
	q0, q1, q2 uint64
}

// floatSlots holds one slot per biased exponent; zeros and subnormals use
// slot 1 (no implicit bit). lo..hi bounds the slots ever touched.
type floatSlots struct {
	lo, hi int
	slot   [nSlots]slot
}

func newFloatSlots() *floatSlots { return &floatSlots{lo: nSlots, hi: -1} }

// floatKey maps float64 bits to a key whose unsigned order is the numeric
// order, -0 just below +0 (NaN bits land outside the finite keys).
func floatKey(b uint64) uint64 { return b ^ (uint64(int64(b)>>63) | 1<<63) }

// keyFloat inverts floatKey.
func keyFloat(k uint64) float64 {
	if k>>63 != 0 {
		return math.Float64frombits(k ^ 1<<63)
	}
	return math.Float64frombits(^k)
}

// addFloat64s is the hot loop. Values come in runs of equal biased
// exponent; a run's slot stays in registers until the exponent changes.
func (a *Accumulator) addFloat64s(vals []float64) {
	fs := a.fs
	if fs == nil {
		fs = newFloatSlots()
		a.fs = fs
	}
	minK, maxK := a.minKey, a.maxKey
	lo, hi := fs.lo, fs.hi
	var specials int
	i, n := 0, len(vals)
	for i < n {
		b := math.Float64bits(vals[i])
		e := int(b>>52) & expMask
		if e == expMask {
			switch {
			case b&fracMask != 0:
				a.nans++
			case b>>63 != 0:
				a.negInf++
			default:
				a.posInf++
			}
			specials++
			i++
			continue
		}
		idx, implicit := e, uint64(1)<<52
		if e == 0 {
			idx, implicit = 1, 0
		}
		lo, hi = min(lo, idx), max(hi, idx)
		sl := &fs.slot[idx&(nSlots-1)]
		s0, s1, q0, q1, q2 := sl.s0, sl.s1, sl.q0, sl.q1, sl.q2
		want := uint64(e)
		for ; i < n; i++ {
			b := math.Float64bits(vals[i])
			if (b>>52)&expMask != want {
				break
			}
			m := b&fracMask | implicit
			neg := uint64(int64(b) >> 63) // all ones when negative
			// v = ±m fits int64 (m < 2^53); sign-extend v, not the sign
			// bit, so that -0 adds 0 rather than -2^64.
			v := (m ^ neg) - neg
			var c uint64
			s0, c = bits.Add64(s0, v, 0)
			s1, _ = bits.Add64(s1, uint64(int64(v)>>63), c)
			h, l := bits.Mul64(m, m)
			q0, c = bits.Add64(q0, l, 0)
			q1, c = bits.Add64(q1, h, c)
			q2 += c
			k := b ^ (neg | 1<<63)
			minK = min(minK, k)
			maxK = max(maxK, k)
		}
		sl.s0, sl.s1, sl.q0, sl.q1, sl.q2 = s0, s1, q0, q1, q2
	}
	fs.lo, fs.hi = lo, hi
	a.n += uint64(n - specials)
	a.minKey, a.maxKey = minK, maxK
}

// addFloat32s widens to float64 (exact) in stack-sized chunks.
func (a *Accumulator) addFloat32s(vals []float32) {
	var buf [512]float64
	for len(vals) > 0 {
		c := min(len(vals), len(buf))
		for i, v := range vals[:c] {
			buf[i] = float64(v)
		}
		a.addFloat64s(buf[:c])
		vals = vals[c:]
	}
}

// addSlots adds o's slots into fs word-wise with carry.
func (fs *floatSlots) addSlots(o *floatSlots) {
	for e := o.lo; e <= o.hi; e++ {
		d, s := &fs.slot[e], o.slot[e]
		var c uint64
		d.s0, c = bits.Add64(d.s0, s.s0, 0)
		d.s1, _ = bits.Add64(d.s1, s.s1, c)
		d.q0, c = bits.Add64(d.q0, s.q0, 0)
		d.q1, c = bits.Add64(d.q1, s.q1, c)
		d.q2, _ = bits.Add64(d.q2, s.q2, c)
	}
	if o.lo <= o.hi {
		fs.lo, fs.hi = min(fs.lo, o.lo), max(fs.hi, o.hi)
	}
}

// foldInto adds the slots' values to s (scale 2^1074) and q (scale
// 2^2148): slot e holds terms ±m·2^(e-1) and m²·2^(2e-2) at those scales.
// Horner's rule from the top exponent down keeps every shift small.
func (fs *floatSlots) foldInto(s, q *big.Int) {
	var accS, accQ, t big.Int
	prev := -1
	for e := fs.hi; e >= fs.lo; e-- {
		sl := &fs.slot[e]
		if *sl == (slot{}) {
			continue
		}
		if prev >= 0 {
			accS.Lsh(&accS, uint(prev-e))
			accQ.Lsh(&accQ, 2*uint(prev-e))
		}
		accS.Add(&accS, setInt128(&t, sl.s1, sl.s0))
		accQ.Add(&accQ, setUint192(&t, sl.q2, sl.q1, sl.q0))
		prev = e
	}
	if prev < 0 {
		return
	}
	accS.Lsh(&accS, uint(prev-1))
	accQ.Lsh(&accQ, 2*uint(prev-1))
	s.Add(s, &accS)
	q.Add(q, &accQ)
}

// setInt128 sets z to the 128-bit two's-complement value hi:lo.
func setInt128(z *big.Int, hi, lo uint64) *big.Int {
	if int64(hi) >= 0 {
		return setUint192(z, 0, hi, lo)
	}
	lo, b := bits.Sub64(0, lo, 0)
	hi, _ = bits.Sub64(0, hi, b)
	setUint192(z, 0, hi, lo)
	return z.Neg(z)
}

// setUint192 sets z to the unsigned value w2:w1:w0.
func setUint192(z *big.Int, w2, w1, w0 uint64) *big.Int {
	var t big.Int
	z.SetUint64(w2)
	z.Lsh(z, 64)
	z.Add(z, t.SetUint64(w1))
	z.Lsh(z, 64)
	return z.Add(z, t.SetUint64(w0))
}
