package checkpoint

import (
	"encoding/binary"
	"fmt"
	"math"
)

// DType is the element type of a tensor, named as in the safetensors header.
// Every multi-byte type is stored little-endian.
type DType uint8

// The element types a checkpoint can hold. F32, F64, I32, I64 and U8 have
// typed constructors and accessors; the others are the remaining standard
// safetensors types, carried as raw bytes so that DecodeSafetensors can read
// any common file.
const (
	InvalidDType DType = iota
	BOOL               // 1 byte, 0 or 1
	U8                 // unsigned 8-bit integer
	I8                 // signed 8-bit integer
	U16                // unsigned 16-bit integer
	I16                // signed 16-bit integer
	F16                // IEEE 754 half precision
	BF16               // bfloat16
	U32                // unsigned 32-bit integer
	I32                // signed 32-bit integer
	F32                // IEEE 754 single precision
	U64                // unsigned 64-bit integer
	I64                // signed 64-bit integer
	F64                // IEEE 754 double precision
	numDTypes
)

var dtypeNames = [numDTypes]string{
	InvalidDType: "",
	BOOL:         "BOOL",
	U8:           "U8",
	I8:           "I8",
	U16:          "U16",
	I16:          "I16",
	F16:          "F16",
	BF16:         "BF16",
	U32:          "U32",
	I32:          "I32",
	F32:          "F32",
	U64:          "U64",
	I64:          "I64",
	F64:          "F64",
}

var dtypeSizes = [numDTypes]int{
	BOOL: 1, U8: 1, I8: 1,
	U16: 2, I16: 2, F16: 2, BF16: 2,
	U32: 4, I32: 4, F32: 4,
	U64: 8, I64: 8, F64: 8,
}

// ParseDType returns the type named s ("F32", "I64", ...), and false if s
// names no type this package knows.
func ParseDType(s string) (DType, bool) {
	for d := BOOL; d < numDTypes; d++ {
		if dtypeNames[d] == s {
			return d, true
		}
	}
	return InvalidDType, false
}

// String returns the safetensors name of d, or "DType(n)" for an invalid one.
func (d DType) String() string {
	if d.Valid() {
		return dtypeNames[d]
	}
	return fmt.Sprintf("DType(%d)", uint8(d))
}

// MarshalText encodes d as its safetensors name, for JSON summaries.
func (d DType) MarshalText() ([]byte, error) {
	if !d.Valid() {
		return nil, fmt.Errorf("checkpoint: invalid dtype %d", uint8(d))
	}
	return []byte(dtypeNames[d]), nil
}

// Valid reports whether d is one of the types above.
func (d DType) Valid() bool { return d > InvalidDType && d < numDTypes }

// Size returns the size of one element in bytes, or 0 for an invalid type.
func (d DType) Size() int {
	if !d.Valid() {
		return 0
	}
	return dtypeSizes[d]
}

// Tensor is one named array: its element type, its shape (row-major, the
// last index varying fastest; an empty shape is a scalar) and its elements
// as raw little-endian bytes. len(Data) is always NumElements()*DType.Size()
// in a tensor built by the constructors below or returned by a decoder.
type Tensor struct {
	Name  string
	DType DType
	Shape []int
	Data  []byte
}

// NumElements returns the product of the shape (1 for a scalar). It panics
// if a dimension is negative or the product overflows int, which a decoded
// tensor never has.
func (t *Tensor) NumElements() int {
	n, ok := numElements(t.Shape)
	if !ok {
		panic(fmt.Sprintf("checkpoint: tensor %q: invalid shape %v", t.Name, t.Shape))
	}
	return n
}

// numElements returns the product of shape, and false if a dimension is
// negative or the product does not fit in an int.
func numElements(shape []int) (int, bool) {
	n := 1
	for _, d := range shape {
		if d < 0 {
			return 0, false
		}
		if d == 0 {
			n = 0
		}
	}
	if n == 0 {
		return 0, true
	}
	for _, d := range shape {
		if n > math.MaxInt/d {
			return 0, false
		}
		n *= d
	}
	return n, true
}

func checkLen(kind string, name string, shape []int, n int) {
	want, ok := numElements(shape)
	if !ok || want != n {
		panic(fmt.Sprintf("checkpoint: %s tensor %q: %d values for shape %v", kind, name, n, shape))
	}
}

// NewFloat32 returns an F32 tensor holding a copy of v. It panics if len(v)
// is not the product of shape.
func NewFloat32(name string, shape []int, v []float32) Tensor {
	checkLen("F32", name, shape, len(v))
	b := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	return Tensor{Name: name, DType: F32, Shape: cloneShape(shape), Data: b}
}

// NewFloat64 returns an F64 tensor holding a copy of v. It panics if len(v)
// is not the product of shape.
func NewFloat64(name string, shape []int, v []float64) Tensor {
	checkLen("F64", name, shape, len(v))
	b := make([]byte, 8*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint64(b[8*i:], math.Float64bits(x))
	}
	return Tensor{Name: name, DType: F64, Shape: cloneShape(shape), Data: b}
}

