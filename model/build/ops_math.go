package build

import "github.com/loadline/loadline/model"

// Gemm appends a fully connected layer as PyTorch exports nn.Linear: a Gemm
// with transB=1 on x [M, K], its weight name+".weight" [out, K] and, with
// bias, name+".bias" [out]. A Gemm without bias needs opset 11.
func (b *Builder) Gemm(name string, x Value, out int64, bias bool) Value {
	name = b.nodeName("Gemm", name)
	if !b.required("Gemm", name, x) {
		return Value{}
	}
	if len(x.Shape) != 2 || !x.Shape[1].IsKnown() {
		b.fail("Gemm %q: input %q has shape %s, want [M, K] with K known", name, x.Name, x.Shape)
		return Value{}
	}
	if out < 1 {
		b.fail("Gemm %q: %d outputs", name, out)
		return Value{}
	}
	w := b.Weight(name+".weight", x.DType, out, x.Shape[1].Value)
	var c Value
	if bias {
		c = b.Weight(name+".bias", x.DType, out)
	}
	return b.gemm(name, x, w, c, false, true)
}

// GemmWith appends a Gemm node on explicit operands: Y = A'·B' + C, where '
// transposes when asked. c may be the zero Value (opset 11 and newer).
func (b *Builder) GemmWith(name string, a, bm, c Value, transA, transB bool) Value {
	name = b.nodeName("Gemm", name)
	if !b.required("Gemm", name, a, bm) || !b.known("Gemm", c) {
		return Value{}
	}
	return b.gemm(name, a, bm, c, transA, transB)
}

func (b *Builder) gemm(name string, a, bm, c Value, transA, transB bool) Value {
	if len(a.Shape) != 2 || len(bm.Shape) != 2 {
		b.fail("Gemm %q: operands %s and %s are not matrices", name, a.Shape, bm.Shape)
		return Value{}
	}
	if !c.Valid() && !b.needOpset("Gemm without C", 11) {
		return Value{}
	}
	m, k := a.Shape[0], a.Shape[1]
	if transA {
		m, k = k, m
	}
	k2, n := bm.Shape[0], bm.Shape[1]
	if transB {
		k2, n = n, k2
	}
	if k.IsKnown() && k2.IsKnown() && k != k2 {
		b.fail("Gemm %q: inner dimensions %s and %s differ", name, k, k2)
		return Value{}
	}
	shape := model.Shape{m, n}
	if c.Valid() {
		if _, ok := b.broadcast("Gemm", name, shape, c.Shape); !ok {
			return Value{}
		}
	}
	var attrs []*model.Attr
	if transA {
		attrs = append(attrs, attrInt("transA", 1))
	}
	if transB {
		attrs = append(attrs, attrInt("transB", 1))
	}
	return b.node("Gemm", name, []Value{a, bm, c}, attrs, a.DType, shape)
}

// MatMul appends a MatMul node, numpy matrix product with broadcasting
// batch dimensions.
func (b *Builder) MatMul(name string, a, c Value) Value {
	name = b.nodeName("MatMul", name)
	if !b.required("MatMul", name, a, c) {
		return Value{}
	}
	x, y := a.Shape, c.Shape
	if len(x) == 0 || len(y) == 0 {
		b.fail("MatMul %q: scalar operand", name)
		return Value{}
	}
	if len(x) == 1 {
		x = append(model.Shape{model.Known(1)}, x...)
	}
	if len(y) == 1 {
		y = append(y.Clone(), model.Known(1))
	}
	k1, k2 := x[len(x)-1], y[len(y)-2]
	if k1.IsKnown() && k2.IsKnown() && k1 != k2 {
		b.fail("MatMul %q: inner dimensions of %s and %s differ", name, a.Shape, c.Shape)
		return Value{}
	}
	batch, ok := b.broadcast("MatMul", name, x[:len(x)-2], y[:len(y)-2])
	if !ok {
		return Value{}
	}
	shape := batch
	if len(a.Shape) > 1 {
		shape = append(shape, x[len(x)-2])
	}
	if len(c.Shape) > 1 {
		shape = append(shape, y[len(y)-1])
	}
	return b.node("MatMul", name, []Value{a, c}, nil, a.DType, shape)
}

