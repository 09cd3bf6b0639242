package model

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
)

// Tensor is a constant: an initializer, a Constant node's value, or a tensor
// attribute. Its dims are always known. Its bytes are not copied out of the
// file at decode time; Data says where they are and how they are encoded.
type Tensor struct {
	Name  string
	DType DType
	Dims  []int64
	Data  TensorData
}

// Encoding says how a tensor's values are laid out in TensorData.
type Encoding uint8

// The layouts a tensor's values can have. The typed forms mirror the ONNX
// standard's repeated fields; a model builder uses EncodingNone for weights
// that are declared (size and type) but never materialised.
const (
	EncodingNone     Encoding = iota // no values: declared only
	EncodingRaw                      // little-endian bytes at the tensor's dtype
	EncodingFloat32s                 // fixed32 floats (float_data)
	EncodingInt32s                   // varint int32s (int32_data), also holding 8/16-bit types
	EncodingInt64s                   // varint int64s (int64_data)
	EncodingFloat64s                 // fixed64 doubles (double_data)
	EncodingUint64s                  // varint uint64s (uint64_data)
	EncodingStrings                  // one byte string per element (string_data)
	EncodingExternal                 // raw bytes in an external file
)

// TensorData locates a tensor's values. Segments are sub-slices of the
// decoded file: for EncodingRaw the raw bytes, for typed encodings the
// payloads of the repeated field (one segment per packed run or element).
type TensorData struct {
	Encoding Encoding
	Segments [][]byte
	External *ExternalData
}

// ExternalData is a tensor whose raw bytes live in another file.
type ExternalData struct {
	Location string // as written in the model
	Path     string // resolved path, inside the model's folder
	Offset   int64
	Length   int64 // -1 when the whole rest of the file
	// Load reads the bytes; set by the decoder, which knows the file system.
	Load func() ([]byte, error)
}

// ErrNoData is returned by accessors of a tensor declared without values.
var ErrNoData = errors.New("tensor has no stored values")

// Elements returns the number of elements, or -1 if the product of the dims
// is negative or overflows int64.
func (t *Tensor) Elements() int64 {
	n := int64(1)
	for _, d := range t.Dims {
		if d < 0 {
			return -1
		}
		if d != 0 && n > math.MaxInt64/d {
			return -1
		}
		n *= d
	}
	return n
}

// StorageBytes is the size the tensor's values take at their dtype, packed
// as the standard stores them; -1 when not static (strings) or when the size
// overflows int64.
func (t *Tensor) StorageBytes() int64 {
	n := t.Elements()
	bits := int64(t.DType.Bits())
	switch {
	case n < 0 || bits == 0:
		return -1
	case bits < 8:
		return n/8*bits + (n%8*bits+7)/8
	case n > math.MaxInt64/(bits/8):
		return -1
	}
	return n * (bits / 8)
}

// HasData reports whether values are stored (as opposed to declared only).
func (t *Tensor) HasData() bool { return t.Data.Encoding != EncodingNone }

// Shape returns the dims as a Shape.
func (t *Tensor) Shape() Shape { return KnownShape(t.Dims...) }

