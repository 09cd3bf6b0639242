// Package model holds loadline's format-neutral graph: the data a decoder
// produces and the measuring code consumes. The types carry no behaviour
// beyond accessors; decoding lives in model/onnx, computing in measure.
package model

import "fmt"

// DType is an element type. The numbering follows the ONNX standard's
// TensorProto.DataType so that decoders can convert with a cast; other
// formats map onto it.
type DType int32

// The element types of the ONNX standard, up to IR version 11.
const (
	Undefined      DType = 0
	Float32        DType = 1
	Uint8          DType = 2
	Int8           DType = 3
	Uint16         DType = 4
	Int16          DType = 5
	Int32          DType = 6
	Int64          DType = 7
	String         DType = 8
	Bool           DType = 9
	Float16        DType = 10
	Float64        DType = 11
	Uint32         DType = 12
	Uint64         DType = 13
	Complex64      DType = 14
	Complex128     DType = 15
	BFloat16       DType = 16
	Float8E4M3FN   DType = 17
	Float8E4M3FNUZ DType = 18
	Float8E5M2     DType = 19
	Float8E5M2FNUZ DType = 20
	Uint4          DType = 21
	Int4           DType = 22
	Float4E2M1     DType = 23
)

type dtypeInfo struct {
	name string
	bits int // storage bits per element; 0 for variable-size (string)
}

var dtypes = map[DType]dtypeInfo{
	Undefined:      {"undefined", 0},
	Float32:        {"float32", 32},
	Uint8:          {"uint8", 8},
	Int8:           {"int8", 8},
	Uint16:         {"uint16", 16},
	Int16:          {"int16", 16},
	Int32:          {"int32", 32},
	Int64:          {"int64", 64},
	String:         {"string", 0},
	Bool:           {"bool", 8},
	Float16:        {"float16", 16},
	Float64:        {"float64", 64},
	Uint32:         {"uint32", 32},
	Uint64:         {"uint64", 64},
	Complex64:      {"complex64", 64},
	Complex128:     {"complex128", 128},
	BFloat16:       {"bfloat16", 16},
	Float8E4M3FN:   {"float8e4m3fn", 8},
	Float8E4M3FNUZ: {"float8e4m3fnuz", 8},
	Float8E5M2:     {"float8e5m2", 8},
	Float8E5M2FNUZ: {"float8e5m2fnuz", 8},
	Uint4:          {"uint4", 4},
	Int4:           {"int4", 4},
	Float4E2M1:     {"float4e2m1", 4},
}

// Known reports whether d is one of the element types this package names.
func (d DType) Known() bool {
	_, ok := dtypes[d]
	return ok && d != Undefined
}

// String returns the lower-case name used in loadline's JSON and reports.
func (d DType) String() string {
	if info, ok := dtypes[d]; ok {
		return info.name
	}
	return fmt.Sprintf("dtype(%d)", int32(d))
}

// Bits is the storage size of one element in bits: 4 for int4, 8 for int8,
// 0 for strings and unknown types, whose size cannot be known statically.
func (d DType) Bits() int { return dtypes[d].bits }

// StorageBytes is the number of bytes n elements of d occupy when packed as
// the standard stores them (sub-byte types pack two to a byte, rounded up).
// It returns -1 when the size is not static (strings, unknown types) or
// overflows int64.
func (d DType) StorageBytes(n int64) int64 {
	b := int64(d.Bits())
	if b == 0 || n < 0 {
		return -1
	}
	if b < 8 {
		return n/8*b + (n%8*b+7)/8
	}
	if n > (1<<63-1)/(b/8) {
		return -1 // the size overflows int64
	}
	return n * (b / 8)
}

// IsFloat reports whether d is a floating-point type of any width.
func (d DType) IsFloat() bool {
	switch d {
	case Float32, Float64, Float16, BFloat16, Float8E4M3FN, Float8E4M3FNUZ, Float8E5M2, Float8E5M2FNUZ, Float4E2M1:
		return true
	}
	return false
}

// IsInteger reports whether d is a signed or unsigned integer type.
func (d DType) IsInteger() bool {
	switch d {
	case Uint8, Int8, Uint16, Int16, Int32, Int64, Uint32, Uint64, Uint4, Int4:
		return true
	}
	return false
}

// ParseDType maps a name as String prints it back to its DType.
func ParseDType(s string) (DType, bool) {
	for d, info := range dtypes {
		if info.name == s {
			return d, true
		}
	}
	return Undefined, false
}