// Add appends an elementwise Add node with broadcasting.
func (b *Builder) Add(name string, a, c Value) Value { return b.binary("Add", name, a, c) }

// Mul appends an elementwise Mul node with broadcasting.
func (b *Builder) Mul(name string, a, c Value) Value { return b.binary("Mul", name, a, c) }

// Sub appends an elementwise Sub node with broadcasting.
func (b *Builder) Sub(name string, a, c Value) Value { return b.binary("Sub", name, a, c) }

// Div appends an elementwise Div node with broadcasting.
func (b *Builder) Div(name string, a, c Value) Value { return b.binary("Div", name, a, c) }

// Pow appends an elementwise Pow node with broadcasting (exponent of the
// base's dtype).
func (b *Builder) Pow(name string, a, c Value) Value { return b.binary("Pow", name, a, c) }

// Greater appends an elementwise Greater node; its output is bool.
func (b *Builder) Greater(name string, a, c Value) Value {
	v := b.binary("Greater", name, a, c)
	if v.Valid() {
		v.DType = model.Bool
		b.tensors[v.Name] = v
	}
	return v
}

func (b *Builder) binary(op, name string, a, c Value) Value {
	name = b.nodeName(op, name)
	if !b.required(op, name, a, c) {
		return Value{}
	}
	if a.DType != c.DType {
		b.fail("%s %q: operands are %s and %s", op, name, a.DType, c.DType)
		return Value{}
	}
	shape, ok := b.broadcast(op, name, a.Shape, c.Shape)
	if !ok {
		return Value{}
	}
	return b.node(op, name, []Value{a, c}, nil, a.DType, shape)
}

// BatchNormalization appends an inference-mode BatchNormalization node on
// x [N, C, ...] with its four initializers as PyTorch names them:
// name+".weight" (scale), ".bias" (B), ".running_mean" and ".running_var",
// each [C]. epsilon 0 means PyTorch's 1e-5; momentum is written as PyTorch
// exports it (0.9).
func (b *Builder) BatchNormalization(name string, x Value, epsilon float64) Value {
	name = b.nodeName("BatchNormalization", name)
	if !b.required("BatchNormalization", name, x) {
		return Value{}
	}
	if len(x.Shape) < 2 || !x.Shape[1].IsKnown() {
		b.fail("BatchNormalization %q: input %q has shape %s, want known channels at axis 1", name, x.Name, x.Shape)
		return Value{}
	}
	if epsilon == 0 {
		epsilon = 1e-5
	}
	c := x.Shape[1].Value
	scale := b.weight(name+".weight", x.DType, []int64{c}, fillPositive)
	bias := b.weight(name+".bias", x.DType, []int64{c}, fillSigned)
	mean := b.weight(name+".running_mean", x.DType, []int64{c}, fillSigned)
	vr := b.weight(name+".running_var", x.DType, []int64{c}, fillPositive)
	if b.err != nil {
		return Value{}
	}
	attrs := []*model.Attr{attrFloat("epsilon", epsilon), attrFloat("momentum", 0.9)}
	return b.node("BatchNormalization", name, []Value{x, scale, bias, mean, vr}, attrs, x.DType, x.Shape.Clone())
}

// unary appends a shape-preserving single-input node.
func (b *Builder) unary(op, name string, x Value, attrs ...*model.Attr) Value {
	name = b.nodeName(op, name)
	if !b.required(op, name, x) {
		return Value{}
	}
	return b.node(op, name, []Value{x}, attrs, x.DType, x.Shape.Clone())
}

// Relu appends a Relu node.
func (b *Builder) Relu(name string, x Value) Value { return b.unary("Relu", name, x) }

// Sigmoid appends a Sigmoid node.
func (b *Builder) Sigmoid(name string, x Value) Value { return b.unary("Sigmoid", name, x) }

// Tanh appends a Tanh node.
func (b *Builder) Tanh(name string, x Value) Value { return b.unary("Tanh", name, x) }

// Erf appends an Erf node.
func (b *Builder) Erf(name string, x Value) Value { return b.unary("Erf", name, x) }

// Softplus appends a Softplus node.
func (b *Builder) Softplus(name string, x Value) Value { return b.unary("Softplus", name, x) }