// RawBytes returns the values as little-endian bytes at the tensor's dtype.
// For raw and external data it returns the stored bytes without copying
// (external data is read on demand). Typed encodings are converted, which
// allocates StorageBytes bytes; callers that only need a few values should
// use Int64s or Float64s with a limit.
func (t *Tensor) RawBytes() ([]byte, error) {
	want := t.StorageBytes()
	switch t.Data.Encoding {
	case EncodingNone:
		return nil, ErrNoData
	case EncodingRaw:
		var b []byte
		if len(t.Data.Segments) == 1 {
			b = t.Data.Segments[0]
		} else {
			for _, s := range t.Data.Segments {
				b = append(b, s...)
			}
		}
		if want >= 0 && int64(len(b)) != want {
			return nil, fmt.Errorf("tensor %q: raw data holds %d bytes, its dims and dtype need %d", t.Name, len(b), want)
		}
		return b, nil
	case EncodingExternal:
		if t.Data.External == nil || t.Data.External.Load == nil {
			return nil, fmt.Errorf("tensor %q: external data cannot be read", t.Name)
		}
		b, err := t.Data.External.Load()
		if err != nil {
			return nil, err
		}
		if want >= 0 && int64(len(b)) != want {
			return nil, fmt.Errorf("tensor %q: external data %q holds %d bytes, its dims and dtype need %d", t.Name, t.Data.External.Location, len(b), want)
		}
		return b, nil
	case EncodingStrings:
		return nil, fmt.Errorf("tensor %q: string tensors have no fixed-size bytes", t.Name)
	}
	if want < 0 {
		return nil, fmt.Errorf("tensor %q: %s values of dims %v have no fixed size", t.Name, t.DType, t.Dims)
	}
	vals, err := t.typedValues(-1)
	if err != nil {
		return nil, err
	}
	width := t.entryBytes()
	if width == 0 || int64(len(vals))*int64(width) != want {
		return nil, fmt.Errorf("tensor %q: %d typed entries (encoding %d) do not fill the %d bytes of %s%v", t.Name, len(vals), t.Data.Encoding, want, t.DType, t.Dims)
	}
	out := make([]byte, want)
	var buf [8]byte
	for i, v := range vals {
		binary.LittleEndian.PutUint64(buf[:], v.bits)
		copy(out[i*width:], buf[:width])
	}
	return out, nil
}

// entryBytes is how many bytes of the tensor's little-endian storage one
// entry of its typed encoding fills: a complex value takes two entries, and
// an int32_data entry of a 4-bit type holds one byte of two packed values.
func (t *Tensor) entryBytes() int {
	switch t.Data.Encoding {
	case EncodingFloat32s:
		return 4
	case EncodingFloat64s, EncodingInt64s:
		return 8
	case EncodingUint64s:
		return t.DType.Bits() / 8
	case EncodingInt32s:
		if t.DType.Bits() == 4 {
			return 1
		}
		return t.DType.Bits() / 8
	}
	return 0
}

// typedValue is one entry of a typed repeated field: its raw bits.
type typedValue struct{ bits uint64 }

// typedValues decodes up to max entries (all when max < 0) of a typed encoding.
func (t *Tensor) typedValues(max int64) ([]typedValue, error) {
	n := t.Elements()
	if n < 0 {
		return nil, fmt.Errorf("tensor %q: element count overflows", t.Name)
	}
	if max >= 0 && n > max {
		n = max
	}
	// Complex values take two entries each; 4-bit values pack two to an
	// int32_data entry.
	entries := n
	switch {
	case t.DType == Complex64 || t.DType == Complex128:
		entries *= 2
	case t.DType.Bits() == 4:
		entries = (n + 1) / 2
	}
	out := make([]typedValue, 0, min(entries, 1<<20))
	for _, seg := range t.Data.Segments {
		for len(seg) > 0 && int64(len(out)) < entries {
			var v uint64
			switch t.Data.Encoding {
			case EncodingFloat32s:
				if len(seg) < 4 {
					return nil, fmt.Errorf("tensor %q: truncated float_data", t.Name)
				}
				v = uint64(binary.LittleEndian.Uint32(seg))
				seg = seg[4:]
			case EncodingFloat64s:
				if len(seg) < 8 {
					return nil, fmt.Errorf("tensor %q: truncated double_data", t.Name)
				}
				v = binary.LittleEndian.Uint64(seg)
				seg = seg[8:]
			case EncodingInt32s, EncodingInt64s, EncodingUint64s:
				x, k := binary.Uvarint(seg)
				if k <= 0 {
					return nil, fmt.Errorf("tensor %q: bad varint in typed data", t.Name)
				}
				v = x
				seg = seg[k:]
			default:
				return nil, fmt.Errorf("tensor %q: encoding %d has no typed values", t.Name, t.Data.Encoding)
			}
			out = append(out, typedValue{v})
		}
	}
	if int64(len(out)) < entries {
		return nil, fmt.Errorf("tensor %q: holds %d values, its dims need %d", t.Name, len(out), entries)
	}
	return out, nil
}

