package build

import "github.com/loadline/loadline/model"

// ConvSpec describes a Conv or ConvTranspose. Nil slices take the ONNX
// defaults (strides and dilations 1, pads 0); Group 0 means 1.
type ConvSpec struct {
	Out           int64   // output channels (ignored by ConvWith, which reads them from the weight)
	Kernel        []int64 // kernel_shape, one entry per spatial axis
	Strides       []int64
	Pads          []int64 // begin of every axis, then end of every axis
	Dilations     []int64
	OutputPadding []int64 // ConvTranspose only
	Group         int64
	Bias          bool // Conv and ConvTranspose create a bias initializer
}

// Conv2D is a square 2-D convolution: out channels, a k×k kernel, the same
// stride and padding on both axes, no bias (torchvision's convolutions
// before BatchNormalization have none).
func Conv2D(out, k, stride, pad int64) ConvSpec {
	return ConvSpec{Out: out, Kernel: []int64{k, k}, Strides: []int64{stride, stride}, Pads: []int64{pad, pad, pad, pad}}
}

// Grouped returns s with group g; g equal to the input channels makes a
// depthwise convolution.
func (s ConvSpec) Grouped(g int64) ConvSpec { s.Group = g; return s }

// WithBias returns s with a bias.
func (s ConvSpec) WithBias() ConvSpec { s.Bias = true; return s }

// Dilated returns s with dilation d on every axis.
func (s ConvSpec) Dilated(d int64) ConvSpec {
	s.Dilations = make([]int64, len(s.Kernel))
	for i := range s.Dilations {
		s.Dilations[i] = d
	}
	return s
}

// Conv appends a Conv node with its weight name+".weight" of shape
// [Out, C_in/group, k...] and, with s.Bias, name+".bias" of shape [Out].
func (b *Builder) Conv(name string, x Value, s ConvSpec) Value {
	name = b.nodeName("Conv", name)
	if !b.required("Conv", name, x) {
		return Value{}
	}
	cin, g, ok := b.channels("Conv", name, x, s)
	if !ok {
		return Value{}
	}
	if s.Out < 1 || s.Out%g != 0 {
		b.fail("Conv %q: %d output channels do not divide into %d groups", name, s.Out, g)
		return Value{}
	}
	w := b.Weight(name+".weight", x.DType, append([]int64{s.Out, cin / g}, s.Kernel...)...)
	var bias Value
	if s.Bias {
		bias = b.Weight(name+".bias", x.DType, s.Out)
	}
	return b.conv(name, x, w, bias, s)
}

// ConvWith appends a Conv node on explicit weight and bias values, for
// weights that come from elsewhere (a DequantizeLinear, say). bias may be
// the zero Value. The output channels are the weight's first dimension.
func (b *Builder) ConvWith(name string, x, w, bias Value, s ConvSpec) Value {
	name = b.nodeName("Conv", name)
	if !b.required("Conv", name, x, w) || !b.known("Conv", bias) {
		return Value{}
	}
	return b.conv(name, x, w, bias, s)
}

// channels checks x against s and returns C_in and the group count.
func (b *Builder) channels(op, name string, x Value, s ConvSpec) (cin, group int64, ok bool) {
	if len(x.Shape) < 3 {
		b.fail("%s %q: input %q has shape %s, want [N, C, spatial...]", op, name, x.Name, x.Shape)
		return 0, 0, false
	}
	c := x.Shape[1]
	if !c.IsKnown() {
		b.fail("%s %q: input %q has unknown channels %s", op, name, x.Name, c)
		return 0, 0, false
	}
	group = s.Group
	if group == 0 {
		group = 1
	}
	if group < 1 || c.Value%group != 0 {
		b.fail("%s %q: %d input channels do not divide into %d groups", op, name, c.Value, group)
		return 0, 0, false
	}
	return c.Value, group, true
}