// Cast appends a Cast node converting x to dtype to.
func (b *Builder) Cast(name string, x Value, to model.DType) Value {
	name = b.nodeName("Cast", name)
	if !b.required("Cast", name, x) {
		return Value{}
	}
	if !to.Known() || to == model.Undefined {
		b.fail("Cast %q: unknown dtype %s", name, to)
		return Value{}
	}
	return b.node("Cast", name, []Value{x}, []*model.Attr{attrInt("to", int64(to))}, to, x.Shape.Clone())
}

// Identity appends an Identity node.
func (b *Builder) Identity(name string, x Value) Value { return b.unary("Identity", name, x) }

// HardSwish appends a HardSwish node (opset 14 and newer).
func (b *Builder) HardSwish(name string, x Value) Value {
	if b.err != nil || !b.needOpset("HardSwish", 14) {
		return Value{}
	}
	return b.unary("HardSwish", name, x)
}

// HardSigmoid appends a HardSigmoid node, max(0, min(1, alpha·x + beta));
// PyTorch's nn.Hardsigmoid is alpha 1/6, beta 0.5.
func (b *Builder) HardSigmoid(name string, x Value, alpha, beta float64) Value {
	return b.unary("HardSigmoid", name, x, attrFloat("alpha", alpha), attrFloat("beta", beta))
}

// LeakyRelu appends a LeakyRelu node with slope alpha below zero.
func (b *Builder) LeakyRelu(name string, x Value, alpha float64) Value {
	return b.unary("LeakyRelu", name, x, attrFloat("alpha", alpha))
}

// Softmax appends a Softmax node along axis (written explicitly, as the
// default changed at opset 13).
func (b *Builder) Softmax(name string, x Value, axis int64) Value {
	if b.err != nil {
		return Value{}
	}
	if _, ok := b.axis("Softmax", name, axis, len(x.Shape)); !ok {
		return Value{}
	}
	return b.unary("Softmax", name, x, attrInt("axis", axis))
}

// Clip appends a Clip node bounding x to [lo, hi]. From opset 11 the bounds
// are scalar inputs name+".min" and name+".max" of x's dtype, before it
// attributes.
func (b *Builder) Clip(name string, x Value, lo, hi float64) Value {
	name = b.nodeName("Clip", name)
	if !b.required("Clip", name, x) {
		return Value{}
	}
	if lo > hi {
		b.fail("Clip %q: min %g is above max %g", name, lo, hi)
		return Value{}
	}
	if b.opset < 11 {
		return b.node("Clip", name, []Value{x}, []*model.Attr{attrFloat("max", hi), attrFloat("min", lo)}, x.DType, x.Shape.Clone())
	}
	mn := b.scalar(name+".min", x.DType, lo)
	mx := b.scalar(name+".max", x.DType, hi)
	if b.err != nil {
		return Value{}
	}
	return b.node("Clip", name, []Value{x, mn, mx}, nil, x.DType, x.Shape.Clone())
}

// Relu6 appends ReLU6 as PyTorch exports it: Clip(x, 0, 6).
func (b *Builder) Relu6(name string, x Value) Value { return b.Clip(name, x, 0, 6) }

// Dropout appends an inference Dropout node (its mask output omitted). A
// ratio other than the default 0.5 is an attribute before opset 12 and a
// scalar float32 input name+".ratio" from it.
func (b *Builder) Dropout(name string, x Value, ratio float64) Value {
	name = b.nodeName("Dropout", name)
	if !b.required("Dropout", name, x) {
		return Value{}
	}
	if ratio < 0 || ratio >= 1 {
		b.fail("Dropout %q: ratio %g is outside [0, 1)", name, ratio)
		return Value{}
	}
	var attrs []*model.Attr
	in := []Value{x}
	if ratio != 0.5 {
		if b.opset < 12 {
			attrs = append(attrs, attrFloat("ratio", ratio))
		} else {
			in = append(in, b.scalar(name+".ratio", model.Float32, ratio))
			if b.err != nil {
				return Value{}
			}
		}
	}
	return b.node("Dropout", name, in, attrs, x.DType, x.Shape.Clone())
}
