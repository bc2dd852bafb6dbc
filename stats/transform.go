package stats

import (
	"fmt"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/bitutil"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// InverseTransform maps a float64 or float32 array of scaled values back to
// original units with Inverse, into a new float64 array allocated from mem.
// Nulls stay null, NaN stays NaN. Any other input type is an error wrapping
// arrow.ErrType.
func InverseTransform(mem memory.Allocator, arr arrow.Array, p Params) (arrow.Array, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	switch arr.(type) {
	case *array.Float64, *array.Float32:
	default:
		return nil, fmt.Errorf("%w: cannot invert scaled values of type %s", arrow.ErrType, arr.DataType())
	}
	n := arr.Len()
	values := memory.NewResizableBuffer(mem)
	defer values.Release()
	values.Resize(arrow.Float64Traits.BytesRequired(n))
	dst := arrow.Float64Traits.CastFromBytes(values.Bytes())
	switch a := arr.(type) {
	case *array.Float64:
		tfInverse(dst, a.Float64Values(), p.Center, p.Scale)
	case *array.Float32:
		tfInverse(dst, a.Float32Values(), p.Center, p.Scale)
	}
	return tfFinish(mem, arr, arrow.PrimitiveTypes.Float64, values), nil
}

func tfTransform(mem memory.Allocator, arr arrow.Array, p Params, asFloat32 bool) (arrow.Array, error) {
	if err := p.Validate(); err != nil {
		return nil, err
	}
	if !tfScalable(arr) {
		return nil, fmt.Errorf("%w: cannot scale values of type %s", arrow.ErrType, arr.DataType())
	}
	n := arr.Len()
	values := memory.NewResizableBuffer(mem)
	defer values.Release()
	c, s := p.Center, p.Scale
	if asFloat32 {
		values.Resize(arrow.Float32Traits.BytesRequired(n))
		dst := arrow.Float32Traits.CastFromBytes(values.Bytes())
		switch a := arr.(type) {
		case *array.Int8:
			tfForward32(dst, a.Int8Values(), c, s)
		case *array.Int16:
			tfForward32(dst, a.Int16Values(), c, s)
		case *array.Int32:
			tfForward32(dst, a.Int32Values(), c, s)
		case *array.Int64:
			tfForward32(dst, a.Int64Values(), c, s)
		case *array.Uint8:
			tfForward32(dst, a.Uint8Values(), c, s)
		case *array.Uint16:
			tfForward32(dst, a.Uint16Values(), c, s)
		case *array.Uint32:
			tfForward32(dst, a.Uint32Values(), c, s)
		case *array.Uint64:
			tfForward32(dst, a.Uint64Values(), c, s)
		case *array.Float32:
			tfForward32(dst, a.Float32Values(), c, s)
		case *array.Float64:
			tfForward32(dst, a.Float64Values(), c, s)
		}
		return tfFinish(mem, arr, arrow.PrimitiveTypes.Float32, values), nil
	}
	values.Resize(arrow.Float64Traits.BytesRequired(n))
	dst := arrow.Float64Traits.CastFromBytes(values.Bytes())
	switch a := arr.(type) {
	case *array.Int8:
		tfForward64(dst, a.Int8Values(), c, s)
	case *array.Int16:
		tfForward64(dst, a.Int16Values(), c, s)
	case *array.Int32:
		tfForward64(dst, a.Int32Values(), c, s)
	case *array.Int64:
		tfForward64(dst, a.Int64Values(), c, s)
	case *array.Uint8:
		tfForward64(dst, a.Uint8Values(), c, s)
	case *array.Uint16:
		tfForward64(dst, a.Uint16Values(), c, s)
	case *array.Uint32:
		tfForward64(dst, a.Uint32Values(), c, s)
	case *array.Uint64:
		tfForward64(dst, a.Uint64Values(), c, s)
	case *array.Float32:
		tfForward64(dst, a.Float32Values(), c, s)
	case *array.Float64:
		tfForward64(dst, a.Float64Values(), c, s)
	}
	return tfFinish(mem, arr, arrow.PrimitiveTypes.Float64, values), nil
}

// tfScalable reports whether Transform accepts arr: a concrete Arrow array
// of one of the numeric types int8 to uint64, float32 or float64.
func tfScalable(arr arrow.Array) bool {
	switch arr.(type) {
	case *array.Int8, *array.Int16, *array.Int32, *array.Int64,
		*array.Uint8, *array.Uint16, *array.Uint32, *array.Uint64,
		*array.Float32, *array.Float64:
		return true
	}
	return false
}

// The loops below and Params.Forward/Inverse were checked with
// go build -gcflags=-S for GOAMD64=v3 and for GOARCH=arm64 (Go 1.26): no
// fused multiply-add instruction (VFMADD*, FMADDD and relatives) appears.
// A plain x*y + z compiles to one on both targets.

// tfNumber is every element type Transform reads. Each instantiation below
// gets its own machine code (one GC shape per basic type), so the loops
// carry no interface or dictionary call per value.
type tfNumber interface {
	~int8 | ~int16 | ~int32 | ~int64 |
		~uint8 | ~uint16 | ~uint32 | ~uint64 |
		~float32 | ~float64
}

// tfForward64 writes Forward(float64(src[i])) into dst[i].
func tfForward64[T tfNumber](dst []float64, src []T, c, s float64) {
	dst = dst[:len(src)]
	for i, x := range src {
		dst[i] = (float64(x) - c) / s
	}
}

// tfForward32 writes float32(Forward(float64(src[i]))) into dst[i]: the
// float64 result rounded once to float32.
func tfForward32[T tfNumber](dst []float32, src []T, c, s float64) {
	dst = dst[:len(src)]
	for i, x := range src {
		dst[i] = float32((float64(x) - c) / s)
	}
}

// tfInverse writes Inverse(float64(src[i])) into dst[i]. The conversion
// float64(y*s) rounds the product before the addition, as in
// Params.Inverse, so the compiler may not fuse them into an FMA.
func tfInverse[T float32 | float64](dst []float64, src []T, c, s float64) {
	dst = dst[:len(src)]
	for i, y := range src {
		dst[i] = float64(float64(y)*s) + c
	}
}

// tfFinish wraps values into a new array of type dt with the length and
// validity of arr. It does not take over the caller's reference to values.
func tfFinish(mem memory.Allocator, arr arrow.Array, dt arrow.DataType, values *memory.Buffer) arrow.Array {
	validity, nulls := tfValidity(mem, arr)
	if validity != nil {
		defer validity.Release()
	}
	data := array.NewData(dt, arr.Len(), []*memory.Buffer{validity, values}, nil, nulls, 0)
	defer data.Release()
	return array.MakeFromData(data)
}

// tfValidity returns a reference to a validity bitmap for arr's slots at
// offset 0, or nil when arr has no nulls. It shares arr's bitmap when the
// offset allows (0, or a whole number of bytes) and copies it otherwise.
func tfValidity(mem memory.Allocator, arr arrow.Array) (*memory.Buffer, int) {
	nulls := arr.NullN()
	if nulls == 0 {
		return nil, 0
	}
	data := arr.Data()
	src := data.Buffers()[0]
	off, n := data.Offset(), data.Len()
	switch {
	case off == 0:
		src.Retain()
		return src, nulls
	case off%8 == 0:
		return memory.SliceBuffer(src, off/8, int(bitutil.BytesForBits(int64(n)))), nulls
	}
	dst := memory.NewResizableBuffer(mem)
	dst.Resize(int(bitutil.BytesForBits(int64(n))))
	bitutil.CopyBitmap(src.Bytes(), off, n, dst.Bytes(), 0)
	return dst, nulls
}
