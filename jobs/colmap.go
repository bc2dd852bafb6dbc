package jobs

import (
	"fmt"
	"math"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"

	"github.com/lakescale/lakescale/manifests"
	"github.com/lakescale/lakescale/stats"
)

// InvertedMetadataKey is the Parquet key-value metadata key under which
// each file written by invert carries the parameters it was mapped back
// with (the same JSON as manifests.MetadataKey holds in scaled files). A
// different key keeps an inverted file from passing for a scaled one.
const InvertedMetadataKey = "lakescale.inverted"

// metaKey is the footer key pass two records the parameters under.
func (p *plan) metaKey() string {
	if p.inverted {
		return InvertedMetadataKey
	}
	return manifests.MetadataKey
}

// columnMapper returns how pass two maps selected column j of one file:
// scaled with stats.Transform, or mapped back with stats.InverseTransform
// for invert. When the plan has fitted bounds, the mapper also counts the
// finite input values below each column's fitted min and above its max
// (after conversion to float64, as scaling converts them); counts reports
// them per column once the file is done.
func (p *plan) columnMapper(cfg *Config, params []stats.Params) (mapCol func(j int, a arrow.Array) (arrow.Array, error), counts func() []manifests.OutOfRange) {
	var outside []manifests.OutOfRange
	if p.bounds != nil {
		outside = make([]manifests.OutOfRange, len(p.Columns))
	}
	mapCol = func(j int, a arrow.Array) (arrow.Array, error) {
		if outside != nil {
			b, c := countOutside(a, p.bounds[j][0], p.bounds[j][1])
			outside[j].Below += b
			outside[j].Above += c
		}
		if p.inverted {
			return stats.InverseTransform(memory.DefaultAllocator, a, params[j])
		}
		return stats.Transform(memory.DefaultAllocator, a, params[j], cfg.Float32)
	}
	return mapCol, func() []manifests.OutOfRange { return outside }
}

// valueMapper is columnMapper for batches of dense values (arrowio's
// rewrite): mapVals(j, vals, out) fills out with selected column j's
// values scaled (or mapped back), counting values outside the fitted
// bounds as columnMapper does and, under InfError, refusing infinite
// results.
func (p *plan) valueMapper(cfg *Config, params []stats.Params) (mapVals func(j int, vals, out any) error, counts func() []manifests.OutOfRange) {
	var outside []manifests.OutOfRange
	if p.bounds != nil {
		outside = make([]manifests.OutOfRange, len(p.Columns))
	}
	mapVals = func(j int, vals, out any) error {
		if outside != nil {
			b, c, err := countOutsideValues(vals, p.bounds[j][0], p.bounds[j][1])
			if err != nil {
				return err
			}
			outside[j].Below += b
			outside[j].Above += c
		}
		var err error
		if p.inverted {
			dst, ok := out.([]float64)
			if !ok {
				return fmt.Errorf("cannot map back into %T", out)
			}
			err = stats.InverseValues(dst, vals, params[j])
		} else {
			err = stats.TransformValues(out, vals, params[j])
		}
		if err != nil {
			return err
		}
		if cfg.InfPolicy == InfError {
			if n := countInfValues(out); n > 0 {
				return fmt.Errorf("%w: %d scaled values are infinite (want finite values; --on-infinity skip lets them through)", ErrInfinite, n)
			}
		}
		return nil
	}
	return mapVals, func() []manifests.OutOfRange { return outside }
}

// countOutsideValues is countOutside for dense values.
func countOutsideValues(vals any, lo, hi float64) (below, above uint64, err error) {
	switch v := vals.(type) {
	case []float64:
		below, above = outsideDense(v, lo, hi)
	case []float32:
		below, above = outsideDense(v, lo, hi)
	case []int8:
		below, above = outsideDense(v, lo, hi)
	case []int16:
		below, above = outsideDense(v, lo, hi)
	case []int32:
		below, above = outsideDense(v, lo, hi)
	case []int64:
		below, above = outsideDense(v, lo, hi)
	case []uint8:
		below, above = outsideDense(v, lo, hi)
	case []uint16:
		below, above = outsideDense(v, lo, hi)
	case []uint32:
		below, above = outsideDense(v, lo, hi)
	case []uint64:
		below, above = outsideDense(v, lo, hi)
	default:
		err = fmt.Errorf("cannot compare values of Go type %T with the fitted range", vals)
	}
	return below, above, err
}