func (b *Builder) conv(name string, x, w, bias Value, s ConvSpec) Value {
	cin, g, ok := b.channels("Conv", name, x, s)
	if !ok {
		return Value{}
	}
	spatial := len(x.Shape) - 2
	if len(w.Shape) != spatial+2 || !w.Shape.AllKnown() {
		b.fail("Conv %q: weight %q has shape %s, want %d known dims", name, w.Name, w.Shape, spatial+2)
		return Value{}
	}
	if w.Shape[1].Value*g != cin {
		b.fail("Conv %q: weight %q has shape %s, want C_in/group = %d at axis 1", name, w.Name, w.Shape, cin/g)
		return Value{}
	}
	if s.Kernel == nil {
		for _, d := range w.Shape[2:] {
			s.Kernel = append(s.Kernel, d.Value)
		}
	}
	for i, k := range s.Kernel {
		if i+2 >= len(w.Shape) || w.Shape[i+2].Value != k {
			b.fail("Conv %q: kernel %v does not match weight shape %s", name, s.Kernel, w.Shape)
			return Value{}
		}
	}
	cout := w.Shape[0].Value
	if bias.Valid() && !bias.Shape.Equal(model.KnownShape(cout)) {
		b.fail("Conv %q: bias %q has shape %s, want [%d]", name, bias.Name, bias.Shape, cout)
		return Value{}
	}
	win := window{kernel: s.Kernel, strides: s.Strides, pads: s.Pads, dilations: s.Dilations}
	if !b.fillWindow("Conv", name, &win, spatial) {
		return Value{}
	}
	sp, ok := b.slide("Conv", name, x.Shape[2:], win)
	if !ok {
		return Value{}
	}
	shape := append(model.Shape{x.Shape[0], model.Known(cout)}, sp...)
	attrs := []*model.Attr{
		attrInts("dilations", win.dilations),
		attrInt("group", g),
		attrInts("kernel_shape", win.kernel),
		attrInts("pads", win.pads),
		attrInts("strides", win.strides),
	}
	return b.node("Conv", name, []Value{x, w, bias}, attrs, x.DType, shape)
}

// ConvTranspose appends a ConvTranspose node with its weight name+".weight"
// of shape [C_in, Out/group, k...] and, with s.Bias, name+".bias" [Out].
func (b *Builder) ConvTranspose(name string, x Value, s ConvSpec) Value {
	name = b.nodeName("ConvTranspose", name)
	if !b.required("ConvTranspose", name, x) {
		return Value{}
	}
	cin, g, ok := b.channels("ConvTranspose", name, x, s)
	if !ok {
		return Value{}
	}
	if s.Out < 1 || s.Out%g != 0 {
		b.fail("ConvTranspose %q: %d output channels do not divide into %d groups", name, s.Out, g)
		return Value{}
	}
	spatial := len(x.Shape) - 2
	win := window{kernel: s.Kernel, strides: s.Strides, pads: s.Pads, dilations: s.Dilations}
	if !b.fillWindow("ConvTranspose", name, &win, spatial) {
		return Value{}
	}
	outPad := s.OutputPadding
	if outPad == nil {
		outPad = make([]int64, spatial)
	}
	if len(outPad) != spatial {
		b.fail("ConvTranspose %q: output_padding %v does not match %d spatial dims", name, outPad, spatial)
		return Value{}
	}
	w := b.Weight(name+".weight", x.DType, append([]int64{cin, s.Out / g}, win.kernel...)...)
	var bias Value
	if s.Bias {
		bias = b.Weight(name+".bias", x.DType, s.Out)
	}
	if b.err != nil {
		return Value{}
	}
	shape := model.Shape{x.Shape[0], model.Known(s.Out)}
	for i := range spatial {
		d := x.Shape[2+i]
		if !d.IsKnown() {
			shape = append(shape, b.unknownDim())
			continue
		}
		n := win.strides[i]*(d.Value-1) + outPad[i] + win.dilations[i]*(win.kernel[i]-1) + 1 - win.pads[i] - win.pads[i+spatial]
		if n < 1 {
			b.fail("ConvTranspose %q: output extent %d along axis %d", name, n, 2+i)
			return Value{}
		}
		shape = append(shape, model.Known(n))
	}
	attrs := []*model.Attr{
		attrInts("dilations", win.dilations),
		attrInt("group", g),
		attrInts("kernel_shape", win.kernel),
	}
	if s.OutputPadding != nil {
		attrs = append(attrs, attrInts("output_padding", outPad))
	}
	attrs = append(attrs, attrInts("pads", win.pads), attrInts("strides", win.strides))
	return b.node("ConvTranspose", name, []Value{x, w, bias}, attrs, x.DType, shape)
}

