package stats

import (
	"encoding/binary"
	"fmt"
	"hash/crc32"
	"math"
	"math/big"
)

// Encoding of an Accumulator state, version 1. All integers big-endian.
//
//	offset  size  field
//	0       4     magic "LSAC"
//	4       1     version = 1
//	5       1     kind (1 float, 2 signed, 3 unsigned)
//	6       40    counters: finite, nulls, NaN, +Inf, -Inf (uint64 each)
//	46      16    min key, max key (uint64 each; order-preserving keys)
//	62      3+L   S: sign (0 non-negative, 1 negative), length L (uint16),
//	              magnitude (L bytes, no leading zero byte; zero is L = 0)
//	..      3+L   Q: the same
//	..      4     CRC-32C (Castagnoli) of every byte before it
//
// S and Q are at the kind's scale (2^1074 and 2^2148 for float, 1 for
// integers). Every field has exactly one valid spelling and the live slots
// are folded before encoding, so equal states encode to equal bytes.
const (
	encVersion   = 1
	encHeaderLen = 62
	encMaxMag    = 1024 // far above the largest valid magnitude (~533 bytes)
	encMinLen    = encHeaderLen + 3 + 3 + 4
)

var (
	encMagic = [4]byte{'L', 'S', 'A', 'C'}
	crcTable = crc32.MakeTable(crc32.Castagnoli)
)

// MarshalBinary returns the canonical, versioned encoding of the state.
func (a *Accumulator) MarshalBinary() ([]byte, error) {
	if !a.kind.valid() {
		return nil, fmt.Errorf("encode %s accumulator: %w", a.kind, ErrKindMismatch)
	}
	s, q := a.totals()
	out := make([]byte, 0, encMinLen+(s.BitLen()+7)/8+(q.BitLen()+7)/8)
	out = append(out, encMagic[:]...)
	out = append(out, encVersion, byte(a.kind))
	for _, v := range [...]uint64{a.n, a.nulls, a.nans, a.posInf, a.negInf, a.minKey, a.maxKey} {
		out = binary.BigEndian.AppendUint64(out, v)
	}
	out = appendInt(out, s)
	out = appendInt(out, q)
	return binary.BigEndian.AppendUint32(out, crc32.Checksum(out, crcTable)), nil
}

func appendInt(out []byte, x *big.Int) []byte {
	sign := byte(0)
	if x.Sign() < 0 {
		sign = 1
	}
	mag := x.Bytes() // absolute value, no leading zeros
	out = append(out, sign)
	out = binary.BigEndian.AppendUint16(out, uint16(len(mag)))
	return append(out, mag...)
}

// UnmarshalBinary replaces a's state with a decoded one, rejecting corrupt
// or truncated input. Besides the checksum and the layout it checks that
// the state is one values could produce (counters do not overflow, the
// extremes are finite and ordered, n·min ≤ S ≤ n·max, S² ≤ n·Q, ...). On
// error a is unchanged.
func (a *Accumulator) UnmarshalBinary(data []byte) error {
	if len(data) < encMinLen {
		return fmt.Errorf("%w: %d bytes is shorter than the smallest state (%d)", ErrCorruptState, len(data), encMinLen)
	}
	if [4]byte(data[:4]) != encMagic {
		return fmt.Errorf("%w: bad magic %q", ErrCorruptState, data[:4])
	}
	if data[4] != encVersion {
		return fmt.Errorf("%w: unknown version %d", ErrCorruptState, data[4])
	}
	body, sum := data[:len(data)-4], binary.BigEndian.Uint32(data[len(data)-4:])
	if crc32.Checksum(body, crcTable) != sum {
		return fmt.Errorf("%w: checksum mismatch", ErrCorruptState)
	}
	d, err := decodeBody(body)
	if err != nil {
		return err
	}
	*a = d
	return nil
}

// decodeBody parses and validates a checksummed body.
func decodeBody(body []byte) (Accumulator, error) {
	var d Accumulator
	d.kind = Kind(body[5])
	if !d.kind.valid() {
		return d, fmt.Errorf("%w: unknown kind %d", ErrCorruptState, body[5])
	}
	var u [7]uint64
	for i := range u {
		u[i] = binary.BigEndian.Uint64(body[6+8*i:])
	}
	d.n, d.nulls, d.nans, d.posInf, d.negInf, d.minKey, d.maxKey = u[0], u[1], u[2], u[3], u[4], u[5], u[6]
	rest := body[encHeaderLen:]
	var err error
	if rest, err = readInt(rest, &d.s, "sum"); err != nil {
		return d, err
	}
	if rest, err = readInt(rest, &d.q, "sum of squares"); err != nil {
		return d, err
	}
	if len(rest) != 0 {
		return d, fmt.Errorf("%w: %d trailing bytes", ErrCorruptState, len(rest))
	}
	if err := d.validate(); err != nil {
		return d, fmt.Errorf("%w: %s state: %w", ErrCorruptState, d.kind, err)
	}
	return d, nil
}

