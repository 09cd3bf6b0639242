package build

import (
	"encoding/binary"
	"hash/fnv"
	"math"

	"github.com/loadline/loadline/model"
)

// fill says what pseudo-random values a materialised weight gets.
type fill uint8

const (
	fillSigned   fill = iota // uniform in [-0.1, 0.1): conv and linear weights, biases, means
	fillPositive             // uniform in [0.5, 1.5): BatchNormalization scales and variances
)

// maxMaterialised bounds the bytes of one materialised weight (vgg16's
// largest, classifier.0.weight, is 411 MB).
const maxMaterialised = 1 << 30

// Weight declares an initializer used as a weight. Unless the builder is in
// Declared mode it holds deterministic pseudo-random values (raw bytes),
// drawn from the seed and the name alone.
func (b *Builder) Weight(name string, dt model.DType, dims ...int64) Value {
	return b.weight(name, dt, dims, fillSigned)
}

func (b *Builder) weight(name string, dt model.DType, dims []int64, f fill) Value {
	if b.err != nil {
		return Value{}
	}
	t := &model.Tensor{Name: name, DType: dt, Dims: append([]int64{}, dims...)}
	if !b.checkTensor(t) {
		return Value{}
	}
	if !b.declared {
		if t.StorageBytes() > maxMaterialised {
			b.fail("weight %q: %d bytes are too many to materialise; build in Declared mode", name, t.StorageBytes())
			return Value{}
		}
		raw, ok := b.random(t, f)
		if !ok {
			return Value{}
		}
		t.Data = model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{raw}}
	}
	return b.addInitializer(t)
}

// ConstFloats declares an initializer with explicit values, always stored.
// Values are converted to dt; for integer types they are rounded, and a
// value out of the type's range is an error. dims nil makes a scalar.
func (b *Builder) ConstFloats(name string, dt model.DType, dims []int64, values []float64) Value {
	if b.err != nil {
		return Value{}
	}
	t := &model.Tensor{Name: name, DType: dt, Dims: append([]int64{}, dims...)}
	if !b.checkTensor(t) || !b.checkCount(t, len(values)) {
		return Value{}
	}
	var raw []byte
	if dt.IsFloat() {
		raw = b.encodeFloats(t, values)
	} else {
		ints := make([]int64, len(values))
		for i, v := range values {
			r := math.Round(v)
			if r < math.MinInt64 || r >= math.MaxInt64 || math.IsNaN(r) {
				b.fail("constant %q: value %g does not fit %s", name, v, dt)
				return Value{}
			}
			ints[i] = int64(r)
		}
		raw = b.encodeInts(t, ints)
	}
	if raw == nil && b.err != nil {
		return Value{}
	}
	t.Data = model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{raw}}
	return b.addInitializer(t)
}

// ConstInts declares an initializer with explicit integer values, always
// stored. For float types the values are converted. dims nil makes a scalar.
func (b *Builder) ConstInts(name string, dt model.DType, dims []int64, values []int64) Value {
	if b.err != nil {
		return Value{}
	}
	t := &model.Tensor{Name: name, DType: dt, Dims: append([]int64{}, dims...)}
	if !b.checkTensor(t) || !b.checkCount(t, len(values)) {
		return Value{}
	}
	var raw []byte
	if dt.IsFloat() {
		f := make([]float64, len(values))
		for i, v := range values {
			f[i] = float64(v)
		}
		raw = b.encodeFloats(t, f)
	} else {
		raw = b.encodeInts(t, values)
	}
	if raw == nil && b.err != nil {
		return Value{}
	}
	t.Data = model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{raw}}
	return b.addInitializer(t)
}

// Int64s declares a 1-D int64 constant, the form of shape, axes and pads
// operands; its values are always stored.
func (b *Builder) Int64s(name string, values ...int64) Value {
	return b.ConstInts(name, model.Int64, []int64{int64(len(values))}, values)
}

// scalar declares a rank-0 constant of dtype dt holding v.
func (b *Builder) scalar(name string, dt model.DType, v float64) Value {
	return b.ConstFloats(name, dt, nil, []float64{v})
}

func (b *Builder) checkTensor(t *model.Tensor) bool {
	if !t.DType.Known() || t.DType == model.String {
		b.fail("initializer %q: dtype %s cannot be declared", t.Name, t.DType)
		return false
	}
	for _, d := range t.Dims {
		if d < 0 {
			b.fail("initializer %q: negative dimension in %v", t.Name, t.Dims)
			return false
		}
	}
	// Elements guards against overflow; 1<<40 elements is beyond any model.
	if n := t.Elements(); n < 0 || n > 1<<40 {
		b.fail("initializer %q: dims %v are too large", t.Name, t.Dims)
		return false
	}
	return true
}

func (b *Builder) checkCount(t *model.Tensor, n int) bool {
	if int64(n) != t.Elements() {
		b.fail("constant %q: %d values for dims %v (%d elements)", t.Name, n, t.Dims, t.Elements())
		return false
	}
	return true
}

func (b *Builder) addInitializer(t *model.Tensor) Value {
	if !b.claimTensor(t.Name) {
		return Value{}
	}
	v := Value{Name: t.Name, DType: t.DType, Shape: t.Shape()}
	b.tensors[t.Name] = v
	b.g.Initializers = append(b.g.Initializers, t)
	return v
}

// splitmix64 is a small, well-mixed pseudo-random sequence (Steele, Lea
// and Flood 2014), enough for weights whose values nobody reads.
type splitmix64 uint64