// PoolSpec describes a MaxPool or AveragePool window. Nil slices take the
// ONNX defaults.
type PoolSpec struct {
	Kernel          []int64
	Strides         []int64
	Pads            []int64
	Dilations       []int64 // MaxPool only, opset 10 and newer
	CeilMode        bool    // opset 10 and newer
	CountIncludePad bool    // AveragePool only
}

// Pool2D is a square 2-D pooling window with the same stride and padding
// on both axes.
func Pool2D(k, stride, pad int64) PoolSpec {
	return PoolSpec{Kernel: []int64{k, k}, Strides: []int64{stride, stride}, Pads: []int64{pad, pad, pad, pad}}
}

// Ceil returns p with ceil_mode set.
func (p PoolSpec) Ceil() PoolSpec { p.CeilMode = true; return p }

// MaxPool appends a MaxPool node (its Indices output omitted).
func (b *Builder) MaxPool(name string, x Value, p PoolSpec) Value {
	return b.pool("MaxPool", name, x, p)
}

// AveragePool appends an AveragePool node.
func (b *Builder) AveragePool(name string, x Value, p PoolSpec) Value {
	return b.pool("AveragePool", name, x, p)
}

func (b *Builder) pool(op, name string, x Value, p PoolSpec) Value {
	name = b.nodeName(op, name)
	if !b.required(op, name, x) {
		return Value{}
	}
	if len(x.Shape) < 3 {
		b.fail("%s %q: input %q has shape %s, want [N, C, spatial...]", op, name, x.Name, x.Shape)
		return Value{}
	}
	if p.CeilMode && !b.needOpset(op+" with ceil_mode", 10) {
		return Value{}
	}
	if p.Dilations != nil && (op != "MaxPool" || !b.needOpset(op+" with dilations", 10)) {
		b.fail("%s %q: dilations are a MaxPool attribute", op, name)
		return Value{}
	}
	if p.CountIncludePad && op != "AveragePool" {
		b.fail("%s %q: count_include_pad is an AveragePool attribute", op, name)
		return Value{}
	}
	win := window{kernel: p.Kernel, strides: p.Strides, pads: p.Pads, dilations: p.Dilations, ceil: p.CeilMode}
	if !b.fillWindow(op, name, &win, len(x.Shape)-2) {
		return Value{}
	}
	sp, ok := b.slide(op, name, x.Shape[2:], win)
	if !ok {
		return Value{}
	}
	var attrs []*model.Attr
	if p.CeilMode {
		attrs = append(attrs, attrInt("ceil_mode", 1))
	}
	if p.CountIncludePad {
		attrs = append(attrs, attrInt("count_include_pad", 1))
	}
	if p.Dilations != nil {
		attrs = append(attrs, attrInts("dilations", win.dilations))
	}
	attrs = append(attrs, attrInts("kernel_shape", win.kernel), attrInts("pads", win.pads), attrInts("strides", win.strides))
	shape := append(model.Shape{x.Shape[0], x.Shape[1]}, sp...)
	return b.node(op, name, []Value{x}, attrs, x.DType, shape)
}

// GlobalAveragePool appends a GlobalAveragePool node: [N, C, 1, ...].
func (b *Builder) GlobalAveragePool(name string, x Value) Value {
	name = b.nodeName("GlobalAveragePool", name)
	if !b.required("GlobalAveragePool", name, x) {
		return Value{}
	}
	if len(x.Shape) < 3 {
		b.fail("GlobalAveragePool %q: input %q has shape %s, want [N, C, spatial...]", name, x.Name, x.Shape)
		return Value{}
	}
	shape := model.Shape{x.Shape[0], x.Shape[1]}
	for range x.Shape[2:] {
		shape = append(shape, model.Known(1))
	}
	return b.node("GlobalAveragePool", name, []Value{x}, nil, x.DType, shape)
}
