package stats_test

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"

	"github.com/lakescale/lakescale/stats"
)

// tfDense returns the valid values of a numeric array as a dense slice of
// its Go element type (what a Parquet column reader hands out) and their
// slot positions.
func tfDense(arr arrow.Array) (any, []int) {
	vals := reflect.ValueOf(arr).MethodByName("Value")
	var pos []int
	var dense reflect.Value
	for i := range arr.Len() {
		if arr.IsNull(i) {
			continue
		}
		v := vals.Call([]reflect.Value{reflect.ValueOf(i)})[0]
		if !dense.IsValid() {
			dense = reflect.MakeSlice(reflect.SliceOf(v.Type()), 0, arr.Len())
		}
		dense = reflect.Append(dense, v)
		pos = append(pos, i)
	}
	if !dense.IsValid() {
		return nil, nil
	}
	return dense.Interface(), pos
}

// TestTransformValuesMatchesTransform: the batch form gives, bit for bit,
// the values Transform puts in the valid slots of its output array, for
// every input type, into float64 and float32; InverseValues likewise
// matches InverseTransform.
func TestTransformValuesMatchesTransform(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	inputs := tfInputs(mem, rand.New(rand.NewPCG(42, 2)))
	defer func() {
		for _, a := range inputs {
			a.Release()
		}
	}()
	params := []stats.Params{
		{Method: stats.ZScore, Options: stats.Options{Std: stats.StdPopulation}, Center: -12.5, Scale: 3.1},
		{Method: stats.MinMax, Options: stats.Options{RangeMin: 0, RangeMax: 1}, Center: 1e-310, Scale: 7e-300},
	}
	bits := func(a arrow.Array, i int) uint64 {
		switch a := a.(type) {
		case *array.Float64:
			return math.Float64bits(a.Value(i))
		case *array.Float32:
			return uint64(math.Float32bits(a.Value(i)))
		}
		t.Fatalf("output type %s", a.DataType())
		return 0
	}
	for _, arr := range inputs {
		src, pos := tfDense(arr)
		if src == nil {
			continue
		}
		for _, p := range params {
			for _, as32 := range []bool{false, true} {
				name := fmt.Sprintf("%s %s f32=%v", arr.DataType(), p.Method, as32)
				want, err := stats.Transform(mem, arr, p, as32)
				if err != nil {
					t.Fatal(err)
				}
				var dst any = make([]float64, len(pos)+3)
				if as32 {
					dst = make([]float32, len(pos)+3)
				}
				if err := stats.TransformValues(dst, src, p); err != nil {
					t.Fatalf("%s: %v", name, err)
				}
				for k, i := range pos {
					var got uint64
					if as32 {
						got = uint64(math.Float32bits(dst.([]float32)[k]))
					} else {
						got = math.Float64bits(dst.([]float64)[k])
					}
					if got != bits(want, i) {
						t.Errorf("%s: value %d: %x, Transform gives %x", name, k, got, bits(want, i))
					}
				}
				want.Release()
			}
			if _, ok := src.([]float64); ok || arr.DataType().ID() == arrow.FLOAT32 {
				want, err := stats.InverseTransform(mem, arr, p)
				if err != nil {
					t.Fatal(err)
				}
				dst := make([]float64, len(pos))
				if err := stats.InverseValues(dst, src, p); err != nil {
					t.Fatal(err)
				}
				for k, i := range pos {
					if math.Float64bits(dst[k]) != bits(want, i) {
						t.Errorf("%s inverse: value %d differs", arr.DataType(), k)
					}
				}
				want.Release()
			}
		}
	}
}

func TestTransformValuesErrors(t *testing.T) {
	p := stats.Params{Method: stats.ZScore, Center: 1, Scale: 2}
	if err := stats.TransformValues(make([]float64, 1), []float64{1, 2}, p); !errors.Is(err, arrow.ErrIndex) {
		t.Errorf("short dst: %v", err)
	}
	if err := stats.TransformValues(make([]int64, 1), []float64{1}, p); !errors.Is(err, arrow.ErrType) {
		t.Errorf("int dst: %v", err)
	}
	if err := stats.TransformValues(make([]float64, 1), []string{"x"}, p); !errors.Is(err, arrow.ErrType) {
		t.Errorf("string src: %v", err)
	}
	if err := stats.TransformValues(make([]float64, 1), []float64{1}, stats.Params{Method: stats.ZScore, Scale: 0}); err == nil {
		t.Error("zero scale accepted")
	}
	if err := stats.InverseValues(make([]float64, 1), []int32{1}, p); !errors.Is(err, arrow.ErrType) {
		t.Errorf("inverse of int32: %v", err)
	}
	if err := stats.InverseValues(make([]float64, 0), []float64{1}, p); !errors.Is(err, arrow.ErrIndex) {
		t.Errorf("inverse short dst: %v", err)
	}
}
