package build

import (
	"math"
	"slices"

	"github.com/loadline/loadline/model"
)

// Concat appends a Concat node joining vs along axis.
func (b *Builder) Concat(name string, axis int64, vs ...Value) Value {
	name = b.nodeName("Concat", name)
	if !b.required("Concat", name, vs...) {
		return Value{}
	}
	if len(vs) == 0 {
		b.fail("Concat %q: no inputs", name)
		return Value{}
	}
	r := len(vs[0].Shape)
	ax, ok := b.axis("Concat", name, axis, r)
	if !ok {
		return Value{}
	}
	shape := vs[0].Shape.Clone()
	sum, known := int64(0), true
	for _, v := range vs {
		if len(v.Shape) != r || v.DType != vs[0].DType {
			b.fail("Concat %q: %q is %s, %q is %s", name, vs[0].Name, model.TensorType(vs[0].DType, vs[0].Shape), v.Name, model.TensorType(v.DType, v.Shape))
			return Value{}
		}
		d := v.Shape[ax]
		known = known && d.IsKnown()
		sum += d.Value
	}
	if known {
		shape[ax] = model.Known(sum)
	} else {
		shape[ax] = b.unknownDim()
	}
	return b.node("Concat", name, vs, []*model.Attr{attrInt("axis", axis)}, vs[0].DType, shape)
}

// Reshape appends a Reshape node whose shape operand is the int64 constant
// name+".shape". As in ONNX, 0 copies the input's dimension and one -1 is
// inferred.
func (b *Builder) Reshape(name string, x Value, shape ...int64) Value {
	name = b.nodeName("Reshape", name)
	if !b.required("Reshape", name, x) {
		return Value{}
	}
	out := make(model.Shape, len(shape))
	infer := -1
	for i, d := range shape {
		switch {
		case d == 0:
			if i >= len(x.Shape) {
				b.fail("Reshape %q: 0 at axis %d copies nothing from %s", name, i, x.Shape)
				return Value{}
			}
			out[i] = x.Shape[i]
		case d == -1 && infer < 0:
			infer = i
		case d < 0:
			b.fail("Reshape %q: bad target shape %v", name, shape)
			return Value{}
		default:
			out[i] = model.Known(d)
		}
	}
	if infer >= 0 {
		total, ok1 := product(x.Shape)
		rest := int64(1)
		ok2 := true
		for i, d := range out {
			if i == infer {
				continue
			}
			if !d.IsKnown() {
				// A copied symbol cancels against the same symbol of the input.
				ok2 = false
				break
			}
			rest *= d.Value
		}
		switch {
		case ok1 && ok2 && rest != 0 && total%rest == 0:
			out[infer] = model.Known(total / rest)
		case ok1 && ok2:
			b.fail("Reshape %q: %s does not reshape to %v", name, x.Shape, shape)
			return Value{}
		default:
			out[infer] = b.reshapeSymbolic(x.Shape, out, infer)
		}
	} else if total, ok := product(x.Shape); ok {
		if n, ok := product(out); ok && n != total {
			b.fail("Reshape %q: %s does not reshape to %v", name, x.Shape, shape)
			return Value{}
		}
	}
	s := b.Int64s(name+".shape", shape...)
	if b.err != nil {
		return Value{}
	}
	return b.node("Reshape", name, []Value{x, s}, nil, x.DType, out)
}

// reshapeSymbolic works out the inferred dimension when both the input and
// the target hold the same symbols (a batch symbol kept by a 0, say), else
// returns a fresh symbol.
func (b *Builder) reshapeSymbolic(in, out model.Shape, infer int) model.Dim {
	syms := map[string]int{}
	num := int64(1)
	for _, d := range in {
		if d.IsKnown() {
			num *= d.Value
		} else {
			syms[d.Symbol]++
		}
	}
	den := int64(1)
	for i, d := range out {
		if i == infer {
			continue
		}
		if d.IsKnown() {
			den *= d.Value
		} else {
			syms[d.Symbol]--
		}
	}
	for _, n := range syms {
		if n != 0 {
			return b.unknownDim()
		}
	}
	if den == 0 || num%den != 0 {
		return b.unknownDim()
	}
	return model.Known(num / den)
}

