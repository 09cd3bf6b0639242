package build

import "github.com/loadline/loadline/model"

// QuantizeLinear appends a QuantizeLinear node. scale is a float scalar
// (per tensor) or, from opset 13, a 1-D tensor along axis (per axis);
// zeroPoint has scale's shape and the output's dtype (int8 or uint8) and may
// be the zero Value (uint8 output). axis is written only for per-axis scales.
func (b *Builder) QuantizeLinear(name string, x, scale, zeroPoint Value, axis int64) Value {
	if b.err != nil || !b.needOpset("QuantizeLinear", 10) {
		return Value{}
	}
	name = b.nodeName("QuantizeLinear", name)
	if !b.required("QuantizeLinear", name, x, scale) || !b.known("QuantizeLinear", zeroPoint) {
		return Value{}
	}
	if !x.DType.IsFloat() {
		b.fail("QuantizeLinear %q: input %q is %s, want a float type", name, x.Name, x.DType)
		return Value{}
	}
	out := model.Uint8
	if zeroPoint.Valid() {
		out = zeroPoint.DType
	}
	if out != model.Int8 && out != model.Uint8 {
		b.fail("QuantizeLinear %q: zero point %q is %s, want int8 or uint8", name, zeroPoint.Name, out)
		return Value{}
	}
	attrs, ok := b.quantAxis("QuantizeLinear", name, x, scale, zeroPoint, axis)
	if !ok {
		return Value{}
	}
	return b.node("QuantizeLinear", name, []Value{x, scale, zeroPoint}, attrs, out, x.Shape.Clone())
}

// DequantizeLinear appends a DequantizeLinear node on x (int8, uint8 or
// int32); its output has scale's dtype. Scale, zero point and axis are as
// for QuantizeLinear; zeroPoint has x's dtype.
func (b *Builder) DequantizeLinear(name string, x, scale, zeroPoint Value, axis int64) Value {
	if b.err != nil || !b.needOpset("DequantizeLinear", 10) {
		return Value{}
	}
	name = b.nodeName("DequantizeLinear", name)
	if !b.required("DequantizeLinear", name, x, scale) || !b.known("DequantizeLinear", zeroPoint) {
		return Value{}
	}
	switch x.DType {
	case model.Int8, model.Uint8, model.Int32:
	default:
		b.fail("DequantizeLinear %q: input %q is %s, want int8, uint8 or int32", name, x.Name, x.DType)
		return Value{}
	}
	if zeroPoint.Valid() && zeroPoint.DType != x.DType {
		b.fail("DequantizeLinear %q: zero point %q is %s, input is %s", name, zeroPoint.Name, zeroPoint.DType, x.DType)
		return Value{}
	}
	attrs, ok := b.quantAxis("DequantizeLinear", name, x, scale, zeroPoint, axis)
	if !ok {
		return Value{}
	}
	return b.node("DequantizeLinear", name, []Value{x, scale, zeroPoint}, attrs, scale.DType, x.Shape.Clone())
}

// quantAxis checks a scale and zero point against x and returns the axis
// attribute a per-axis scale needs.
func (b *Builder) quantAxis(op, name string, x, scale, zp Value, axis int64) ([]*model.Attr, bool) {
	if !scale.DType.IsFloat() {
		b.fail("%s %q: scale %q is %s, want a float type", op, name, scale.Name, scale.DType)
		return nil, false
	}
	if zp.Valid() && !zp.Shape.Equal(scale.Shape) {
		b.fail("%s %q: zero point %q has shape %s, scale has %s", op, name, zp.Name, zp.Shape, scale.Shape)
		return nil, false
	}
	switch len(scale.Shape) {
	case 0:
		return nil, true
	case 1:
		if !b.needOpset(op+" per axis", 13) {
			return nil, false
		}
		a, ok := b.axis(op, name, axis, len(x.Shape))
		if !ok {
			return nil, false
		}
		if d := x.Shape[a]; d.IsKnown() && scale.Shape[0] != d {
			b.fail("%s %q: scale %q has shape %s, axis %d of the input is %s", op, name, scale.Name, scale.Shape, axis, d)
			return nil, false
		}
		return []*model.Attr{attrInt("axis", axis)}, true
	}
	b.fail("%s %q: scale %q has shape %s, want a scalar or 1-D", op, name, scale.Name, scale.Shape)
	return nil, false
}

// QDQ quantizes x per tensor to dt (int8 or uint8) with scale and zero
// point and dequantizes it again, the fake-quantization pair a QDQ-format
// model carries around every quantized activation. The names derive from
// x's: x+"_scale", x+"_zero_point", the QuantizeLinear x+"_quantized" and
// the DequantizeLinear x+"_dequantized", whose output it returns.
func (b *Builder) QDQ(x Value, dt model.DType, scale float64, zeroPoint int64) Value {
	if b.err != nil || !b.required("QDQ", x.Name, x) {
		return Value{}
	}
	s := b.scalar(x.Name+"_scale", model.Float32, scale)
	zp := b.ConstInts(x.Name+"_zero_point", dt, nil, []int64{zeroPoint})
	q := b.QuantizeLinear(x.Name+"_quantized", x, s, zp, 0)
	return b.DequantizeLinear(x.Name+"_dequantized", q, s, zp, 0)
}

// QuantizedWeight declares a weight stored quantized, as a QDQ-format
// model does: the initializer name+"_quantized" of dtype dt (int8, uint8,
// or int32 for biases) and dims, its scale name+"_scale" and zero point
// name+"_zero_point", and a DequantizeLinear node name whose float32
// output, named name, it returns. With opset 13 or newer and two or more
// dims the scale is per output channel (axis 0), else per tensor. The
// quantized values follow the builder's Declared mode; scale and zero
// point are always stored.
func (b *Builder) QuantizedWeight(name string, dt model.DType, dims ...int64) Value {
	if b.err != nil {
		return Value{}
	}
	q := b.Weight(name+"_quantized", dt, dims...)
	var s, zp Value
	if b.opset >= 13 && len(dims) >= 2 {
		n := dims[0]
		scales := make([]float64, n)
		for i := range scales {
			scales[i] = 0.01
		}
		s = b.ConstFloats(name+"_scale", model.Float32, []int64{n}, scales)
		zp = b.ConstInts(name+"_zero_point", dt, []int64{n}, make([]int64, n))
	} else {
		s = b.scalar(name+"_scale", model.Float32, 0.01)
		zp = b.ConstInts(name+"_zero_point", dt, nil, []int64{0})
	}
	return b.DequantizeLinear(name, q, s, zp, 0)
}
