package build

import (
	"bytes"
	"errors"
	"math"
	"strconv"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
)

func mustModel(t *testing.T, b *Builder) *model.Model {
	t.Helper()
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func nodeNamed(t *testing.T, m *model.Model, name string) *model.Node {
	t.Helper()
	for _, n := range m.Graph.Nodes {
		if n.Name == name {
			return n
		}
	}
	t.Fatalf("no node %q", name)
	return nil
}

// attrs prints a node's attributes as name:kind=value, in order.
func attrs(n *model.Node) string {
	var s []string
	for _, a := range n.Attrs {
		v := ""
		switch a.Kind {
		case model.AttrInt:
			v = itoa(a.Int)
		case model.AttrInts:
			var parts []string
			for _, x := range a.Ints {
				parts = append(parts, itoa(x))
			}
			v = strings.Join(parts, ",")
		case model.AttrFloat:
			v = ftoa(float64(a.Float))
		case model.AttrString:
			v = a.String
		}
		s = append(s, a.Name+":"+a.Kind.String()+"="+v)
	}
	return strings.Join(s, " ")
}

func itoa(v int64) string   { return strconv.FormatInt(v, 10) }
func ftoa(v float64) string { return strconv.FormatFloat(v, 'g', -1, 32) }

func TestConvBlock(t *testing.T) {
	b := New("block", 13)
	x := b.Input("x", model.Float32, 1, 8, 16, 16)
	y := b.Conv("conv1", x, Conv2D(16, 3, 2, 1))
	y = b.BatchNormalization("bn1", y, 0)
	y = b.Relu("relu", y)
	d := b.Conv("dw", y, Conv2D(16, 3, 1, 1).Grouped(16).WithBias())
	b.Output(d)
	if got := d.Shape.String(); got != "[1,16,8,8]" {
		t.Errorf("shape %s", got)
	}
	m := mustModel(t, b)
	conv := nodeNamed(t, m, "conv1")
	if got, want := attrs(conv), "dilations:ints=1,1 group:int=1 kernel_shape:ints=3,3 pads:ints=1,1,1,1 strides:ints=2,2"; got != want {
		t.Errorf("Conv attrs\n got %s\nwant %s", got, want)
	}
	if got := strings.Join(conv.Inputs, " "); got != "x conv1.weight" {
		t.Errorf("Conv inputs %s", got)
	}
	if w := m.Graph.Initializer("conv1.weight"); w == nil || !w.Shape().Equal(model.KnownShape(16, 8, 3, 3)) || !w.HasData() {
		t.Errorf("conv1.weight = %+v", w)
	}
	if w := m.Graph.Initializer("dw.weight"); !w.Shape().Equal(model.KnownShape(16, 1, 3, 3)) {
		t.Errorf("depthwise weight %v", w.Dims)
	}
	if m.Graph.Initializer("dw.bias") == nil {
		t.Error("no dw.bias")
	}
	bn := nodeNamed(t, m, "bn1")
	if got := strings.Join(bn.Inputs, " "); got != "conv1 bn1.weight bn1.bias bn1.running_mean bn1.running_var" {
		t.Errorf("BN inputs %s", got)
	}
	if bn.Attr("epsilon").Float != float32(1e-5) || bn.Attr("momentum").Float != float32(0.9) {
		t.Errorf("BN attrs %s", attrs(bn))
	}
	// BN variance values are positive so the model runs.
	v, err := m.Graph.Initializer("bn1.running_var").Float64s(-1)
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range v {
		if x < 0.5 || x >= 1.5 {
			t.Fatalf("running_var value %g", x)
		}
	}
	if m.Format != "onnx" || m.IRVersion != 8 || m.Opsets[""] != 13 || m.ProducerName != "loadline-build" || m.Graph.Name != "block" {
		t.Errorf("header %+v", m)
	}
	if len(m.Graph.ValueInfo) != 0 {
		t.Error("value info without WithValueInfo")
	}
}

func TestDeterministicWeights(t *testing.T) {
	build := func(opts ...Option) []byte {
		b := New("w", 13, opts...)
		b.Weight("b", model.Float32, 3)
		w := b.Weight("a", model.Float16, 4, 5)
		b.Output(b.Relu("r", w))
		m := mustModel(t, b)
		raw, err := m.Graph.Initializer("a").RawBytes()
		if err != nil {
			t.Fatal(err)
		}
		return raw
	}
	a1, a2, a3 := build(), build(), build(Seed(7))
	if !bytes.Equal(a1, a2) || len(a1) != 40 {
		t.Errorf("weights differ between builds or have %d bytes", len(a1))
	}
	if bytes.Equal(a1, a3) {
		t.Error("seed does not change the weights")
	}
	b := New("w", 13, Declared())
	w := b.Weight("a", model.Float32, 1000, 1000)
	s := b.Int64s("shape", 1, -1)
	b.Output(b.Reshape("r", w, 1, -1))
	m := mustModel(t, b)
	if m.Graph.Initializer("a").HasData() {
		t.Error("declared weight has data")
	}
	for _, name := range []string{s.Name, "r.shape"} {
		got, err := m.Graph.Initializer(name).Int64s(-1)
		if err != nil || len(got) != 2 || got[0] != 1 || got[1] != -1 {
			t.Errorf("%s = %v, %v", name, got, err)
		}
	}
}

func TestConstValues(t *testing.T) {
	b := New("c", 13, Declared())
	cases := []struct {
		dt   model.DType
		vals []float64
	}{
		{model.Float32, []float64{0, -1.5, 3.25}},
		{model.Float16, []float64{0, -1.5, 65504, 6.103515625e-05, 5.960464477539063e-08}},
		{model.BFloat16, []float64{1, -2, 0.5}},
		{model.Float64, []float64{math.Pi}},
		{model.Int8, []float64{-128, 127, 3}},
		{model.Uint8, []float64{0, 255}},
		{model.Int32, []float64{-7, 1 << 30}},
		{model.Int4, []float64{-8, 7, 1}},
	}
	for i, c := range cases {
		v := b.ConstFloats("c"+itoa(int64(i)), c.dt, []int64{int64(len(c.vals))}, c.vals)
		if !v.Valid() {
			t.Fatalf("%s: %v", c.dt, b.Err())
		}
	}
	b.Output(b.Identity("id", b.ConstInts("i", model.Int64, nil, []int64{math.MaxInt64})))
	m := mustModel(t, b)
	for i, c := range cases {
		got, err := m.Graph.Initializer("c" + itoa(int64(i))).Float64s(-1)
		if err != nil {
			t.Fatal(err)
		}
		for j := range c.vals {
			if got[j] != c.vals[j] {
				t.Errorf("%s: value %d = %g, want %g", c.dt, j, got[j], c.vals[j])
			}
		}
	}
	if got, _ := m.Graph.Initializer("i").Int64s(-1); len(got) != 1 || got[0] != math.MaxInt64 {
		t.Errorf("int64 scalar = %v", got)
	}
	for _, bad := range []func(*Builder){
		func(b *Builder) { b.ConstFloats("x", model.Int8, []int64{1}, []float64{128}) },
		func(b *Builder) { b.ConstInts("x", model.Uint8, []int64{1}, []int64{-1}) },
		func(b *Builder) { b.ConstInts("x", model.Int64, []int64{2}, []int64{1}) },
		func(b *Builder) { b.ConstFloats("x", model.Float8E4M3FN, []int64{1}, []float64{1}) },
		func(b *Builder) { b.ConstFloats("x", model.String, []int64{1}, []float64{1}) },
		func(b *Builder) { b.Weight("x", model.Float32, -1) },
		func(b *Builder) { b.Weight("x", model.Float32, 1<<30, 1<<30) },
		func(b *Builder) { b.Weight("x", model.Float32, 1<<20, 1<<10) }, // 4 GiB, not materialised
	} {
		b := New("bad", 13)
		bad(b)
		if b.Err() == nil {
			t.Error("no error for a bad constant")
		}
	}
}

func TestFloatToHalf(t *testing.T) {
	for _, c := range []struct {
		f float32
		h uint16
	}{
		{0, 0}, {1, 0x3C00}, {-2, 0xC000}, {65504, 0x7BFF}, {65520, 0x7C00}, {1e9, 0x7C00},
		{float32(math.Inf(-1)), 0xFC00}, {6.103515625e-05, 0x0400}, {5.960464477539063e-08, 0x0001},
		{1e-9, 0}, {1.0009765625, 0x3C01}, {1.00048828125, 0x3C00}, // tie to even
		{1.00146484375, 0x3C02}, // tie to even, upward
	} {
		if got := floatToHalf(c.f); got != c.h {
			t.Errorf("floatToHalf(%g) = %#04x, want %#04x", c.f, got, c.h)
		}
	}
	if h := floatToHalf(float32(math.NaN())); h&0x7C00 != 0x7C00 || h&0x3FF == 0 {
		t.Errorf("NaN = %#04x", h)
	}
	// Round trip every finite half value.
	for h := range uint32(0x7C00) {
		f := float32(model.HalfToFloat(uint16(h)))
		if got := floatToHalf(f); got != uint16(h) {
			t.Fatalf("round trip of %#04x gives %#04x", h, got)
		}
	}
}

func TestOpsetForms(t *testing.T) {
	for _, opset := range []int64{9, 10, 11, 12, 13, 14, 17} {
		b := New("forms", opset)
		x := b.Input("x", model.Float32, 1, 4, 1, 8)
		c := b.Clip("clip", x, -1, 1)
		s := b.Squeeze("sq", c, 2)
		u := b.Unsqueeze("unsq", s, 2)
		p := b.Pad("pad", u, []int64{0, 0, 1, 1, 0, 0, 1, 1}, "", 0.5)
		d := b.Dropout("drop", p, 0.2)
		var r Value = d
		if opset >= 10 {
			r = b.Resize("up", d, []float64{1, 1, 2, 2}, "")
		}
		g := b.Flatten("flat", r, 1)
		g = b.Gemm("fc", g, 3, true)
		b.Output(g)
		m := mustModel(t, b)
		clip := nodeNamed(t, m, "clip")
		sq := nodeNamed(t, m, "sq")
		pad := nodeNamed(t, m, "pad")
		drop := nodeNamed(t, m, "drop")
		if opset < 11 {
			if len(clip.Inputs) != 1 || attrs(clip) != "max:float=1 min:float=-1" {
				t.Errorf("opset %d: Clip %v %s", opset, clip.Inputs, attrs(clip))
			}
			if len(pad.Inputs) != 1 || pad.Attr("pads") == nil || pad.Attr("value").Float != 0.5 {
				t.Errorf("opset %d: Pad %v %s", opset, pad.Inputs, attrs(pad))
			}
		} else {
			if strings.Join(clip.Inputs, " ") != "c clip.min clip.max" && strings.Join(clip.Inputs, " ") != "x clip.min clip.max" || len(clip.Attrs) != 0 {
				t.Errorf("opset %d: Clip %v %s", opset, clip.Inputs, attrs(clip))
			}
			if mn := m.Graph.Initializer("clip.min"); mn == nil || len(mn.Dims) != 0 || mn.DType != model.Float32 {
				t.Errorf("opset %d: clip.min %+v", opset, mn)
			}
			if strings.Join(pad.Inputs, " ") != "unsq pad.pads pad.value" || len(pad.Attrs) != 0 {
				t.Errorf("opset %d: Pad %v %s", opset, pad.Inputs, attrs(pad))
			}
		}
		if opset < 13 {
			if len(sq.Inputs) != 1 || attrs(sq) != "axes:ints=2" {
				t.Errorf("opset %d: Squeeze %v %s", opset, sq.Inputs, attrs(sq))
			}
		} else if strings.Join(sq.Inputs, " ") != "clip sq.axes" || len(sq.Attrs) != 0 {
			t.Errorf("opset %d: Squeeze %v %s", opset, sq.Inputs, attrs(sq))
		}
		if opset < 12 {
			if len(drop.Inputs) != 1 || attrs(drop) != "ratio:float=0.2" {
				t.Errorf("opset %d: Dropout %v %s", opset, drop.Inputs, attrs(drop))
			}
		} else if strings.Join(drop.Inputs, " ") != "pad drop.ratio" {
			t.Errorf("opset %d: Dropout %v", opset, drop.Inputs)
		}
		if opset >= 10 {
			up := nodeNamed(t, m, "up")
			want := map[int64]string{10: "drop up.scales", 11: "drop up.roi up.scales", 12: "drop up.roi up.scales"}[opset]
			if want == "" {
				want = "drop  up.scales"
			}
			if got := strings.Join(up.Inputs, " "); got != want {
				t.Errorf("opset %d: Resize inputs %q, want %q", opset, got, want)
			}
		}
		wantOut := "[1,3]"
		if got := g.Shape.String(); got != wantOut {
			t.Errorf("opset %d: output %s", opset, got)
		}
	}
}

func TestOpsetErrors(t *testing.T) {
	for _, c := range []struct {
		name  string
		opset int64
		f     func(b *Builder, x Value)
	}{
		{"HardSwish", 13, func(b *Builder, x Value) { b.HardSwish("h", x) }},
		{"Resize", 9, func(b *Builder, x Value) { b.Resize("r", x, []float64{1, 1, 2, 2}, "") }},
		{"ceil_mode", 9, func(b *Builder, x Value) { b.MaxPool("p", x, Pool2D(2, 2, 0).Ceil()) }},
		{"Gemm without C", 10, func(b *Builder, x Value) { b.Gemm("g", b.Flatten("f", x, 1), 2, false) }},
		{"per-axis", 12, func(b *Builder, x Value) {
			w := b.ConstInts("w", model.Int8, []int64{4, 4}, make([]int64, 16))
			b.DequantizeLinear("dq", w, b.ConstFloats("s", model.Float32, []int64{4}, []float64{1, 1, 1, 1}), Value{}, 0)
		}},
		{"QuantizeLinear", 9, func(b *Builder, x Value) { b.QDQ(x, model.Int8, 0.1, 0) }},
	} {
		b := New("e", c.opset)
		x := b.Input("x", model.Float32, 1, 4, 8, 8)
		c.f(b, x)
		if !errors.Is(b.Err(), ErrOpset) {
			t.Errorf("%s at opset %d: error %v", c.name, c.opset, b.Err())
		}
		if _, err := b.Model(); err == nil {
			t.Errorf("%s: Model succeeds after an error", c.name)
		}
	}
	if err := New("old", 8).Err(); err == nil {
		t.Error("opset 8 accepted")
	}
}

func TestMisuse(t *testing.T) {
	other := New("other", 13)
	foreign := other.Input("y", model.Float32, 1, 3, 4, 4)
	for _, c := range []struct {
		name string
		f    func(b *Builder, x Value)
	}{
		{"duplicate node", func(b *Builder, x Value) { b.Relu("r", x); b.Relu("r", x) }},
		{"node named like a tensor", func(b *Builder, x Value) { b.Relu("x", x) }},
		{"duplicate input", func(b *Builder, x Value) { b.Input("x", model.Float32, 1) }},
		{"empty input name", func(b *Builder, x Value) { b.Input("", model.Float32, 1) }},
		{"bad input dtype", func(b *Builder, x Value) { b.Input("z", model.DType(99), 1) }},
		{"negative input dim", func(b *Builder, x Value) { b.Input("z", model.Float32, -1) }},
		{"zero value", func(b *Builder, x Value) { b.Relu("r", Value{}) }},
		{"foreign value", func(b *Builder, x Value) { b.Add("a", x, foreign) }},
		{"output twice", func(b *Builder, x Value) { b.Output(x); b.Output(x) }},
		{"conv groups", func(b *Builder, x Value) { b.Conv("c", x, Conv2D(4, 3, 1, 1).Grouped(2)) }},
		{"conv kernel rank", func(b *Builder, x Value) { b.Conv("c", x, ConvSpec{Out: 4, Kernel: []int64{3}}) }},
		{"conv on rank 2", func(b *Builder, x Value) { b.Conv("c", b.Flatten("f", x, 1), Conv2D(4, 1, 1, 0)) }},
		{"conv window too big", func(b *Builder, x Value) { b.Conv("c", x, Conv2D(4, 9, 1, 0)) }},
		{"conv zero stride", func(b *Builder, x Value) { b.Conv("c", x, Conv2D(4, 3, 0, 0)) }},
		{"conv wrong weight", func(b *Builder, x Value) {
			b.ConvWith("c", x, b.Weight("w", model.Float32, 4, 2, 3, 3), Value{}, ConvSpec{})
		}},
		{"conv wrong bias", func(b *Builder, x Value) {
			b.ConvWith("c", x, b.Weight("w", model.Float32, 4, 3, 3, 3), b.Weight("bb", model.Float32, 5), ConvSpec{})
		}},
		{"broadcast", func(b *Builder, x Value) { b.Add("a", x, b.Weight("w", model.Float32, 5)) }},
		{"dtype mix", func(b *Builder, x Value) { b.Mul("a", x, b.Weight("w", model.Float16, 1)) }},
		{"reshape count", func(b *Builder, x Value) { b.Reshape("r", x, 5, -1) }},
		{"reshape two -1", func(b *Builder, x Value) { b.Reshape("r", x, -1, -1) }},
		{"transpose perm", func(b *Builder, x Value) { b.Transpose("t", x, 0, 1) }},
		{"squeeze non-1", func(b *Builder, x Value) { b.Squeeze("s", x, 1) }},
		{"unsqueeze none", func(b *Builder, x Value) { b.Unsqueeze("u", x) }},
		{"concat ranks", func(b *Builder, x Value) { b.Concat("c", 1, x, b.Flatten("f", x, 1)) }},
		{"concat axis", func(b *Builder, x Value) { b.Concat("c", 4, x, x) }},
		{"softmax axis", func(b *Builder, x Value) { b.Softmax("s", x, 7) }},
		{"clip bounds", func(b *Builder, x Value) { b.Clip("c", x, 1, 0) }},
		{"dropout ratio", func(b *Builder, x Value) { b.Dropout("d", x, 1) }},
		{"pad count", func(b *Builder, x Value) { b.Pad("p", x, []int64{1}, "", 0) }},
		{"pad mode", func(b *Builder, x Value) { b.Pad("p", x, make([]int64, 8), "wrap", 0) }},
		{"gemm on rank 4", func(b *Builder, x Value) { b.Gemm("g", x, 3, true) }},
		{"matmul inner", func(b *Builder, x Value) { b.MatMul("m", x, b.Weight("w", model.Float32, 5, 2)) }},
		{"quantize int", func(b *Builder, x Value) {
			b.QuantizeLinear("q", b.ConstInts("i", model.Int8, []int64{1}, []int64{1}), b.scalar("s", model.Float32, 1), Value{}, 0)
		}},
		{"dequantize float", func(b *Builder, x Value) { b.DequantizeLinear("d", x, b.scalar("s", model.Float32, 1), Value{}, 0) }},
		{"lstm rank", func(b *Builder, x Value) { b.LSTM("l", x, RNNSpec{Hidden: 4}) }},
		{"gru direction", func(b *Builder, x Value) {
			b.GRU("l", b.Reshape("r", x, 4, 3, 16), RNNSpec{Hidden: 4, Direction: "sideways"})
		}},
		{"no outputs", func(b *Builder, x Value) {}},
	} {
		t.Run(c.name, func(t *testing.T) {
			b := New("m", 13)
			x := b.Input("x", model.Float32, 1, 3, 4, 4)
			c.f(b, x)
			if _, err := b.Model(); err == nil {
				t.Error("no error")
			} else if !strings.HasPrefix(err.Error(), "build: ") {
				t.Errorf("error %q lacks the package prefix", err)
			}
			// Once failed, calls do nothing and return the zero Value.
			first := b.Err()
			if v := b.Conv("after", x, Conv2D(4, 1, 1, 0)); v.Valid() && first != nil {
				t.Error("op after an error returned a value")
			}
			if first != nil && b.Err() != first {
				t.Error("the first error was replaced")
			}
		})
	}
}

func TestShapes(t *testing.T) {
	b := New("shapes", 13, WithValueInfo())
	n := model.Sym("N")
	x := b.InputShape("x", model.Float32, model.Shape{n, model.Known(3), model.Known(10), model.Known(10)})
	check := func(v Value, want string) {
		t.Helper()
		if got := v.Shape.String(); got != want {
			t.Errorf("%s: shape %s, want %s (%v)", v.Name, got, want, b.Err())
		}
	}
	check(b.MaxPool("pool_floor", x, Pool2D(3, 2, 0)), "[N,3,4,4]")
	check(b.MaxPool("pool_ceil", x, Pool2D(3, 2, 0).Ceil()), "[N,3,5,5]")
	check(b.AveragePool("pool_pad", x, PoolSpec{Kernel: []int64{3, 3}, Pads: []int64{1, 1, 1, 1}, CountIncludePad: true}), "[N,3,10,10]")
	check(b.MaxPool("pool_dil", x, PoolSpec{Kernel: []int64{2, 2}, Dilations: []int64{2, 2}}), "[N,3,8,8]")
	check(b.Conv("conv_dil", x, Conv2D(4, 3, 1, 0).Dilated(2)), "[N,4,6,6]")
	ct := b.ConvTranspose("deconv", x, ConvSpec{Out: 6, Kernel: []int64{3, 3}, Strides: []int64{2, 2}, Pads: []int64{1, 1, 1, 1}, OutputPadding: []int64{1, 1}, Group: 3})
	check(ct, "[N,6,20,20]")
	if v, _ := b.Lookup("deconv.weight"); v.Shape.String() != "[3,2,3,3]" {
		t.Errorf("ConvTranspose weight %s", v.Shape)
	}
	check(b.GlobalAveragePool("gap", x), "[N,3,1,1]")
	f := b.Flatten("flat", x, 1)
	check(f, "[N,300]")
	check(b.Flatten("flat0", x, 0), "[1,?1]")
	check(b.Reshape("keep_batch", x, 0, -1), "[N,300]")
	check(b.Reshape("known", b.Weight("w6", model.Float32, 2, 3), -1), "[6]")
	check(b.Transpose("nhwc", x, 0, 2, 3, 1), "[N,10,10,3]")
	check(b.Transpose("rev", x), "[10,10,3,N]")
	check(b.Concat("cat", 1, x, x, x), "[N,9,10,10]")
	check(b.Concat("cat0", 0, x, x), "[?2,3,10,10]")
	check(b.Add("bias", x, b.Weight("b3", model.Float32, 3, 1, 1)), "[N,3,10,10]")
	check(b.Mul("outer", b.Weight("col", model.Float32, 4, 1), b.Weight("row", model.Float32, 5)), "[4,5]")
	check(b.MatMul("mm", f, b.Weight("mmw", model.Float32, 300, 7)), "[N,7]")
	check(b.MatMul("bmm", b.Weight("ba", model.Float32, 2, 1, 4, 5), b.Weight("bb", model.Float32, 3, 5, 6)), "[2,3,4,6]")
	check(b.MatMul("vec", b.Weight("va", model.Float32, 5), b.Weight("vb", model.Float32, 5, 6)), "[6]")
	check(b.GemmWith("gt", b.Weight("ga", model.Float32, 5, 4), b.Weight("gb", model.Float32, 5, 6), Value{}, true, false), "[4,6]")
	check(b.Squeeze("sq_all", b.GlobalAveragePool("gap2", b.Weight("g4", model.Float32, 1, 3, 2, 2))), "[3]")
	check(b.Unsqueeze("unsq", f, 0, -1), "[1,N,300,1]")
	check(b.Pad("pad", x, []int64{0, 0, 1, 2, 0, 0, 3, 4}, "reflect", 0), "[N,3,14,16]")
	check(b.Resize("up", x, []float64{1, 1, 2, 2.5}, "linear"), "[N,3,20,25]")
	check(b.Softmax("sm", f, -1), "[N,300]")
	check(b.HardSigmoid("hs", x, 1.0/6, 0.5), "[N,3,10,10]")
	check(b.LeakyRelu("lr", x, 0.01), "[N,3,10,10]")
	check(b.Sigmoid("sg", x), "[N,3,10,10]")
	check(b.Tanh("th", x), "[N,3,10,10]")
	seq := b.Reshape("seq", x, 10, 0, -1) // [10, 3, ?] since N is unknown
	check(seq, "[10,3,?3]")
	rs := b.Reshape("rs", x, 30, 0, 10) // [30, 3, 10]: N dropped, known input elements unknown
	check(rs, "[30,3,10]")
	lstm := b.LSTM("lstm", rs, RNNSpec{Hidden: 8, Direction: "bidirectional", Bias: true})
	check(lstm, "[30,2,3,8]")
	gru := b.GRU("gru", rs, RNNSpec{Hidden: 5})
	check(gru, "[30,1,3,5]")
	for name, want := range map[string]string{"lstm.W": "[2,32,10]", "lstm.R": "[2,32,8]", "lstm.B": "[2,64]", "gru.W": "[1,15,10]", "gru.R": "[1,15,5]"} {
		if v, ok := b.Lookup(name); !ok || v.Shape.String() != want {
			t.Errorf("%s: %s, want %s", name, v.Shape, want)
		}
	}
	if _, ok := b.Lookup("gru.B"); ok {
		t.Error("gru.B without Bias")
	}
	b.Output(lstm)
	b.Output(gru)
	m := mustModel(t, b)
	if a := nodeNamed(t, m, "gru").Attr("linear_before_reset"); a == nil || a.Int != 1 {
		t.Error("GRU lacks linear_before_reset=1")
	}
	if got := attrs(nodeNamed(t, m, "lstm")); got != "direction:string=bidirectional hidden_size:int=8" {
		t.Errorf("LSTM attrs %s", got)
	}
	if got := attrs(nodeNamed(t, m, "pool_ceil")); got != "ceil_mode:int=1 kernel_shape:ints=3,3 pads:ints=0,0,0,0 strides:ints=2,2" {
		t.Errorf("MaxPool attrs %s", got)
	}
	if got := attrs(nodeNamed(t, m, "gt")); got != "transA:int=1" {
		t.Errorf("Gemm attrs %s", got)
	}
	// Every node output except the graph outputs has value info.
	outs := 0
	for _, n := range m.Graph.Nodes {
		outs += len(n.Outputs)
	}
	if len(m.Graph.ValueInfo) != outs-2 {
		t.Errorf("%d value infos for %d outputs", len(m.Graph.ValueInfo), outs)
	}
}

func TestQDQ(t *testing.T) {
	b := New("q", 13)
	x := b.Input("x", model.Float32, 1, 4, 8, 8)
	xq := b.QDQ(x, model.Int8, 0.02, 0)
	w := b.QuantizedWeight("conv.weight", model.Int8, 6, 4, 3, 3)
	bias := b.QuantizedWeight("conv.bias", model.Int32, 6)
	y := b.ConvWith("conv", xq, w, bias, ConvSpec{Pads: []int64{1, 1, 1, 1}})
	y = b.QDQ(b.Relu("relu", y), model.Uint8, 0.02, 128)
	b.Output(y)
	m := mustModel(t, b)
	if y.DType != model.Float32 || y.Shape.String() != "[1,6,8,8]" || y.Name != "relu_dequantized" {
		t.Errorf("output %+v", y)
	}
	q := nodeNamed(t, m, "x_quantized")
	if q.Op != "QuantizeLinear" || strings.Join(q.Inputs, " ") != "x x_scale x_zero_point" || len(q.Attrs) != 0 {
		t.Errorf("Q node %+v", q)
	}
	dq := nodeNamed(t, m, "conv.weight")
	if dq.Op != "DequantizeLinear" || strings.Join(dq.Inputs, " ") != "conv.weight_quantized conv.weight_scale conv.weight_zero_point" || attrs(dq) != "axis:int=0" {
		t.Errorf("weight DQ %+v %s", dq, attrs(dq))
	}
	if s := m.Graph.Initializer("conv.weight_scale"); s.Dims[0] != 6 {
		t.Errorf("per-channel scale %v", s.Dims)
	}
	if s := m.Graph.Initializer("conv.bias_scale"); len(s.Dims) != 0 {
		t.Errorf("bias scale %v", s.Dims)
	}
	if zp := m.Graph.Initializer("relu_zero_point"); zp.DType != model.Uint8 {
		t.Errorf("uint8 zero point %s", zp.DType)
	}
	if v, _ := b.Lookup("relu_quantized"); v.DType != model.Uint8 {
		t.Errorf("quantized dtype %s", v.DType)
	}
	b = New("q12", 12, Declared())
	w = b.QuantizedWeight("w", model.Int8, 6, 4, 3, 3)
	b.Output(w)
	m = mustModel(t, b)
	if s := m.Graph.Initializer("w_scale"); len(s.Dims) != 0 || !s.HasData() || m.Graph.Initializer("w_quantized").HasData() {
		t.Errorf("opset 12: scale %v, declared weight has data", s.Dims)
	}
}

func TestAutoNames(t *testing.T) {
	b := New("auto", 13)
	x := b.Input("Relu_1", model.Float32, 1, 2)
	r := b.Relu("", x)
	r = b.Relu("", r)
	b.Output(r)
	m := mustModel(t, b)
	if m.Graph.Nodes[0].Name != "Relu_2" || m.Graph.Nodes[1].Name != "Relu_3" {
		t.Errorf("names %s %s", m.Graph.Nodes[0].Name, m.Graph.Nodes[1].Name)
	}
}