// NewInt32 returns an I32 tensor holding a copy of v. It panics if len(v) is
// not the product of shape.
func NewInt32(name string, shape []int, v []int32) Tensor {
	checkLen("I32", name, shape, len(v))
	b := make([]byte, 4*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint32(b[4*i:], uint32(x))
	}
	return Tensor{Name: name, DType: I32, Shape: cloneShape(shape), Data: b}
}

// NewInt64 returns an I64 tensor holding a copy of v. It panics if len(v) is
// not the product of shape.
func NewInt64(name string, shape []int, v []int64) Tensor {
	checkLen("I64", name, shape, len(v))
	b := make([]byte, 8*len(v))
	for i, x := range v {
		binary.LittleEndian.PutUint64(b[8*i:], uint64(x))
	}
	return Tensor{Name: name, DType: I64, Shape: cloneShape(shape), Data: b}
}

// NewUint8 returns a U8 tensor holding a copy of v. It panics if len(v) is
// not the product of shape.
func NewUint8(name string, shape []int, v []uint8) Tensor {
	checkLen("U8", name, shape, len(v))
	return Tensor{Name: name, DType: U8, Shape: cloneShape(shape), Data: append([]byte{}, v...)}
}

func cloneShape(s []int) []int {
	if s == nil {
		return []int{}
	}
	return append([]int{}, s...)
}

// typed checks that t holds n elements of type want, for the accessors.
func (t *Tensor) typed(want DType) (int, error) {
	if t.DType != want {
		return 0, fmt.Errorf("tensor %q is %v, want %v", t.Name, t.DType, want)
	}
	n, ok := numElements(t.Shape)
	if !ok || n*want.Size() != len(t.Data) {
		return 0, fmt.Errorf("tensor %q: %d data bytes do not match %v %v", t.Name, len(t.Data), t.DType, t.Shape)
	}
	return n, nil
}

// ReadFloat32s copies the elements of an F32 tensor into dst, which must
// have exactly NumElements() entries. It returns an error naming the tensor
// if the type or the length differs, and then leaves dst unchanged.
func (t *Tensor) ReadFloat32s(dst []float32) error {
	n, err := t.typed(F32)
	if err != nil {
		return err
	}
	if len(dst) != n {
		return fmt.Errorf("tensor %q has %d elements (shape %v), destination has %d", t.Name, n, t.Shape, len(dst))
	}
	for i := range dst {
		dst[i] = math.Float32frombits(binary.LittleEndian.Uint32(t.Data[4*i:]))
	}
	return nil
}

// Float32s returns a copy of the elements of an F32 tensor.
func (t *Tensor) Float32s() ([]float32, error) {
	n, err := t.typed(F32)
	if err != nil {
		return nil, err
	}
	v := make([]float32, n)
	return v, t.ReadFloat32s(v)
}

// ReadFloat64s copies the elements of an F64 tensor into dst, which must
// have exactly NumElements() entries.
func (t *Tensor) ReadFloat64s(dst []float64) error {
	n, err := t.typed(F64)
	if err != nil {
		return err
	}
	if len(dst) != n {
		return fmt.Errorf("tensor %q has %d elements (shape %v), destination has %d", t.Name, n, t.Shape, len(dst))
	}
	for i := range dst {
		dst[i] = math.Float64frombits(binary.LittleEndian.Uint64(t.Data[8*i:]))
	}
	return nil
}

// Float64s returns a copy of the elements of an F64 tensor.
func (t *Tensor) Float64s() ([]float64, error) {
	n, err := t.typed(F64)
	if err != nil {
		return nil, err
	}
	v := make([]float64, n)
	return v, t.ReadFloat64s(v)
}

// Int32s returns a copy of the elements of an I32 tensor.
func (t *Tensor) Int32s() ([]int32, error) {
	n, err := t.typed(I32)
	if err != nil {
		return nil, err
	}
	v := make([]int32, n)
	for i := range v {
		v[i] = int32(binary.LittleEndian.Uint32(t.Data[4*i:]))
	}
	return v, nil
}

// Int64s returns a copy of the elements of an I64 tensor.
func (t *Tensor) Int64s() ([]int64, error) {
	n, err := t.typed(I64)
	if err != nil {
		return nil, err
	}
	v := make([]int64, n)
	for i := range v {
		v[i] = int64(binary.LittleEndian.Uint64(t.Data[8*i:]))
	}
	return v, nil
}

// Uint8s returns a copy of the elements of a U8 tensor.
func (t *Tensor) Uint8s() ([]uint8, error) {
	if _, err := t.typed(U8); err != nil {
		return nil, err
	}
	return append([]uint8{}, t.Data...), nil
}
