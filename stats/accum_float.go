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

	slotBytes = 64 // the size of a slot
)

// slot holds the live sums of one biased exponent e, where each value is
// ±m·2^(e-1075) with m < 2^53:
//
//   - sum[0] = s1:s0, a 128-bit two's-complement Σ±m (added by floatRuns),
//     and sum[1] = n1:n0, a 128-bit Σm over negative values (added by
//     floatDirect), to be subtracted;
//   - q2:q1:q0, a 192-bit Σm².
//
// The slot's part of S·2^1074 is (s - n)·2^(e-1) and of Q·2^2148 is
// q·2^(2e-2). Headroom: |s|, n < 2^117 and q < 2^170 even after 2^64
// values, so nothing wraps. 64 bytes: one cache line.
type slot struct {
	sum        [2][2]uint64
	q0, q1, q2 uint64
	_          uint64
}

// floatSlots holds one slot per biased exponent; zeros and subnormals use
// slot 1 (no implicit bit). Slots outside lo..hi are zero.
type floatSlots struct {
	slot   [nSlots]slot // first, so that slots are cache-line aligned
	lo, hi int
	direct bool // which loop addFloats uses next; speed only
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

// slotIndex is the slot of a finite value's bits.
func slotIndex(b uint64) int { return max(int(b>>52)&expMask, 1) }

// floatHot is the part of the state the float kernels share.
type floatHot struct {
	minK, maxK           uint64
	nans, posInf, negInf uint64
	specials             int
	lo, hi               int
	directRan            bool
}

// adaptBlock is how many slots the float kernels process between choices
// of loop; a multiple of 64 so validity words do not straddle blocks.
const adaptBlock = 256

// Loop choice; tests force one loop to compare the states they build.
const (
	loopAdaptive = iota
	loopRuns
	loopDirect
)

var floatLoop = loopAdaptive

// addFloats feeds the valid values of vals (validity bits from bit off of
// bitmap; nil: all valid) in blocks, each through one of two loops:
// floatRuns keeps the current exponent's slot in registers and is fastest
// when consecutive values share an exponent; floatDirect updates the slot
// in memory for every value without a data-dependent branch and is fastest
// when exponents change often. How often the exponent changed in one block
// picks the loop for the next. The logical state is the same whichever
// loop ran.
func addFloats[T float32 | float64](a *Accumulator, vals []T, bitmap []byte, off int) {
	fs := a.fs
	if fs == nil {
		fs = newFloatSlots()
		a.fs = fs
	}
	h := floatHot{minK: a.minKey, maxK: a.maxKey, lo: fs.lo, hi: fs.hi}
	if floatLoop != loopAdaptive {
		fs.direct = floatLoop == loopDirect
	}
	var valid int
	kernel := func(run []T) {
		valid += len(run)
		for len(run) > 0 {
			var i int
			if fs.direct {
				h.directRan = true
				i, h.minK, h.maxK = floatDirect(&fs.slot, run, h.minK, h.maxK)
			} else {
				i = floatRuns(fs, run, &h)
			}
			if i < len(run) { // stopped at a NaN or infinity
				h.special(math.Float64bits(float64(run[i])))
				i++
			}
			run = run[i:]
		}
	}
	for base := 0; base < len(vals); base += adaptBlock {
		blk := vals[base:min(len(vals), base+adaptBlock)]
		if bitmap == nil {
			kernel(blk)
		} else {
			eachValidRun(blk, bitmap, off+base, kernel)
		}
		// Sample the block's first 64 slots (nulls included: a hint).
		changes := 0
		smp := blk[:min(len(blk), 64)]
		for i := 1; i < len(smp); i++ {
			if (math.Float64bits(float64(smp[i]))^math.Float64bits(float64(smp[i-1])))&(expMask<<52) != 0 {
				changes++
			}
		}
		switch {
		case floatLoop != loopAdaptive:
			fs.direct = floatLoop == loopDirect
		case fs.direct && 16*changes < len(smp):
			fs.direct = false // runs average more than ~16 values
		case !fs.direct && 8*changes > len(smp):
			fs.direct = true // runs average fewer than 8 values
		}
	}
	if h.directRan { // floatDirect does not track lo..hi
		h.lo = 1
		for _, k := range [2]uint64{h.minK, h.maxK} {
			h.hi = max(h.hi, slotIndex(math.Float64bits(keyFloat(k))))
		}
	}
	a.n += uint64(valid - h.specials)
	fs.lo, fs.hi = h.lo, h.hi
	a.minKey, a.maxKey = h.minK, h.maxK
	a.nans, a.posInf, a.negInf = a.nans+h.nans, a.posInf+h.posInf, a.negInf+h.negInf
}

// special counts a NaN or infinity (biased exponent 0x7FF).
func (h *floatHot) special(b uint64) {
	switch {
	case b&fracMask != 0:
		h.nans++
	case b>>63 != 0:
		h.negInf++
	default:
		h.posInf++
	}
	h.specials++
}

// runChunk bounds the values one floatRuns pass adds before flushing to
// the slot: 1024·(2^53 - 1) < 2^63, so the run's Σ±m fits an int64, and
// 1024·2^106 < 2^128, so its Σm² fits two words. (addFloats' blocks are
// smaller still; the bound keeps floatRuns right on its own.)
const runChunk = 1024

// floatRuns adds vals run by run of equal biased exponent, the run's sums
// in registers, up to the first NaN or infinity; it returns how many
// values it consumed.
func floatRuns[T float32 | float64](fs *floatSlots, vals []T, h *floatHot) int {
	minK, maxK := h.minK, h.maxK
	i := 0
	for i < len(vals) {
		e := int(math.Float64bits(float64(vals[i]))>>52) & expMask
		if e == expMask {
			break
		}
		idx := max(e, 1)
		h.lo, h.hi = min(h.lo, idx), max(h.hi, idx)
		chunk := vals[i:min(len(vals), i+runChunk)]
		var n int
		var s int64
		var q0, q1 uint64
		if e != 0 {
			n, s, q0, q1, minK, maxK = runNormal(chunk, uint64(e), minK, maxK)
		} else {
			n, s, q0, q1, minK, maxK = runSubnormal(chunk, minK, maxK)
		}
		sl := &fs.slot[idx&(nSlots-1)]
		var c uint64
		sl.sum[0][0], c = bits.Add64(sl.sum[0][0], uint64(s), 0)
		sl.sum[0][1], _ = bits.Add64(sl.sum[0][1], uint64(s>>63), c)
		sl.q0, c = bits.Add64(sl.q0, q0, 0)
		sl.q1, c = bits.Add64(sl.q1, q1, c)
		sl.q2 += c
		i += n
	}
	h.minK, h.maxK = minK, maxK
	return i
}

// runNormal adds the leading values of vals whose biased exponent is want
// (1..2046, implicit bit set): it returns how many, Σ±m, Σm² and the new
// extremes. len(vals) ≤ runChunk.
func runNormal[T float32 | float64](vals []T, want, minK, maxK uint64) (n int, s int64, q0, q1, mn, mx uint64) {
	for n = 0; n < len(vals); n++ {
		b := math.Float64bits(float64(vals[n]))
		if (b>>52)&expMask != want {
			break
		}
		neg := uint64(int64(b) >> 63) // all ones when negative
		k := b ^ (neg | 1<<63)
		minK = min(minK, k)
		maxK = max(maxK, k)
		m := b&fracMask | 1<<52
		s += int64((m ^ neg) - neg)
		hm, lm := bits.Mul64(m, m)
		var c uint64
		q0, c = bits.Add64(q0, lm, 0)
		q1 += hm + c
	}
	return n, s, q0, q1, minK, maxK
}

// runSubnormal is runNormal for biased exponent 0: zeros and subnormals,
// no implicit bit. -0 adds m = 0.
func runSubnormal[T float32 | float64](vals []T, minK, maxK uint64) (n int, s int64, q0, q1, mn, mx uint64) {
	for n = 0; n < len(vals); n++ {
		b := math.Float64bits(float64(vals[n]))
		if (b>>52)&expMask != 0 {
			break
		}
		neg := uint64(int64(b) >> 63)
		k := b ^ (neg | 1<<63)
		minK = min(minK, k)
		maxK = max(maxK, k)
		m := b & fracMask
		s += int64((m ^ neg) - neg)
		hm, lm := bits.Mul64(m, m)
		var c uint64
		q0, c = bits.Add64(q0, lm, 0)
		q1 += hm + c
	}
	return n, s, q0, q1, minK, maxK
}

// floatDirect adds each value straight into its slot in memory, m to
// sum[0] (positive) or sum[1] (negative) and m² to q, up to the first NaN
// or infinity; it returns how many values it consumed and the new
// extremes. The high words change only on a carry, a rarely taken branch.
// It does not maintain lo..hi.
func floatDirect[T float32 | float64](slots *[nSlots]slot, vals []T, minK, maxK uint64) (int, uint64, uint64) {
	i := 0
	for ; i < len(vals); i++ {
		b := math.Float64bits(float64(vals[i]))
		e := (b >> 52) & expMask
		if e == expMask {
			break
		}
		neg := uint64(int64(b) >> 63)
		k := b ^ (neg | 1<<63)
		minK = min(minK, k)
		maxK = max(maxK, k)
		nz := (e + expMask) >> 11 // 1 unless e == 0 (zero or subnormal)
		m := b&fracMask | nz<<52
		sl := &slots[(e|(nz^1))&(nSlots-1)] // zeros and subnormals: slot 1
		sum := &sl.sum[neg&1]               // by sign, without a branch
		var c uint64
		sum[0], c = bits.Add64(sum[0], m, 0)
		if c != 0 {
			sum[1]++
		}
		hm, lm := bits.Mul64(m, m)
		sl.q0, c = bits.Add64(sl.q0, lm, 0)
		sl.q1, c = bits.Add64(sl.q1, hm, c)
		if c != 0 {
			sl.q2++
		}
	}
	return i, minK, maxK
}

// addSlots adds o's slots into fs word-wise with carry.
func (fs *floatSlots) addSlots(o *floatSlots) {
	for e := o.lo; e <= o.hi; e++ {
		d, s := &fs.slot[e], o.slot[e]
		var c uint64
		for j := range d.sum {
			d.sum[j][0], c = bits.Add64(d.sum[j][0], s.sum[j][0], 0)
			d.sum[j][1], _ = bits.Add64(d.sum[j][1], s.sum[j][1], c)
		}
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
	var accS, accQ, t, u big.Int
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
		accS.Add(&accS, setInt128(&t, sl.sum[0][1], sl.sum[0][0]))
		accS.Sub(&accS, setUint192(&u, 0, sl.sum[1][1], sl.sum[1][0]))
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