// Flatten appends a Flatten node: [d0·…·d(axis-1), d(axis)·…].
func (b *Builder) Flatten(name string, x Value, axis int64) Value {
	name = b.nodeName("Flatten", name)
	if !b.required("Flatten", name, x) {
		return Value{}
	}
	r := len(x.Shape)
	if axis < -int64(r) || axis > int64(r) {
		b.fail("Flatten %q: axis %d is out of range for rank %d", name, axis, r)
		return Value{}
	}
	a := int(axis)
	if a < 0 {
		a += r
	}
	side := func(s model.Shape) model.Dim {
		if len(s) == 1 {
			return s[0]
		}
		if n, ok := product(s); ok {
			return model.Known(n)
		}
		return b.unknownDim()
	}
	shape := model.Shape{side(x.Shape[:a]), side(x.Shape[a:])}
	return b.node("Flatten", name, []Value{x}, []*model.Attr{attrInt("axis", axis)}, x.DType, shape)
}

// Transpose appends a Transpose node; no perm reverses the axes.
func (b *Builder) Transpose(name string, x Value, perm ...int64) Value {
	name = b.nodeName("Transpose", name)
	if !b.required("Transpose", name, x) {
		return Value{}
	}
	r := len(x.Shape)
	if perm == nil {
		for i := r - 1; i >= 0; i-- {
			perm = append(perm, int64(i))
		}
	}
	if len(perm) != r {
		b.fail("Transpose %q: perm %v is not a permutation of %d axes", name, perm, r)
		return Value{}
	}
	seen := make([]bool, r)
	shape := make(model.Shape, 0, r)
	for _, p := range perm {
		if p < 0 || p >= int64(r) || seen[p] {
			b.fail("Transpose %q: perm %v is not a permutation of %d axes", name, perm, r)
			return Value{}
		}
		seen[p] = true
		shape = append(shape, x.Shape[p])
	}
	return b.node("Transpose", name, []Value{x}, []*model.Attr{attrInts("perm", perm)}, x.DType, shape)
}

// Squeeze appends a Squeeze node removing axes (all size-1 axes when none
// are given). The axes are an int64 input name+".axes" from opset 13, an
// attribute before.
func (b *Builder) Squeeze(name string, x Value, axes ...int64) Value {
	name = b.nodeName("Squeeze", name)
	if !b.required("Squeeze", name, x) {
		return Value{}
	}
	drop := make([]bool, len(x.Shape))
	if len(axes) == 0 {
		for i, d := range x.Shape {
			if !d.IsKnown() {
				b.fail("Squeeze %q: without axes, dimension %s of %q is unknown", name, d, x.Name)
				return Value{}
			}
			drop[i] = d.Value == 1
		}
	}
	for _, a := range axes {
		i, ok := b.axis("Squeeze", name, a, len(x.Shape))
		if !ok {
			return Value{}
		}
		if d := x.Shape[i]; d.IsKnown() && d.Value != 1 {
			b.fail("Squeeze %q: axis %d of %s is not 1", name, a, x.Shape)
			return Value{}
		}
		drop[i] = true
	}
	var shape model.Shape
	for i, d := range x.Shape {
		if !drop[i] {
			shape = append(shape, d)
		}
	}
	if shape == nil {
		shape = model.Shape{}
	}
	return b.axesNode("Squeeze", name, x, axes, shape)
}

// Unsqueeze appends an Unsqueeze node inserting size-1 axes (positions in
// the output). The axes are an int64 input name+".axes" from opset 13, an
// attribute before.
func (b *Builder) Unsqueeze(name string, x Value, axes ...int64) Value {
	name = b.nodeName("Unsqueeze", name)
	if !b.required("Unsqueeze", name, x) {
		return Value{}
	}
	r := len(x.Shape) + len(axes)
	ins := make([]bool, r)
	for _, a := range axes {
		i, ok := b.axis("Unsqueeze", name, a, r)
		if !ok {
			return Value{}
		}
		if ins[i] {
			b.fail("Unsqueeze %q: axis %d given twice", name, a)
			return Value{}
		}
		ins[i] = true
	}
	if len(axes) == 0 {
		b.fail("Unsqueeze %q: no axes", name)
		return Value{}
	}
	shape := make(model.Shape, 0, r)
	j := 0
	for i := range r {
		if ins[i] {
			shape = append(shape, model.Known(1))
		} else {
			shape = append(shape, x.Shape[j])
			j++
		}
	}
	return b.axesNode("Unsqueeze", name, x, axes, shape)
}

