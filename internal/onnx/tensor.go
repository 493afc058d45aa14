package onnx

import (
	"fmt"
	"math"
)

// DataType is an element type code of the ONNX IR (TensorProto.DataType).
type DataType int32

// The ONNX element types (onnx.proto, TensorProto.DataType). The executor
// computes with Float and Int64; the integer types of the smaller widths and
// Bool are read into Tensor.Ints; the others are kept opaque.
const (
	Undefined DataType = 0
	Float     DataType = 1
	Uint8     DataType = 2
	Int8      DataType = 3
	Uint16    DataType = 4
	Int16     DataType = 5
	Int32     DataType = 6
	Int64     DataType = 7
	String    DataType = 8
	Bool      DataType = 9
	Float16   DataType = 10
	Double    DataType = 11
	Uint32    DataType = 12
	Uint64    DataType = 13
	Complex64 DataType = 14
	Complex   DataType = 15
	BFloat16  DataType = 16
)

var dataTypeNames = map[DataType]string{
	Undefined: "undefined", Float: "float32", Uint8: "uint8", Int8: "int8",
	Uint16: "uint16", Int16: "int16", Int32: "int32", Int64: "int64",
	String: "string", Bool: "bool", Float16: "float16", Double: "float64",
	Uint32: "uint32", Uint64: "uint64", Complex64: "complex64",
	Complex: "complex128", BFloat16: "bfloat16",
}

// String names the type ("float32", "int64", ...).
func (d DataType) String() string {
	if s, ok := dataTypeNames[d]; ok {
		return s
	}
	return fmt.Sprintf("datatype(%d)", int32(d))
}

// IsInt reports whether values of d are held in Tensor.Ints.
func (d DataType) IsInt() bool {
	switch d {
	case Int64, Int32, Int16, Int8, Uint16, Uint8, Bool, Uint32:
		return true
	}
	return false
}

// Tensor is a dense row-major array. A float tensor (DType Float, or the zero
// value Undefined) keeps its elements in Data; an integer or boolean tensor
// keeps them in Ints. Shape nil or empty means a scalar (one element).
type Tensor struct {
	Shape []int
	Data  []float32
	Ints  []int64
	DType DataType
}

// New returns a zero float tensor of the given shape.
func New(shape ...int) *Tensor {
	return &Tensor{Shape: append([]int(nil), shape...), Data: make([]float32, Numel(shape)), DType: Float}
}

// FromData returns a float tensor that uses data (not copied) as its elements.
// It panics if len(data) does not match the shape; it is meant for literals
// and for code that already knows the sizes.
func FromData(data []float32, shape ...int) *Tensor {
	if len(data) != Numel(shape) {
		panic(fmt.Sprintf("onnx.FromData: %d values for shape %v", len(data), shape))
	}
	return &Tensor{Shape: append([]int(nil), shape...), Data: data, DType: Float}
}

// FromInts returns an int64 tensor that uses v (not copied) as its elements.
// It panics on a size mismatch, like FromData.
func FromInts(v []int64, shape ...int) *Tensor {
	if len(v) != Numel(shape) {
		panic(fmt.Sprintf("onnx.FromInts: %d values for shape %v", len(v), shape))
	}
	return &Tensor{Shape: append([]int(nil), shape...), Ints: v, DType: Int64}
}

// IsFloat reports whether t holds float32 elements in Data.
func (t *Tensor) IsFloat() bool { return t.DType == Float || t.DType == Undefined }

// Len is the number of elements the shape describes.
func (t *Tensor) Len() int { return Numel(t.Shape) }

// Rank is the number of dimensions.
func (t *Tensor) Rank() int { return len(t.Shape) }

// Clone returns a deep copy.
func (t *Tensor) Clone() *Tensor {
	c := &Tensor{Shape: append([]int(nil), t.Shape...), DType: t.DType}
	if t.Data != nil {
		c.Data = append([]float32(nil), t.Data...)
	}
	if t.Ints != nil {
		c.Ints = append([]int64(nil), t.Ints...)
	}
	return c
}

// Reshaped returns a tensor sharing t's elements with another shape of the
// same size.
func (t *Tensor) Reshaped(shape ...int) (*Tensor, error) {
	if Numel(shape) != t.Len() {
		return nil, fmt.Errorf("reshape %v to %v: element counts differ", t.Shape, shape)
	}
	return &Tensor{Shape: append([]int(nil), shape...), Data: t.Data, Ints: t.Ints, DType: t.DType}, nil
}

// Check verifies that the element slice matches the shape and type.
func (t *Tensor) Check() error {
	n, err := CheckedNumel(t.Shape)
	if err != nil {
		return err
	}
	if t.IsFloat() {
		if len(t.Data) != n {
			return fmt.Errorf("float tensor of shape %v has %d values", t.Shape, len(t.Data))
		}
		return nil
	}
	if !t.DType.IsInt() {
		return fmt.Errorf("tensor of type %v has no values this package can compute with", t.DType)
	}
	if len(t.Ints) != n {
		return fmt.Errorf("%v tensor of shape %v has %d values", t.DType, t.Shape, len(t.Ints))
	}
	return nil
}

// String summarises the tensor (type and shape, not the values).
func (t *Tensor) String() string {
	if t == nil {
		return "<nil tensor>"
	}
	dt := t.DType
	if dt == Undefined {
		dt = Float
	}
	return fmt.Sprintf("%v%v", dt, t.Shape)
}

// Numel multiplies the dims; callers have validated them.
func Numel(shape []int) int {
	n := 1
	for _, d := range shape {
		n *= d
	}
	return n
}

// MaxElements bounds any tensor this package decodes or creates: 2^27
// elements (512 MiB of float32), above what a CNN classifier's layers on a
// model grid need, so that a hostile shape is an error and not an
// exhausted memory.
const MaxElements = 1 << 27

// CheckedNumel multiplies dims with negative and overflow checks.
func CheckedNumel(shape []int) (int, error) {
	n := 1
	for _, d := range shape {
		if d < 0 {
			return 0, fmt.Errorf("negative dimension in shape %v", shape)
		}
		if d != 0 && n > MaxElements/d {
			return 0, fmt.Errorf("shape %v has more than %d elements", shape, MaxElements)
		}
		n *= d
	}
	return n, nil
}

// SameShape reports whether a and b are equal shapes.
func SameShape(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// MaxAbsDiff returns the largest absolute elementwise difference of two float
// tensors of the same shape, or +Inf when shapes differ or a value is NaN in
// only one of them.
func MaxAbsDiff(a, b *Tensor) float64 {
	if !SameShape(a.Shape, b.Shape) || len(a.Data) != len(b.Data) {
		return math.Inf(1)
	}
	m := 0.0
	for i := range a.Data {
		x, y := float64(a.Data[i]), float64(b.Data[i])
		if math.IsNaN(x) || math.IsNaN(y) {
			if math.IsNaN(x) != math.IsNaN(y) {
				return math.Inf(1)
			}
			continue
		}
		if d := math.Abs(x - y); d > m {
			m = d
		}
	}
	return m
}
