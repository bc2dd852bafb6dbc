package stats

// CONTRACT SKETCH: the helper that owns this file replaces the bodies (and
// may add files) but keeps every exported name and signature below.

import (
	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

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
