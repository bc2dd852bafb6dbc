package stats

import (
	"math/big"
)

// roundRatio returns num/den rounded once to the nearest float64, ties to
// even (big.Rat.Float64). den > 0. An exact zero is +0; a nonzero ratio
// that underflows keeps its sign.
func roundRatio(num, den *big.Int) float64 {
	if num.Sign() == 0 {
		return 0
	}
	f, _ := new(big.Rat).SetFrac(num, den).Float64()
	return f
}

// sqrtGuardBits: t = ⌊num·4^k/den⌋ is made at least 2^sqrtGuardBits, so
// s = ⌊√t⌋ ≥ 2^56 carries three more bits than a float64 significand.
const sqrtGuardBits = 112

// roundSqrtRatio returns √(num/den) rounded once to the nearest float64,
// ties to even. num ≥ 0, den > 0.
//
// With t = ⌊num·4^k/den⌋ and s = ⌊√t⌋ (big.Int.Sqrt is exact), the root
// lies in [s, s+1)·2^-k, and exactly at s·2^-k only when both the division
// and the root are exact. Because s ≥ 2^56, no rounding boundary between
// float64s lies strictly inside (s, s+1)·2^-k, so rounding (2s + sticky)/
// 2^(k+1) gives the same float64 as rounding the true root: the sticky bit
// moves an inexact candidate off s, to the side the true root is on.
// big.Float.Sqrt is not used because it does not promise correct rounding.
func roundSqrtRatio(num, den *big.Int) float64 {
	if num.Sign() == 0 {
		return 0
	}
	k := 0
	if need := sqrtGuardBits + 1 - (num.BitLen() - den.BitLen()); need > 0 {
		k = (need + 1) / 2
	}
	t := new(big.Int).Lsh(num, uint(2*k))
	r := new(big.Int)
	t.QuoRem(t, den, r)
	s := new(big.Int).Sqrt(t)
	sq := new(big.Int).Mul(s, s)
	s.Lsh(s, 1)
	if r.Sign() != 0 || sq.Cmp(t) != 0 {
		s.SetBit(s, 0, 1)
	}
	pow := new(big.Int).Lsh(big.NewInt(1), uint(k+1))
	f, _ := new(big.Rat).SetFrac(s, pow).Float64()
	return f
}