func (b *Builder) axesNode(op, name string, x Value, axes []int64, shape model.Shape) Value {
	in := []Value{x}
	var attrs []*model.Attr
	if len(axes) > 0 {
		if b.opset >= 13 {
			in = append(in, b.Int64s(name+".axes", axes...))
			if b.err != nil {
				return Value{}
			}
		} else {
			attrs = append(attrs, attrInts("axes", axes))
		}
	}
	return b.node(op, name, in, attrs, x.DType, shape)
}

// Pad appends a Pad node. pads lists the begin of every axis, then the
// end; mode is "constant", "reflect" or "edge" ("" means constant). From
// opset 11 pads are an int64 input name+".pads" and a non-zero value a
// scalar input name+".value"; before, attributes.
func (b *Builder) Pad(name string, x Value, pads []int64, mode string, value float64) Value {
	name = b.nodeName("Pad", name)
	if !b.required("Pad", name, x) {
		return Value{}
	}
	r := len(x.Shape)
	if len(pads) != 2*r {
		b.fail("Pad %q: %d pads for rank %d", name, len(pads), r)
		return Value{}
	}
	if mode == "" {
		mode = "constant"
	}
	if !slices.Contains([]string{"constant", "reflect", "edge"}, mode) {
		b.fail("Pad %q: unknown mode %q", name, mode)
		return Value{}
	}
	shape := make(model.Shape, r)
	for i, d := range x.Shape {
		switch {
		case pads[i] == 0 && pads[i+r] == 0:
			shape[i] = d
			continue
		case !d.IsKnown():
			shape[i] = b.unknownDim()
			continue
		}
		n := d.Value + pads[i] + pads[i+r]
		if n < 0 {
			b.fail("Pad %q: pads %v cut more than %s", name, pads, x.Shape)
			return Value{}
		}
		shape[i] = model.Known(n)
	}
	var attrs []*model.Attr
	in := []Value{x}
	if mode != "constant" {
		attrs = append(attrs, attrString("mode", mode))
	}
	if b.opset < 11 {
		attrs = append(attrs, attrInts("pads", pads))
		if value != 0 {
			attrs = append(attrs, attrFloat("value", value))
		}
	} else {
		in = append(in, b.Int64s(name+".pads", pads...))
		if value != 0 && mode == "constant" {
			in = append(in, b.scalar(name+".value", x.DType, value))
		}
		if b.err != nil {
			return Value{}
		}
	}
	return b.node("Pad", name, in, attrs, x.DType, shape)
}

// Resize appends a Resize node scaling each axis of x by scales (float32
// constant name+".scales"); mode is "nearest", "linear" or "cubic" (""
// means nearest). Opset 10 takes [X, scales]; 11 and 12 an empty roi
// name+".roi" between them; from 13 the roi is omitted.
func (b *Builder) Resize(name string, x Value, scales []float64, mode string) Value {
	if b.err != nil || !b.needOpset("Resize", 10) {
		return Value{}
	}
	name = b.nodeName("Resize", name)
	if !b.required("Resize", name, x) {
		return Value{}
	}
	if len(scales) != len(x.Shape) {
		b.fail("Resize %q: %d scales for rank %d", name, len(scales), len(x.Shape))
		return Value{}
	}
	if mode == "" {
		mode = "nearest"
	}
	shape := make(model.Shape, len(scales))
	for i, d := range x.Shape {
		if scales[i] <= 0 {
			b.fail("Resize %q: scale %g is not positive", name, scales[i])
			return Value{}
		}
		switch {
		case scales[i] == 1:
			shape[i] = d
		case d.IsKnown():
			shape[i] = model.Known(int64(math.Floor(float64(d.Value) * float64(float32(scales[i])))))
		default:
			shape[i] = b.unknownDim()
		}
	}
	in := []Value{x}
	switch {
	case b.opset == 10:
	case b.opset < 13:
		in = append(in, b.ConstFloats(name+".roi", model.Float32, []int64{0}, nil))
	default:
		in = append(in, Value{})
	}
	in = append(in, b.ConstFloats(name+".scales", model.Float32, []int64{int64(len(scales))}, scales))
	if b.err != nil {
		return Value{}
	}
	return b.node("Resize", name, in, []*model.Attr{attrString("mode", mode)}, x.DType, shape)
}