// Int64s returns up to max values (all when max < 0) converted to int64.
// Floating values are truncated toward zero. It fails for strings and
// declared-only tensors.
func (t *Tensor) Int64s(max int64) ([]int64, error) {
	if t.DType.IsFloat() {
		f, err := t.Float64s(max)
		if err != nil {
			return nil, err
		}
		out := make([]int64, len(f))
		for i, v := range f {
			out[i] = int64(v)
		}
		return out, nil
	}
	return readValues(t, max, func(bits uint64) int64 { return int64(bits) }, decodeIntLE)
}

// Float64s returns up to max values (all when max < 0) converted to float64.
func (t *Tensor) Float64s(max int64) ([]float64, error) {
	if t.DType.IsInteger() || t.DType == Bool {
		ints, err := readValues(t, max, func(bits uint64) int64 { return int64(bits) }, decodeIntLE)
		if err != nil {
			return nil, err
		}
		out := make([]float64, len(ints))
		for i, v := range ints {
			if t.DType == Uint64 {
				out[i] = float64(uint64(v))
			} else {
				out[i] = float64(v)
			}
		}
		return out, nil
	}
	return readValues(t, max, func(bits uint64) float64 { return floatFromBits(t.DType, bits, t.Data.Encoding) }, decodeFloatLE)
}

func readValues[T any](t *Tensor, max int64, fromTyped func(uint64) T, fromLE func(DType, []byte, int) T) ([]T, error) {
	n := t.Elements()
	if n < 0 {
		return nil, fmt.Errorf("tensor %q: element count overflows", t.Name)
	}
	if max >= 0 && n > max {
		n = max
	}
	switch t.Data.Encoding {
	case EncodingNone:
		return nil, ErrNoData
	case EncodingStrings:
		return nil, fmt.Errorf("tensor %q: string values are not numbers", t.Name)
	case EncodingRaw, EncodingExternal:
		if t.DType.Bits() == 0 {
			return nil, fmt.Errorf("tensor %q: dtype %s has no fixed size", t.Name, t.DType)
		}
		b, err := t.RawBytes()
		if err != nil {
			return nil, err
		}
		out := make([]T, n)
		for i := range out {
			out[i] = fromLE(t.DType, b, i)
		}
		return out, nil
	}
	vals, err := t.typedValues(n)
	if err != nil {
		return nil, err
	}
	out := make([]T, n)
	nibbles := t.DType.Bits() == 4
	for i := range out {
		var bits uint64
		if nibbles {
			bits = vals[i/2].bits >> (4 * (i % 2)) & 0xF
		} else {
			bits = vals[i].bits
		}
		if t.Data.Encoding == EncodingInt32s {
			bits = signExtendTyped(t.DType, bits)
		}
		out[i] = fromTyped(bits)
	}
	return out, nil
}

// signExtendTyped narrows an int32_data entry to the tensor's dtype.
func signExtendTyped(dt DType, bits uint64) uint64 {
	switch dt {
	case Int8:
		return uint64(int64(int8(bits)))
	case Int16:
		return uint64(int64(int16(bits)))
	case Int32:
		return uint64(int64(int32(bits)))
	case Int4:
		v := int64(bits & 0xF)
		if v >= 8 {
			v -= 16
		}
		return uint64(v)
	case Uint8, Bool:
		return bits & 0xFF
	case Uint16, Float16, BFloat16:
		return bits & 0xFFFF
	case Uint4:
		return bits & 0xF
	}
	return bits
}

func decodeIntLE(dt DType, b []byte, i int) int64 {
	switch dt {
	case Int8:
		return int64(int8(b[i]))
	case Uint8, Bool:
		return int64(b[i])
	case Int16:
		return int64(int16(binary.LittleEndian.Uint16(b[2*i:])))
	case Uint16:
		return int64(binary.LittleEndian.Uint16(b[2*i:]))
	case Int32:
		return int64(int32(binary.LittleEndian.Uint32(b[4*i:])))
	case Uint32:
		return int64(binary.LittleEndian.Uint32(b[4*i:]))
	case Int64, Uint64:
		return int64(binary.LittleEndian.Uint64(b[8*i:]))
	case Int4, Uint4:
		v := int64(b[i/2]>>(4*(i%2))) & 0xF
		if dt == Int4 && v >= 8 {
			v -= 16
		}
		return v
	}
	return 0
}