func readInt(b []byte, x *big.Int, what string) ([]byte, error) {
	if len(b) < 3 {
		return nil, fmt.Errorf("%w: truncated %s", ErrCorruptState, what)
	}
	sign, l := b[0], int(binary.BigEndian.Uint16(b[1:3]))
	b = b[3:]
	switch {
	case sign > 1:
		return nil, fmt.Errorf("%w: %s sign byte %d", ErrCorruptState, what, sign)
	case l > encMaxMag || l > len(b):
		return nil, fmt.Errorf("%w: %s length %d exceeds the %d bytes left", ErrCorruptState, what, l, len(b))
	case l > 0 && b[0] == 0:
		return nil, fmt.Errorf("%w: %s magnitude has a leading zero byte", ErrCorruptState, what)
	case l == 0 && sign != 0:
		return nil, fmt.Errorf("%w: %s is negative zero", ErrCorruptState, what)
	}
	x.SetBytes(b[:l])
	if sign == 1 {
		x.Neg(x)
	}
	return b[l:], nil
}

// validate checks that a decoded state is one that values could produce,
// so Summary never meets, say, a negative n·Q - S².
func (a *Accumulator) validate() error {
	if _, ok := a.rows(); !ok {
		return fmt.Errorf("row count overflows uint64")
	}
	if a.n == 0 {
		if a.minKey != math.MaxUint64 || a.maxKey != 0 || a.s.Sign() != 0 || a.q.Sign() != 0 {
			return fmt.Errorf("no finite values but non-empty moments or extremes")
		}
		return nil
	}
	if a.minKey > a.maxKey {
		return fmt.Errorf("min above max")
	}
	if a.n == 1 && a.minKey != a.maxKey {
		return fmt.Errorf("one value but min differs from max")
	}
	lo, ok1 := a.keyScaled(a.minKey)
	hi, ok2 := a.keyScaled(a.maxKey)
	if !ok1 || !ok2 {
		return fmt.Errorf("min or max is not finite")
	}
	n := new(big.Int).SetUint64(a.n)
	t := new(big.Int)
	// n·min ≤ S ≤ n·max.
	if a.s.Cmp(t.Mul(n, lo)) < 0 || a.s.Cmp(t.Mul(n, hi)) > 0 {
		return fmt.Errorf("sum outside n·[min, max]")
	}
	// n·(min |x| on [min, max])² ≤ Q ≤ n·max(min², max²).
	loSq, hiSq := new(big.Int).Mul(lo, lo), new(big.Int).Mul(hi, hi)
	upper, lower := loSq, new(big.Int)
	if hiSq.Cmp(loSq) > 0 {
		upper = hiSq
	}
	switch {
	case lo.Sign() >= 0:
		lower = loSq
	case hi.Sign() <= 0:
		lower = hiSq
	}
	if a.q.Cmp(t.Mul(n, upper)) > 0 || a.q.Cmp(t.Mul(n, lower)) < 0 {
		return fmt.Errorf("sum of squares outside n·[min x², max x²]")
	}
	// Cauchy–Schwarz: S² ≤ n·Q.
	if new(big.Int).Mul(&a.s, &a.s).Cmp(t.Mul(n, &a.q)) > 0 {
		return fmt.Errorf("sum squared exceeds n times the sum of squares")
	}
	if a.n == 2 { // both values are known: they are min and max
		if a.s.Cmp(t.Add(lo, hi)) != 0 || a.q.Cmp(t.Add(loSq, hiSq)) != 0 {
			return fmt.Errorf("two values but sums differ from min and max")
		}
	}
	return nil
}

// keyScaled returns the value behind a key as an integer at the kind's
// scale, and false for a key that is no finite float64.
func (a *Accumulator) keyScaled(k uint64) (*big.Int, bool) {
	switch a.kind {
	case KindSigned:
		return big.NewInt(keySigned(k)), true
	case KindUnsigned:
		return new(big.Int).SetUint64(k), true
	}
	x := keyFloat(k)
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil, false
	}
	b := math.Float64bits(x)
	e := int(b>>52) & expMask
	m := b & fracMask
	if e == 0 {
		e = 1
	} else {
		m |= 1 << 52
	}
	v := new(big.Int).SetUint64(m)
	v.Lsh(v, uint(e-1)) // x·2^1074 = ±m·2^(e-1)
	if b>>63 != 0 {
		v.Neg(v)
	}
	return v, true
}
