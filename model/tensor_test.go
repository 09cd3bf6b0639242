package model

import (
	"bytes"
	"encoding/binary"
	"errors"
	"math"
	"testing"
)

// varints stores vals the way protobuf stores int32_data, int64_data and
// uint64_data: one varint each, negative values sign-extended to 64 bits.
func varints(vals ...int64) [][]byte {
	var b []byte
	for _, v := range vals {
		b = binary.AppendUvarint(b, uint64(v))
	}
	return [][]byte{b}
}

func typed(dt DType, enc Encoding, dims []int64, segs [][]byte) *Tensor {
	return &Tensor{Name: "t", DType: dt, Dims: dims, Data: TensorData{Encoding: enc, Segments: segs}}
}

func raw(dt DType, dims []int64, b ...byte) *Tensor {
	return typed(dt, EncodingRaw, dims, [][]byte{b})
}

func le16(vs ...uint16) []byte {
	var b []byte
	for _, v := range vs {
		b = binary.LittleEndian.AppendUint16(b, v)
	}
	return b
}

func le32f(vs ...float32) []byte {
	var b []byte
	for _, v := range vs {
		b = binary.LittleEndian.AppendUint32(b, math.Float32bits(v))
	}
	return b
}

func le64f(vs ...float64) []byte {
	var b []byte
	for _, v := range vs {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
	}
	return b
}

func sameFloats(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if math.Float64bits(a[i]) != math.Float64bits(b[i]) && !(math.IsNaN(a[i]) && math.IsNaN(b[i])) {
			return false
		}
	}
	return true
}

