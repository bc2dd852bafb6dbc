package stats

import (
	"encoding/binary"
	"math/bits"
)

// signedKey maps int64 to a key whose unsigned order is the numeric order.
func signedKey(x int64) uint64 { return uint64(x) ^ 1<<63 }

// keySigned inverts signedKey.
func keySigned(k uint64) int64 { return int64(k ^ 1<<63) }

// addSigned accumulates in 128/192-bit integers; no value passes through
// float64.
func addSigned[T int8 | int16 | int32 | int64](a *Accumulator, vals []T) {
	// Locals, not a struct copy: the compiler keeps them in registers.
	s0, s1, q0, q1, q2 := a.w.s0, a.w.s1, a.w.q0, a.w.q1, a.w.q2
	mn, mx := keySigned(a.minKey), keySigned(a.maxKey)
	for _, v := range vals {
		x := int64(v)
		neg := uint64(x >> 63)
		var c uint64
		s0, c = bits.Add64(s0, uint64(x), 0)
		s1, _ = bits.Add64(s1, neg, c)
		m := (uint64(x) ^ neg) - neg // |x|, exact for MinInt64 too
		h, l := bits.Mul64(m, m)
		q0, c = bits.Add64(q0, l, 0)
		q1, c = bits.Add64(q1, h, c)
		q2 += c
		mn = min(mn, x)
		mx = max(mx, x)
	}
	a.w = wideSums{s0, s1, q0, q1, q2}
	a.n += uint64(len(vals))
	a.minKey, a.maxKey = signedKey(mn), signedKey(mx)
}

// addUnsigned is addSigned for unsigned columns; the key is the value.
func addUnsigned[T uint8 | uint16 | uint32 | uint64](a *Accumulator, vals []T) {
	s0, s1, q0, q1, q2 := a.w.s0, a.w.s1, a.w.q0, a.w.q1, a.w.q2
	mn, mx := a.minKey, a.maxKey
	for _, v := range vals {
		x := uint64(v)
		var c uint64
		s0, c = bits.Add64(s0, x, 0)
		s1 += c
		h, l := bits.Mul64(x, x)
		q0, c = bits.Add64(q0, l, 0)
		q1, c = bits.Add64(q1, h, c)
		q2 += c
		mn = min(mn, x)
		mx = max(mx, x)
	}
	a.w = wideSums{s0, s1, q0, q1, q2}
	a.n += uint64(len(vals))
	a.minKey, a.maxKey = mn, mx
}

// eachValidRun calls f on each maximal run of valid slots of vals, whose
// validity bits start at bit off of bitmap (Arrow layout, LSB first). A nil
// bitmap means every slot is valid.
func eachValidRun[T any](vals []T, bitmap []byte, off int, f func([]T)) {
	if len(bitmap) == 0 {
		if len(vals) > 0 {
			f(vals)
		}
		return
	}
	start, end := 0, 0 // pending run [start, end)
	for base := 0; base < len(vals); base += 64 {
		w := loadBits(bitmap, off+base, min(64, len(vals)-base))
		pos := base
		for w != 0 {
			z := bits.TrailingZeros64(w)
			w >>= uint(z)
			pos += z
			r := bits.TrailingZeros64(^w)
			if pos != end {
				if end > start {
					f(vals[start:end])
				}
				start = pos
			}
			end = pos + r
			pos += r
			w >>= uint(r) // r may be 64: Go shifts then give 0
		}
	}
	if end > start {
		f(vals[start:end])
	}
}

// loadBits returns n ≤ 64 bits of bitmap starting at bit i, LSB first,
// with the bits above n cleared.
func loadBits(bitmap []byte, i, n int) uint64 {
	by, sh := i>>3, uint(i&7)
	var w uint64
	if by+8 <= len(bitmap) {
		w = binary.LittleEndian.Uint64(bitmap[by:]) >> sh
		if sh != 0 && by+8 < len(bitmap) {
			w |= uint64(bitmap[by+8]) << (64 - sh)
		}
	} else {
		for j := 0; by+j < len(bitmap); j++ {
			w |= uint64(bitmap[by+j]) << (8 * uint(j))
		}
		w >>= sh
	}
	if n < 64 {
		w &= 1<<uint(n) - 1
	}
	return w
}
