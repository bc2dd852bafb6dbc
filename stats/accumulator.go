package stats

// CONTRACT SKETCH: the helper that owns this file replaces the bodies (and
// may add files) but keeps every exported name and signature below.

import (
	"github.com/apache/arrow/go/v17/arrow"
)

// Kind is the arithmetic an Accumulator uses for a column.
type Kind uint8

const (
	KindFloat    Kind = iota + 1 // float32 (widened exactly) and float64
	KindSigned                   // int8, int16, int32, int64
	KindUnsigned                 // uint8, uint16, uint32, uint64
)

// KindOf reports the accumulator kind for an Arrow type, and false for
// types lakescale does not scale.
func KindOf(t arrow.DataType) (Kind, bool) { panic("unimplemented") }

// Accumulator holds the exact running state of one column.
type Accumulator struct{ kind Kind }

// NewAccumulator returns an empty accumulator of kind k.
func NewAccumulator(k Kind) *Accumulator { panic("unimplemented") }

// Kind reports the accumulator's kind.
func (a *Accumulator) Kind() Kind { return a.kind }

// Add feeds every slot of arr (nulls, NaN and infinities are counted,
// finite values enter the moments). arr's type must be of a's kind.
func (a *Accumulator) Add(arr arrow.Array) error { panic("unimplemented") }

// Merge adds b's state into a. Kinds must match.
func (a *Accumulator) Merge(b *Accumulator) error { panic("unimplemented") }

// MarshalBinary returns the canonical, versioned encoding of the state.
func (a *Accumulator) MarshalBinary() ([]byte, error) { panic("unimplemented") }

// UnmarshalBinary replaces a's state with a decoded one, rejecting corrupt
// or truncated input.
func (a *Accumulator) UnmarshalBinary(data []byte) error { panic("unimplemented") }

// Summary returns the correctly rounded statistics of the state.
func (a *Accumulator) Summary() Summary { panic("unimplemented") }

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