func sameInts(a, b []int64) bool {
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

// halves are float16 bit patterns and their values (IEEE 754 binary16):
// 1, -2, 0.5, the largest finite 65504, +Inf, -Inf, the smallest subnormal
// 2^-24, -0 and a NaN.
var halves = []struct {
	bits uint16
	val  float64
}{
	{0x3C00, 1}, {0xC000, -2}, {0x3800, 0.5}, {0x7BFF, 65504}, {0x7C00, math.Inf(1)}, {0xFC00, math.Inf(-1)},
	{0x0001, math.Ldexp(1, -24)}, {0x8000, math.Copysign(0, -1)}, {0x7E00, math.NaN()},
}

func TestFloat16(t *testing.T) {
	var bits []uint16
	var want []float64
	var entries []int64
	for _, h := range halves {
		bits, want = append(bits, h.bits), append(want, h.val)
		entries = append(entries, int64(h.bits))
	}
	dims := []int64{int64(len(halves))}
	rawT := raw(Float16, dims, le16(bits...)...)
	typedT := typed(Float16, EncodingInt32s, dims, varints(entries...)) // int32_data holds the bits
	for name, tn := range map[string]*Tensor{"raw_data": rawT, "int32_data": typedT} {
		got, err := tn.Float64s(-1)
		if err != nil || !sameFloats(got, want) {
			t.Errorf("%s: Float64s = %v, %v; want %v", name, got, err, want)
		}
		b, err := tn.RawBytes()
		if err != nil || !bytes.Equal(b, le16(bits...)) {
			t.Errorf("%s: RawBytes = % x, %v", name, b, err)
		}
		ints, err := tn.Int64s(3)
		if err != nil || !sameInts(ints, []int64{1, -2, 0}) {
			t.Errorf("%s: Int64s(3) = %v, %v (truncated toward zero)", name, ints, err)
		}
	}
	// Raw bytes are returned as stored, not copied.
	if b, _ := rawT.RawBytes(); &b[0] != &rawT.Data.Segments[0][0] {
		t.Error("RawBytes copied raw data")
	}
}

func TestBFloat16(t *testing.T) {
	// bfloat16 is the top half of a float32: 1, -3, 2^-126, 3.140625.
	bits := []uint16{0x3F80, 0xC040, 0x0080, 0x4049}
	want := []float64{1, -3, math.Ldexp(1, -126), 3.140625}
	dims := []int64{4}
	for name, tn := range map[string]*Tensor{
		"raw_data":   raw(BFloat16, dims, le16(bits...)...),
		"int32_data": typed(BFloat16, EncodingInt32s, dims, varints(0x3F80, 0xC040, 0x0080, 0x4049)),
	} {
		got, err := tn.Float64s(-1)
		if err != nil || !sameFloats(got, want) {
			t.Errorf("%s: Float64s = %v, %v; want %v", name, got, err, want)
		}
		if b, err := tn.RawBytes(); err != nil || !bytes.Equal(b, le16(bits...)) {
			t.Errorf("%s: RawBytes = % x, %v", name, b, err)
		}
	}
}

// TestInt4 packs two 4-bit values a byte, the first in the low nibble
// (onnx.proto, TensorProto.int32_data and raw_data: "Each pair of uint4,
// int4, and float4 values MUST be packed as two 4-bit elements into a single
// byte"); int32_data holds one such byte per entry, so two values.
func TestInt4(t *testing.T) {
	packed := []byte{0xE1, 0x87, 0x00} // 1, -2 | 7, -8 | 0, (padding)
	dims := []int64{5}
	for name, tn := range map[string]*Tensor{
		"raw_data":   raw(Int4, dims, packed...),
		"int32_data": typed(Int4, EncodingInt32s, dims, varints(0xE1, 0x87, 0x00)),
	} {
		got, err := tn.Int64s(-1)
		if err != nil || !sameInts(got, []int64{1, -2, 7, -8, 0}) {
			t.Errorf("%s: Int64s = %v, %v", name, got, err)
		}
		if f, err := tn.Float64s(-1); err != nil || !sameFloats(f, []float64{1, -2, 7, -8, 0}) {
			t.Errorf("%s: Float64s = %v, %v", name, f, err)
		}
		if b, err := tn.RawBytes(); err != nil || !bytes.Equal(b, packed) {
			t.Errorf("%s: RawBytes = % x, %v", name, b, err)
		}
		if got, err := tn.Int64s(3); err != nil || !sameInts(got, []int64{1, -2, 7}) {
			t.Errorf("%s: Int64s(3) = %v, %v", name, got, err)
		}
		u := *tn
		u.DType = Uint4
		if got, err := u.Int64s(-1); err != nil || !sameInts(got, []int64{1, 14, 7, 8, 0}) {
			t.Errorf("%s as uint4: Int64s = %v, %v", name, got, err)
		}
	}
	// float4e2m1: 0.5, -6, 1 → nibbles 0x1, 0xF, 0x2.
	for name, tn := range map[string]*Tensor{
		"raw_data":   raw(Float4E2M1, []int64{3}, 0xF1, 0x02),
		"int32_data": typed(Float4E2M1, EncodingInt32s, []int64{3}, varints(0xF1, 0x02)),
	} {
		if f, err := tn.Float64s(-1); err != nil || !sameFloats(f, []float64{0.5, -6, 1}) {
			t.Errorf("float4e2m1 %s: Float64s = %v, %v", name, f, err)
		}
	}
	if n := raw(Int4, []int64{5}).StorageBytes(); n != 3 {
		t.Errorf("int4[5] StorageBytes = %d, want 3", n)
	}
	// Too few entries is an error, not a panic.
	if _, err := typed(Int4, EncodingInt32s, dims, varints(0xE1)).Int64s(-1); err == nil {
		t.Error("int4[5] from one int32_data entry accepted")
	}
}

func TestSmallIntsInInt32Data(t *testing.T) {
	for _, c := range []struct {
		dt   DType
		vals []int64
		raw  []byte
	}{
		{Int8, []int64{-128, -1, 0, 127}, []byte{0x80, 0xFF, 0x00, 0x7F}},
		{Uint8, []int64{0, 1, 128, 255}, []byte{0x00, 0x01, 0x80, 0xFF}},
		{Bool, []int64{1, 0, 1, 1}, []byte{1, 0, 1, 1}},
		{Int16, []int64{-32768, -1, 1, 32767}, le16(0x8000, 0xFFFF, 0x0001, 0x7FFF)},
		{Uint16, []int64{0, 1, 0x8000, 0xFFFF}, le16(0, 1, 0x8000, 0xFFFF)},
	} {
		tn := typed(c.dt, EncodingInt32s, []int64{2, 2}, varints(c.vals...))
		got, err := tn.Int64s(-1)
		if err != nil || !sameInts(got, c.vals) {
			t.Errorf("%s: Int64s = %v, %v; want %v", c.dt, got, err, c.vals)
		}
		f, err := tn.Float64s(-1)
		if err != nil || len(f) != 4 || f[0] != float64(c.vals[0]) || f[3] != float64(c.vals[3]) {
			t.Errorf("%s: Float64s = %v, %v", c.dt, f, err)
		}
		b, err := tn.RawBytes()
		if err != nil || !bytes.Equal(b, c.raw) {
			t.Errorf("%s: RawBytes = % x, %v; want % x", c.dt, b, err, c.raw)
		}
		// The same values as raw bytes read back alike.
		if got, err := raw(c.dt, []int64{2, 2}, c.raw...).Int64s(-1); err != nil || !sameInts(got, c.vals) {
			t.Errorf("%s raw: Int64s = %v, %v", c.dt, got, err)
		}
	}
}

func TestWideTypes(t *testing.T) {
	i32 := typed(Int32, EncodingInt32s, []int64{2}, varints(math.MinInt32, math.MaxInt32))
	if got, err := i32.Int64s(-1); err != nil || !sameInts(got, []int64{math.MinInt32, math.MaxInt32}) {
		t.Errorf("int32: %v, %v", got, err)
	}
	if b, _ := i32.RawBytes(); !bytes.Equal(b, []byte{0, 0, 0, 0x80, 0xFF, 0xFF, 0xFF, 0x7F}) {
		t.Errorf("int32 RawBytes % x", b)
	}
	i64 := typed(Int64, EncodingInt64s, []int64{2}, varints(math.MinInt64, 42))
	if got, err := i64.Int64s(-1); err != nil || !sameInts(got, []int64{math.MinInt64, 42}) {
		t.Errorf("int64: %v, %v", got, err)
	}
	u64 := typed(Uint64, EncodingUint64s, []int64{1}, varints(-1))
	if got, err := u64.Float64s(-1); err != nil || got[0] != math.MaxUint64 {
		t.Errorf("uint64: %v, %v", got, err)
	}
	u32 := typed(Uint32, EncodingUint64s, []int64{1}, varints(math.MaxUint32))
	if b, err := u32.RawBytes(); err != nil || !bytes.Equal(b, []byte{0xFF, 0xFF, 0xFF, 0xFF}) {
		t.Errorf("uint32 RawBytes % x, %v", b, err)
	}
	f32 := typed(Float32, EncodingFloat32s, []int64{3}, [][]byte{le32f(1.5), le32f(-2, 3)}) // unpacked + packed runs
	if got, err := f32.Float64s(-1); err != nil || !sameFloats(got, []float64{1.5, -2, 3}) {
		t.Errorf("float32: %v, %v", got, err)
	}
	if b, err := f32.RawBytes(); err != nil || !bytes.Equal(b, le32f(1.5, -2, 3)) {
		t.Errorf("float32 RawBytes % x, %v", b, err)
	}
	f64 := typed(Float64, EncodingFloat64s, []int64{2}, [][]byte{le64f(math.Pi, -0.0)})
	if got, err := f64.Float64s(-1); err != nil || !sameFloats(got, []float64{math.Pi, 0}) {
		t.Errorf("float64: %v, %v", got, err)
	}
	// Complex values are pairs of float_data (complex64) or double_data
	// (complex128) entries: RawBytes lays them out as real, imaginary.
	c64 := typed(Complex64, EncodingFloat32s, []int64{2}, [][]byte{le32f(1, 2, 3, 4)})
	if b, err := c64.RawBytes(); err != nil || !bytes.Equal(b, le32f(1, 2, 3, 4)) {
		t.Errorf("complex64 RawBytes % x, %v", b, err)
	}
	c128 := typed(Complex128, EncodingFloat64s, []int64{1}, [][]byte{le64f(1, -1)})
	if b, err := c128.RawBytes(); err != nil || !bytes.Equal(b, le64f(1, -1)) {
		t.Errorf("complex128 RawBytes % x, %v", b, err)
	}
}

func TestFloat8(t *testing.T) {
	for _, c := range []struct {
		dt   DType
		b    []byte
		want []float64
	}{
		// 1.0, the largest finite value, the smallest subnormal, NaN or
		// Inf: the tables of onnx/docs/Float8.md (E4M3FN max 448, E4M3FNUZ
		// max 240, E5M2 and E5M2FNUZ max 57344).
		{Float8E4M3FN, []byte{0x38, 0x7E, 0x01, 0x7F}, []float64{1, 448, math.Ldexp(1, -9), math.NaN()}},
		{Float8E4M3FNUZ, []byte{0x40, 0x7F, 0x01, 0x80}, []float64{1, 240, math.Ldexp(1, -10), math.NaN()}},
		{Float8E5M2, []byte{0x3C, 0x7B, 0x01, 0x7C}, []float64{1, 57344, math.Ldexp(1, -16), math.Inf(1)}},
		{Float8E5M2FNUZ, []byte{0x40, 0x7F, 0x01, 0x80}, []float64{1, 57344, math.Ldexp(1, -17), math.NaN()}},
	} {
		if got, err := raw(c.dt, []int64{4}, c.b...).Float64s(-1); err != nil || !sameFloats(got, c.want) {
			t.Errorf("%s: %v, %v; want %v", c.dt, got, err, c.want)
		}
	}
}

func TestAccessorErrors(t *testing.T) {
	declared := &Tensor{Name: "w", DType: Float32, Dims: []int64{4}}
	if _, err := declared.Float64s(-1); !errors.Is(err, ErrNoData) {
		t.Errorf("declared-only: %v", err)
	}
	if _, err := declared.RawBytes(); !errors.Is(err, ErrNoData) {
		t.Errorf("declared-only RawBytes: %v", err)
	}
	str := typed(String, EncodingStrings, []int64{1}, [][]byte{[]byte("a")})
	if _, err := str.Int64s(-1); err == nil {
		t.Error("string tensor gave numbers")
	}
	if _, err := raw(Float32, []int64{2}, 1, 2, 3).RawBytes(); err == nil {
		t.Error("short raw data accepted")
	}
	if _, err := typed(Float32, EncodingFloat32s, []int64{2}, [][]byte{{1, 2, 3}}).Float64s(-1); err == nil {
		t.Error("ragged float_data accepted")
	}
	if _, err := typed(Int64, EncodingInt64s, []int64{1}, [][]byte{{0x80}}).Int64s(-1); err == nil {
		t.Error("unterminated varint accepted")
	}
	if _, err := typed(Int64, EncodingInt64s, []int64{3}, varints(1, 2)).RawBytes(); err == nil {
		t.Error("too few int64_data accepted")
	}
	// Multiple raw segments are read as one.
	if got, err := typed(Uint8, EncodingRaw, []int64{3}, [][]byte{{1}, {2, 3}}).Int64s(-1); err != nil || !sameInts(got, []int64{1, 2, 3}) {
		t.Errorf("segmented raw: %v, %v", got, err)
	}
	// Sizes that overflow int64 are -1, never wrapped around.
	for _, c := range []struct {
		dt   DType
		dims []int64
	}{{Float32, []int64{1 << 62}}, {Float64, []int64{1 << 61}}, {Complex128, []int64{1 << 59}}, {Int8, []int64{1 << 32, 1 << 32}}} {
		if n := (&Tensor{DType: c.dt, Dims: c.dims}).StorageBytes(); n != -1 {
			t.Errorf("%s%v: StorageBytes = %d, want -1", c.dt, c.dims, n)
		}
	}
	// The largest int4 tensor still has a size: (2^63-1)/2 rounded up.
	if n := (&Tensor{DType: Int4, Dims: []int64{math.MaxInt64}}).StorageBytes(); n != 1<<62 {
		t.Errorf("int4[MaxInt64]: StorageBytes = %d, want 2^62", n)
	}
}