func outsideDense[T int8 | int16 | int32 | int64 | uint8 | uint16 | uint32 | uint64 | float32 | float64](vals []T, lo, hi float64) (below, above uint64) {
	for _, v := range vals {
		b, a := outside(float64(v), lo, hi)
		below, above = below+b, above+a
	}
	return below, above
}

// countInfValues counts infinite values in a []float64 or []float32.
func countInfValues(out any) int {
	n := 0
	switch v := out.(type) {
	case []float64:
		for _, x := range v {
			if math.IsInf(x, 0) {
				n++
			}
		}
	case []float32:
		for _, x := range v {
			if math.IsInf(float64(x), 0) {
				n++
			}
		}
	}
	return n
}

// boundsOf is each column's fitted [min, max] from its statistics.
func boundsOf(cols []manifests.Column) [][2]float64 {
	b := make([][2]float64, len(cols))
	for j, c := range cols {
		b[j] = [2]float64{float64(c.Stats.Min), float64(c.Stats.Max)}
	}
	return b
}

// countOutside counts the finite values of a numeric array below lo and
// above hi. NaN bounds (a column fitted without finite values) count
// nothing.
func countOutside(arr arrow.Array, lo, hi float64) (below, above uint64) {
	switch a := arr.(type) {
	case *array.Float64:
		return outsideOf(a.Float64Values(), a, lo, hi)
	case *array.Float32:
		return outsideOf(a.Float32Values(), a, lo, hi)
	case *array.Int8:
		return outsideOf(a.Int8Values(), a, lo, hi)
	case *array.Int16:
		return outsideOf(a.Int16Values(), a, lo, hi)
	case *array.Int32:
		return outsideOf(a.Int32Values(), a, lo, hi)
	case *array.Int64:
		return outsideOf(a.Int64Values(), a, lo, hi)
	case *array.Uint8:
		return outsideOf(a.Uint8Values(), a, lo, hi)
	case *array.Uint16:
		return outsideOf(a.Uint16Values(), a, lo, hi)
	case *array.Uint32:
		return outsideOf(a.Uint32Values(), a, lo, hi)
	case *array.Uint64:
		return outsideOf(a.Uint64Values(), a, lo, hi)
	}
	return 0, 0
}

func outsideOf[T int8 | int16 | int32 | int64 | uint8 | uint16 | uint32 | uint64 | float32 | float64](vals []T, arr arrow.Array, lo, hi float64) (below, above uint64) {
	if arr.NullN() == 0 {
		return outsideDense(vals, lo, hi)
	}
	for i, v := range vals {
		if arr.IsValid(i) {
			b, a := outside(float64(v), lo, hi)
			below, above = below+b, above+a
		}
	}
	return below, above
}

// outside is 1, 0 for a finite x below lo, 0, 1 for a finite x above hi.
func outside(x, lo, hi float64) (below, above uint64) {
	switch {
	case x < lo && !math.IsInf(x, -1):
		return 1, 0
	case x > hi && !math.IsInf(x, 1):
		return 0, 1
	}
	return 0, 0
}

// addOutside sums per-file counts into the manifest's columns and adds
// the warning code WarnOutsideFittedRange where any value fell outside.
func addOutside(cols []manifests.Column, outs []written) {
	for j := range cols {
		var sum manifests.OutOfRange
		for _, o := range outs {
			if o.Outside != nil {
				sum.Below += o.Outside[j].Below
				sum.Above += o.Outside[j].Above
			}
		}
		cols[j].OutOfRange = &sum
		if sum.Below+sum.Above > 0 {
			cols[j].Warnings = append(append([]string{}, cols[j].Warnings...), WarnOutsideFittedRange)
		}
	}
}

// WarnOutsideFittedRange is the manifest warning code of a column some of
// whose scaled values lay outside the [min, max] the parameters were
// fitted on (apply, or run with a fit filter). It is a warning, not an
// error: the values are scaled with the same parameters all the same.
const WarnOutsideFittedRange = "outside_fitted_range"

// paramsOf is the scaling a manifest column records.
func paramsOf(c manifests.Column) stats.Params {
	return stats.Params{Method: stats.Method(c.Method), Center: float64(c.Params.Center), Scale: float64(c.Params.Scale)}
}