func (s *splitmix64) next() uint64 {
	*s += 0x9e3779b97f4a7c15
	z := uint64(*s)
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}

// unit returns a float64 uniform in [0, 1).
func (s *splitmix64) unit() float64 { return float64(s.next()>>11) / (1 << 53) }

// random returns pseudo-random bytes for a weight.
func (b *Builder) random(t *model.Tensor, f fill) ([]byte, bool) {
	h := fnv.New64a()
	h.Write([]byte(t.Name))
	rng := splitmix64(h.Sum64() ^ b.seed)
	n := t.Elements()
	if t.DType.IsFloat() {
		vals := make([]float64, n)
		for i := range vals {
			u := rng.unit()
			if f == fillPositive {
				vals[i] = 0.5 + u
			} else {
				vals[i] = 0.2*u - 0.1
			}
		}
		raw := b.encodeFloats(t, vals)
		return raw, raw != nil || b.err == nil
	}
	// Integer weights: any bit pattern is a valid value.
	raw := make([]byte, t.StorageBytes())
	for i := 0; i < len(raw); i += 8 {
		var w [8]byte
		binary.LittleEndian.PutUint64(w[:], rng.next())
		copy(raw[i:], w[:])
	}
	if t.DType == model.Bool {
		for i := range raw {
			raw[i] &= 1
		}
	}
	return raw, true
}

// encodeFloats stores values at a float dtype; nil after an error.
func (b *Builder) encodeFloats(t *model.Tensor, vals []float64) []byte {
	var size int
	switch t.DType {
	case model.Float32:
		size = 4
	case model.Float64:
		size = 8
	case model.Float16, model.BFloat16:
		size = 2
	default:
		b.fail("initializer %q: values of dtype %s cannot be written; declare it only", t.Name, t.DType)
		return nil
	}
	out := make([]byte, size*len(vals))
	for i, v := range vals {
		switch t.DType {
		case model.Float32:
			binary.LittleEndian.PutUint32(out[4*i:], math.Float32bits(float32(v)))
		case model.Float64:
			binary.LittleEndian.PutUint64(out[8*i:], math.Float64bits(v))
		case model.Float16:
			binary.LittleEndian.PutUint16(out[2*i:], floatToHalf(float32(v)))
		case model.BFloat16:
			binary.LittleEndian.PutUint16(out[2*i:], floatToBFloat(float32(v)))
		}
	}
	return out
}

// intRange is the range of values each integer dtype holds.
var intRange = map[model.DType][2]int64{
	model.Bool:   {0, 1},
	model.Int4:   {-8, 7},
	model.Uint4:  {0, 15},
	model.Int8:   {math.MinInt8, math.MaxInt8},
	model.Uint8:  {0, math.MaxUint8},
	model.Int16:  {math.MinInt16, math.MaxInt16},
	model.Uint16: {0, math.MaxUint16},
	model.Int32:  {math.MinInt32, math.MaxInt32},
	model.Uint32: {0, math.MaxUint32},
	model.Int64:  {math.MinInt64, math.MaxInt64},
	model.Uint64: {0, math.MaxInt64}, // values come as int64
}

// encodeInts stores values at an integer dtype; nil after an error.
func (b *Builder) encodeInts(t *model.Tensor, vals []int64) []byte {
	r, ok := intRange[t.DType]
	if !ok {
		b.fail("constant %q: integer values cannot be written as %s", t.Name, t.DType)
		return nil
	}
	out := make([]byte, t.StorageBytes())
	for i, v := range vals {
		if v < r[0] || v > r[1] {
			b.fail("constant %q: value %d does not fit %s", t.Name, v, t.DType)
			return nil
		}
		switch t.DType.Bits() {
		case 4:
			out[i/2] |= byte(v&0xF) << (4 * (i % 2))
		case 8:
			out[i] = byte(v)
		case 16:
			binary.LittleEndian.PutUint16(out[2*i:], uint16(v))
		case 32:
			binary.LittleEndian.PutUint32(out[4*i:], uint32(v))
		case 64:
			binary.LittleEndian.PutUint64(out[8*i:], uint64(v))
		}
	}
	return out
}

// floatToHalf converts to IEEE 754 binary16, rounding to nearest even.
func floatToHalf(f float32) uint16 {
	bits := math.Float32bits(f)
	sign := uint16(bits>>16) & 0x8000
	exp := int(bits>>23) & 0xFF
	man := bits & 0x7FFFFF
	switch {
	case exp == 0xFF: // Inf or NaN
		if man != 0 {
			return sign | 0x7E00
		}
		return sign | 0x7C00
	case exp-127 > 15: // overflow
		return sign | 0x7C00
	case exp-127 >= -14: // normal
		h := uint32(exp-127+15)<<10 | man>>13
		rest := man & 0x1FFF
		if rest > 0x1000 || (rest == 0x1000 && h&1 == 1) {
			h++ // may carry into the exponent, which is still correct
		}
		return sign | uint16(h)
	case exp-127 >= -25: // subnormal
		man |= 0x800000
		shift := uint(-14-(exp-127)) + 13
		h := man >> shift
		rest := man & (1<<shift - 1)
		half := uint32(1) << (shift - 1)
		if rest > half || (rest == half && h&1 == 1) {
			h++
		}
		return sign | uint16(h)
	}
	return sign
}

// floatToBFloat converts to bfloat16, rounding to nearest even.
func floatToBFloat(f float32) uint16 {
	bits := math.Float32bits(f)
	if f != f {
		return 0x7FC0
	}
	bits += 0x7FFF + (bits>>16)&1
	return uint16(bits >> 16)
}
