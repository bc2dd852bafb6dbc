package stats

import (
	"errors"
	"fmt"
	"math"
	"math/big"
	"strings"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// Method names a scaling method.
type Method string

const (
	ZScore   Method = "zscore"   // (x - mean) / std
	MinMax   Method = "minmax"   // onto [RangeMin, RangeMax]
	MeanNorm Method = "meannorm" // (x - mean) / (max - min)
	MaxAbs   Method = "maxabs"   // x / max(|min|, |max|)
	Identity Method = "none"     // x unchanged
)

// scaleMethods lists every method in the order error messages show them.
var scaleMethods = []Method{ZScore, MinMax, MeanNorm, MaxAbs, Identity}

// ParseMethod validates a method name.
func ParseMethod(s string) (Method, error) {
	for _, m := range scaleMethods {
		if s == string(m) {
			return m, nil
		}
	}
	names := make([]string, len(scaleMethods))
	for i, m := range scaleMethods {
		names[i] = string(m)
	}
	return "", fmt.Errorf("unknown scaling method %q (valid: %s)", s, strings.Join(names, ", "))
}

// StdKind selects the denominator of the standard deviation.
type StdKind string

const (
	StdPopulation StdKind = "population" // divide by n (the default)
	StdSample     StdKind = "sample"     // divide by n - 1
)

// ParseStdKind validates a standard deviation kind.
func ParseStdKind(s string) (StdKind, error) {
	switch k := StdKind(s); k {
	case StdPopulation, StdSample:
		return k, nil
	}
	return "", fmt.Errorf("unknown standard deviation kind %q (valid: %s, %s)", s, StdPopulation, StdSample)
}

// Options tunes a method. The zero value means: population std, range [0, 1].
type Options struct {
	Std      StdKind // zscore only
	RangeMin float64 // minmax target range; RangeMin == RangeMax == 0 means [0, 1]
	RangeMax float64
}

// normalize validates o and returns the options method m actually uses,
// with defaults filled in and every option m ignores set to its zero value,
// so that Params records exactly the choices that shaped the parameters.
// Options m ignores are still validated, so a typo never passes silently.
func (o Options) normalize(m Method) (Options, error) {
	std := o.Std
	if std == "" {
		std = StdPopulation
	} else if _, err := ParseStdKind(string(std)); err != nil {
		return Options{}, err
	}
	lo, hi := o.RangeMin, o.RangeMax
	if lo == 0 && hi == 0 {
		lo, hi = 0, 1
	}
	if !scaleFinite(lo) || !scaleFinite(hi) || !(lo < hi) {
		return Options{}, fmt.Errorf("invalid target range [%v, %v]: need finite bounds with min < max", o.RangeMin, o.RangeMax)
	}
	switch m {
	case ZScore:
		return Options{Std: std}, nil
	case MinMax:
		return Options{RangeMin: lo, RangeMax: hi}, nil
	}
	return Options{}, nil
}

// Warning is a machine-readable code for a degenerate column. Fit raises at
// most one per column; the fallback it names keeps every parameter finite.
type Warning string

const (
	// WarnNoFiniteValues: the column has no finite values (Count == 0, every
	// slot is null, NaN or infinite). Center 0, scale 1: y = x.
	WarnNoFiniteValues Warning = "no_finite_values"
	// WarnConstantColumn: every finite value is equal (Min == Max, compared
	// exactly). Scale 1; zscore and meannorm center on the mean so the value
	// maps to 0; minmax maps it to RangeMin (see Fit).
	WarnConstantColumn Warning = "constant_column"
	// WarnSingleValueSampleStd: zscore with the sample std of a single
	// finite value, which is undefined. Center is the value, scale 1: it
	// maps to 0.
	WarnSingleValueSampleStd Warning = "single_value_sample_std"
	// WarnAllZero: maxabs of a column whose finite values are all zero.
	// Center 0, scale 1: zeros stay zero.
	WarnAllZero Warning = "all_zero"
	// WarnScaleUnderflow: the values differ but the exact scale is below
	// half the smallest subnormal and rounds to 0 (zscore std of tiny
	// subnormal data, minmax with a target range vastly wider than the
	// data). Scale 1 and the method's center, as for a constant column.
	WarnScaleUnderflow Warning = "scale_underflow"
)

// ErrParamOverflow reports a column whose parameters, or whose values
// mapped through them, fall outside the finite float64 range: for example
// minmax or meannorm of a column spanning [-1e308, 1e308], where
// max - min is +Inf. Fit returns it (wrapped, naming the method) rather
// than Inf parameters.
var ErrParamOverflow = errors.New("scaling parameter overflows float64")

// Params are the fitted parameters of one column: y = (x - Center) / Scale.
type Params struct {
	Method  Method
	Options Options // with defaults filled in
	Center  float64
	Scale   float64
}

// Validate reports whether p can be applied: a known method, valid options,
// a finite center and a finite, positive scale.
func (p Params) Validate() error {
	if _, err := ParseMethod(string(p.Method)); err != nil {
		return err
	}
	if _, err := p.Options.normalize(p.Method); err != nil {
		return err
	}
	if !scaleFinite(p.Center) {
		return fmt.Errorf("invalid %s parameters: center %v is not finite", p.Method, p.Center)
	}
	if !scaleFinite(p.Scale) || !(p.Scale > 0) {
		return fmt.Errorf("invalid %s parameters: scale %v is not finite and positive", p.Method, p.Scale)
	}
	return nil
}

// Fit derives parameters from a summary. It never returns NaN or Inf
// parameters: degenerate columns get a documented fallback and a warning.
//
// The methods, with y = (x - Center) / Scale:
//
//   - zscore: Center = Mean, Scale = StdPopulation or StdSample.
//   - minmax onto [a, b]: Scale = (Max - Min) / (b - a) and then
//     Center = Min - a*Scale, each evaluated exactly on the float64 inputs
//     (math/big) and rounded once to nearest, ties to even. For [0, 1] this
//     gives Center == Min and Scale == Max - Min rounded once, so
//     Forward(Min) == 0 exactly, and Forward(Max) == 1 exactly whenever
//     Max - Min is a float64 (for example when Min and Max have the same
//     sign and lie within a factor 2 of each other, or are integers below
//     2^52 in magnitude); otherwise Forward(Max), the correctly rounded
//     (Max - Min) / RN(Max - Min), is 1 or 1 - 2^-53, never above 1.
//   - meannorm: Center = Mean, Scale = Max - Min (one IEEE 754 subtraction,
//     rounded once).
//   - maxabs: Center = 0, Scale = max(|Min|, |Max|).
//   - none: Center = 0, Scale = 1; the summary is not consulted.
//
// Degenerate columns (each raises one Warning, checked in this order):
// no finite values gives Center 0, Scale 1 for every method; zscore with
// the sample std of one value gives Center = Mean, Scale 1; a constant
// column (Min == Max, compared exactly) gives Scale 1 with Center = Mean
// for zscore and meannorm (the value maps to 0) and Center = Min - a for
// minmax (rounded once; the value maps to a exactly whenever Min - a is a
// float64, which always holds for the default range, and otherwise to the
// float64 nearest it); maxabs of an all-zero column gives Scale 1; a scale
// that rounds to zero although the values differ gives Scale 1 with the
// method's center. A constant non-zero column is not degenerate for maxabs
// (it maps to 1 or -1) and raises no warning.
//
// Fit fails with an error wrapping ErrParamOverflow when a parameter would
// be infinite or when Min or Max would map to an infinite y, or back to an
// infinite x, so that every finite input of the column maps to a finite
// output. Center is never -0. Params.Options records o with its defaults
// filled in, keeping only the options the method uses (all of o is
// validated).
func Fit(m Method, o Options, s Summary) (Params, []Warning, error) {
	if _, err := ParseMethod(string(m)); err != nil {
		return Params{}, nil, err
	}
	opts, err := o.normalize(m)
	if err != nil {
		return Params{}, nil, fmt.Errorf("%s: %w", m, err)
	}
	p := Params{Method: m, Options: opts, Center: 0, Scale: 1}
	if m == Identity {
		return p, nil, nil
	}
	if s.Count == 0 {
		return p, []Warning{WarnNoFiniteValues}, nil
	}
	if err := fitSummaryCheck(m, opts, s); err != nil {
		return Params{}, nil, fmt.Errorf("%s: %w", m, err)
	}

	var warn Warning
	switch m {
	case ZScore:
		p.Center = s.Mean
		switch {
		case opts.Std == StdSample && s.Count == 1:
			warn = WarnSingleValueSampleStd
		case s.Min == s.Max:
			warn = WarnConstantColumn
		default:
			p.Scale = s.StdPopulation
			if opts.Std == StdSample {
				p.Scale = s.StdSample
			}
			if p.Scale == 0 {
				p.Scale, warn = 1, WarnScaleUnderflow
			}
		}
	case MinMax:
		a, b := opts.RangeMin, opts.RangeMax
		if s.Min == s.Max {
			warn = WarnConstantColumn
		} else {
			// (max - min) / (b - a), exact, rounded once.
			num := new(big.Rat).Sub(exactRat(s.Max), exactRat(s.Min))
			den := new(big.Rat).Sub(exactRat(b), exactRat(a))
			p.Scale, _ = num.Quo(num, den).Float64()
			if math.IsInf(p.Scale, 0) {
				return Params{}, nil, fmt.Errorf("%s: %w: scale (max - min) / (b - a) is %v for min %v, max %v, range [%v, %v]",
					m, ErrParamOverflow, p.Scale, s.Min, s.Max, a, b)
			}
			if p.Scale == 0 {
				p.Scale, warn = 1, WarnScaleUnderflow
			}
		}
		// min - a*scale with the rounded scale, so that the affine map
		// actually applied sends min to a; exact, rounded once.
		c := new(big.Rat).Mul(exactRat(a), exactRat(p.Scale))
		p.Center, _ = c.Sub(exactRat(s.Min), c).Float64()
		if math.IsInf(p.Center, 0) {
			return Params{}, nil, fmt.Errorf("%s: %w: center min - a*scale is %v for min %v, a %v, scale %v",
				m, ErrParamOverflow, p.Center, s.Min, a, p.Scale)
		}
	case MeanNorm:
		p.Center = s.Mean
		if s.Min == s.Max {
			warn = WarnConstantColumn
		} else {
			// One IEEE 754 subtraction is already correctly rounded; it is
			// exact when the difference is subnormal, so it is > 0 here.
			p.Scale = s.Max - s.Min
			if math.IsInf(p.Scale, 0) {
				return Params{}, nil, fmt.Errorf("%s: %w: scale max - min is %v for min %v, max %v",
					m, ErrParamOverflow, p.Scale, s.Min, s.Max)
			}
		}
	case MaxAbs:
		p.Scale = max(math.Abs(s.Min), math.Abs(s.Max))
		if p.Scale == 0 {
			p.Scale, warn = 1, WarnAllZero
		}
	}
	p.Center += 0 // -0 + 0 == +0: one canonical zero for manifests
	if err := fitRangeCheck(p, s); err != nil {
		return Params{}, nil, err
	}
	if warn != "" {
		return p, []Warning{warn}, nil
	}
	return p, nil, nil
}

// fitSummaryCheck rejects a summary whose statistics cannot come from Count > 0
// finite values. It checks only the fields method m reads.
func fitSummaryCheck(m Method, o Options, s Summary) error {
	if !scaleFinite(s.Min) || !scaleFinite(s.Max) || s.Min > s.Max {
		return fmt.Errorf("invalid summary: min %v, max %v over %d finite values", s.Min, s.Max, s.Count)
	}
	if (m == ZScore || m == MeanNorm) && !scaleFinite(s.Mean) {
		return fmt.Errorf("invalid summary: mean %v over %d finite values", s.Mean, s.Count)
	}
	if m == ZScore {
		std := s.StdPopulation
		if o.Std == StdSample {
			if s.Count == 1 {
				return nil // undefined, and not read
			}
			std = s.StdSample
		}
		if !scaleFinite(std) || std < 0 {
			return fmt.Errorf("invalid summary: %s std %v over %d finite values", o.Std, std, s.Count)
		}
	}
	return nil
}

// fitRangeCheck makes sure Forward maps min and max (and so, being monotone,
// every finite value of the column) to finite values, and that Inverse
// maps those back to finite values.
func fitRangeCheck(p Params, s Summary) error {
	for _, x := range [2]float64{s.Min, s.Max} {
		y := p.Forward(x)
		if !scaleFinite(x-p.Center) || !scaleFinite(y) || !scaleFinite(p.Inverse(y)) {
			return fmt.Errorf("%s: %w: value %v maps outside the float64 range with center %v, scale %v",
				p.Method, ErrParamOverflow, x, p.Center, p.Scale)
		}
	}
	return nil
}

// Forward scales one value: (x - Center) / Scale evaluated exactly and
// rounded once to the nearest float64, ties to even (roundTiesToEven,
// IEEE 754-2019 section 4.3.1), with gradual underflow, also when
// x - Center is not a float64 or overflows. A correctly rounded result is
// unique, so Forward has the same bits on every CPU whatever a target does
// with intermediate steps; and unlike the two roundings of
// float64(x-Center) / Scale it lets Inverse bring x back within
// ulp(x) + ulp(Center) (see Inverse).
//
// NaN stays NaN; ±Inf map to ±Inf; x == Center gives +0 (-0 for x = -0
// and Center = +0, as IEEE 754 subtraction gives). With a
// non-finite Center or a zero, infinite or NaN Scale (Params that fail
// Validate), Forward returns float64(x-Center) / Scale.
//
// Transform applies the same computation (tfForward) to whole arrays;
// Forward is its one-value case, so the two agree bit for bit.
func (p Params) Forward(x float64) float64 {
	var y [1]float64
	tfForward(y[:], []float64{x}, p.Center, p.Scale)
	return y[0]
}

// Inverse maps a scaled value back to original units: y*Scale + Center
// with a single rounding, math.FMA(y, Scale, Center). math.FMA is
// specified as one correctly rounded operation whether the CPU has a fused
// multiply-add instruction or Go falls back to its software
// implementation, so Inverse has the same bits on every platform (a plain
// y*Scale + Center would not: the Go specification lets the compiler fuse
// it on some targets and not on others).
//
// With Forward correctly rounded, Inverse(Forward(x)) is within
// ulp(x) + ulp(Center) of x whenever Forward(x) is a normal float64 (see
// TestRoundTrip for the argument and the subnormal case).
func (p Params) Inverse(y float64) float64 { return math.FMA(y, p.Scale, p.Center) }

// Transform scales a numeric array into a new float64 array (float32 when
// asFloat32), allocated from mem. Nulls stay null, NaN stays NaN.
//
// Every value x is converted with float64(x) (exact for float32 and for
// integers of magnitude up to 2^53, rounded to nearest beyond) and mapped
// with Forward; a float32 output is float32(Forward(x)), rounded once from
// the float64 result. Values under null slots are unspecified. arr may be a
// slice (non-zero offset). Supported types: int8 to int64, uint8 to uint64,
// float32 and float64; any other type is an error wrapping arrow.ErrType.
func Transform(mem memory.Allocator, arr arrow.Array, p Params, asFloat32 bool) (arrow.Array, error) {
	return tfTransform(mem, arr, p, asFloat32)
}

func scaleFinite(x float64) bool { return !math.IsInf(x, 0) && !math.IsNaN(x) }

// exactRat returns the exact value of a finite float64.
func exactRat(x float64) *big.Rat { return new(big.Rat).SetFloat64(x) }