func decodeFloatLE(dt DType, b []byte, i int) float64 {
	switch dt {
	case Float32, Complex64:
		return float64(math.Float32frombits(binary.LittleEndian.Uint32(b[4*i:])))
	case Float64, Complex128:
		return math.Float64frombits(binary.LittleEndian.Uint64(b[8*i:]))
	case Float16:
		return HalfToFloat(binary.LittleEndian.Uint16(b[2*i:]))
	case BFloat16:
		return float64(math.Float32frombits(uint32(binary.LittleEndian.Uint16(b[2*i:])) << 16))
	case Float8E4M3FN, Float8E4M3FNUZ, Float8E5M2, Float8E5M2FNUZ:
		return float8ToFloat(dt, b[i])
	case Float4E2M1:
		return float4ToFloat(b[i/2] >> (4 * (i % 2)) & 0xF)
	}
	return math.NaN()
}

func floatFromBits(dt DType, bits uint64, enc Encoding) float64 {
	switch enc {
	case EncodingFloat32s:
		return float64(math.Float32frombits(uint32(bits)))
	case EncodingFloat64s:
		return math.Float64frombits(bits)
	}
	switch dt {
	case Float16:
		return HalfToFloat(uint16(bits))
	case BFloat16:
		return float64(math.Float32frombits(uint32(uint16(bits)) << 16))
	case Float8E4M3FN, Float8E4M3FNUZ, Float8E5M2, Float8E5M2FNUZ:
		return float8ToFloat(dt, byte(bits))
	case Float4E2M1:
		return float4ToFloat(byte(bits) & 0xF)
	}
	return float64(int64(bits))
}

// HalfToFloat converts IEEE 754 binary16 bits to a float64.
func HalfToFloat(h uint16) float64 {
	sign := 1.0
	if h&0x8000 != 0 {
		sign = -1
	}
	exp := int(h>>10) & 0x1F
	frac := float64(h & 0x3FF)
	switch exp {
	case 0:
		return sign * frac * math.Pow(2, -24)
	case 31:
		if frac == 0 {
			return sign * math.Inf(1)
		}
		return math.NaN()
	}
	return sign * (1 + frac/1024) * math.Pow(2, float64(exp-15))
}

func float8ToFloat(dt DType, b byte) float64 {
	sign := 1.0
	if b&0x80 != 0 {
		sign = -1
	}
	var expBits, manBits, bias int
	switch dt {
	case Float8E4M3FN:
		expBits, manBits, bias = 4, 3, 7
		if b&0x7F == 0x7F {
			return math.NaN()
		}
	case Float8E4M3FNUZ:
		expBits, manBits, bias = 4, 3, 8
		if b == 0x80 {
			return math.NaN()
		}
	case Float8E5M2:
		expBits, manBits, bias = 5, 2, 15
		if b&0x7C == 0x7C {
			if b&0x3 == 0 {
				return sign * math.Inf(1)
			}
			return math.NaN()
		}
	case Float8E5M2FNUZ:
		expBits, manBits, bias = 5, 2, 16
		if b == 0x80 {
			return math.NaN()
		}
	}
	exp := int(b>>manBits) & (1<<expBits - 1)
	man := float64(int(b) & (1<<manBits - 1))
	scale := float64(int(1) << manBits)
	if exp == 0 {
		return sign * man / scale * math.Pow(2, float64(1-bias))
	}
	return sign * (1 + man/scale) * math.Pow(2, float64(exp-bias))
}

func float4ToFloat(b byte) float64 {
	vals := [8]float64{0, 0.5, 1, 1.5, 2, 3, 4, 6}
	v := vals[b&0x7]
	if b&0x8 != 0 {
		return -v
	}
	return v
}
