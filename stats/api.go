package stats

// THIS FILE IS THE CONTRACT SKETCH; the stats helper replaces the bodies
// (and may move declarations to other files) but keeps every exported name
// and signature below.

import (
	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/memory"
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

// Method names a scaling method.
type Method string

const (
	ZScore   Method = "zscore"
	MinMax   Method = "minmax"
	MeanNorm Method = "meannorm"
	MaxAbs   Method = "maxabs"
	Identity Method = "none"
)

// ParseMethod validates a method name.
func ParseMethod(s string) (Method, error) { panic("unimplemented") }

// StdKind selects the denominator of the standard deviation.
type StdKind string

const (
	StdPopulation StdKind = "population" // divide by n (the default)
	StdSample     StdKind = "sample"     // divide by n - 1
)

// Options tunes a method. The zero value means: population std, range [0, 1].
type Options struct {
	Std      StdKind // zscore only
	RangeMin float64 // minmax target range; RangeMin == RangeMax == 0 means [0, 1]
	RangeMax float64
}

// Warning is a machine-readable code for a degenerate column.
type Warning string

// Params are the fitted parameters of one column: y = (x - Center) / Scale.
type Params struct {
	Method  Method
	Options Options // with defaults filled in
	Center  float64
	Scale   float64
}

// Fit derives parameters from a summary. It never returns NaN or Inf
// parameters: degenerate columns get a documented fallback and a warning.
func Fit(m Method, o Options, s Summary) (Params, []Warning, error) { panic("unimplemented") }

// Forward scales one value.
func (p Params) Forward(x float64) float64 { panic("unimplemented") }

// Inverse maps a scaled value back to original units.
func (p Params) Inverse(y float64) float64 { panic("unimplemented") }

// Transform scales a numeric array into a new float64 array (float32 when
// asFloat32), allocated from mem. Nulls stay null, NaN stays NaN.
func Transform(mem memory.Allocator, arr arrow.Array, p Params, asFloat32 bool) (arrow.Array, error) {
	panic("unimplemented")
}
