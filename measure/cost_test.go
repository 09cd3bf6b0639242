package measure

import (
	"encoding/json"
	"math"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// costsOf infers m (binding dims) and counts its costs.
func costsOf(t *testing.T, m *model.Model, dims map[string]int64) *Costs {
	t.Helper()
	inf, err := Infer(m, InferOptions{Dims: dims})
	if err != nil {
		t.Fatalf("Infer: %v", err)
	}
	if len(inf.Unresolved) > 0 {
		t.Fatalf("shape inference left %d node(s) unresolved: %s", len(inf.Unresolved), inf.UnresolvedSummary())
	}
	return CountCosts(inf)
}

func within(got int64, want, tol float64) bool {
	return math.Abs(float64(got)-want) <= tol*want
}

// published reports whether got agrees with a published figure both as the
// README claims (within rel of it) and as the publication prints it (within
// half a unit of its last printed digit, unit).
func published(got int64, want, unit, rel float64) bool {
	d := math.Abs(float64(got) - want)
	return d <= rel*want && d <= unit/2
}

// TestCostsTorchvision checks MACs of the reference architectures at
// 224×224, batch 1, against the published figures: within 0.1 % (the
// README's claim) and equal to them at the documentation's rounding.
func TestCostsTorchvision(t *testing.T) {
	cases := []struct {
		name  string
		gmacs float64
		unit  float64 // the last printed digit, in GMACs
	}{
		{"resnet18", 1.814, 0.001},      // torchvision model documentation (pytorch.org/vision, the resnet18 page), "GFLOPS" (multiply-adds), confirmed
		{"resnet50", 4.089, 0.001},      // torchvision model documentation, resnet50, confirmed
		{"mobilenet_v2", 0.301, 0.001},  // torchvision model documentation, mobilenet_v2, confirmed
		{"squeezenet1_1", 0.349, 0.001}, // torchvision model documentation, squeezenet1_1, confirmed
		{"alexnet", 0.714, 0.001},       // torchvision model documentation, alexnet, confirmed
		{"vgg16", 15.47, 0.01},          // torchvision model documentation, vgg16, confirmed
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			f, ok := build.Architecture(c.name)
			if !ok {
				t.Fatalf("no architecture %q", c.name)
			}
			m, err := f(build.Options{Declared: true})
			if err != nil {
				t.Fatal(err)
			}
			got := costsOf(t, m, nil)
			if len(got.Unresolved) > 0 {
				t.Fatalf("unresolved: %+v", got.Unresolved)
			}
			if !published(got.MACs, c.gmacs*1e9, c.unit*1e9, 0.001) {
				t.Errorf("MACs %d (%.4f G), published %.3f G", got.MACs, float64(got.MACs)/1e9, c.gmacs)
			}
			t.Logf("%s: %d MACs (%.4f G; published %.3f G), %d FLOPs", c.name, got.MACs, float64(got.MACs)/1e9, c.gmacs, got.FLOPs)
		})
	}
}

// TestCostsMobileNetV1 checks the width multipliers of Howard et al. 2017:
// within 1 % (the README's claim) and equal at the paper's rounding to 1 M.
func TestCostsMobileNetV1(t *testing.T) {
	cases := []struct {
		width float64
		macs  float64
	}{
		{1.0, 569e6},  // Howard et al. 2017, "MobileNets", Table 6: 569 M mult-adds, confirmed
		{0.75, 325e6}, // Howard et al. 2017, Table 6: 325 M, confirmed
		{0.5, 149e6},  // Howard et al. 2017, Table 6: 149 M, confirmed
		{0.25, 41e6},  // Howard et al. 2017, Table 6: 41 M, confirmed
	}
	for _, c := range cases {
		m, err := build.MobileNetV1(build.Options{Width: c.width, Declared: true})
		if err != nil {
			t.Fatal(err)
		}
		got := costsOf(t, m, nil)
		if !published(got.MACs, c.macs, 1e6, 0.01) {
			t.Errorf("width %g: MACs %d, published %.0f", c.width, got.MACs, c.macs)
		}
	}
}

// TestCostTableCoversInference checks that every operator shape inference
// knows has a cost rule or is listed as not costed, so none is counted as
// zero by omission.
func TestCostTableCoversInference(t *testing.T) {
	for _, op := range SupportedOps() {
		_, ruled := flopRules[op]
		_, listed := uncostedOps[op]
		switch {
		case !ruled && !listed:
			t.Errorf("operator %s has no cost rule and is not in uncostedOps", op)
		case ruled && listed:
			t.Errorf("operator %s is both in flopRules and uncostedOps", op)
		}
	}
	known := map[string]bool{}
	for _, op := range SupportedOps() {
		known[op] = true
	}
	for op := range flopRules {
		if strings.HasPrefix(op, "tflite:") {
			continue // TFLite's rows, from tfliteOps: no shape inference (TestTFLiteOpNames)
		}
		if !known[op] {
			t.Errorf("flopRules has %s, which shape inference does not know", op)
		}
	}
	for op := range uncostedOps {
		if !known[op] {
			t.Errorf("uncostedOps has %s, which shape inference does not know", op)
		}
	}
}

// costGraph builds small graphs for the hand-worked cases: float32 runtime
// inputs, weights declared without values, nodes in order.
type costGraph struct{ g *model.Graph }

func newCostGraph() *costGraph { return &costGraph{g: &model.Graph{Name: "cost"}} }

// in adds a runtime input; dims are ints (known) or strings (symbols).
func (b *costGraph) in(name string, dt model.DType, dims ...any) string {
	s := model.Shape{}
	for _, d := range dims {
		switch v := d.(type) {
		case int:
			s = append(s, model.Known(int64(v)))
		case string:
			s = append(s, model.Sym(v))
		}
	}
	b.g.Inputs = append(b.g.Inputs, &model.ValueInfo{Name: name, Type: model.TensorType(dt, s)})
	return name
}

// w adds a float32 weight declared without values.
func (b *costGraph) w(name string, dims ...int64) string {
	b.g.Initializers = append(b.g.Initializers, &model.Tensor{Name: name, DType: model.Float32, Dims: dims})
	return name
}

// i64 adds an int64 scalar constant.
func (b *costGraph) i64(name string, v int64) string {
	b.g.Initializers = append(b.g.Initializers, nnIn{name: name, dt: model.Int64, shape: model.Shape{}, ints: []int64{v}}.tensor())
	return name
}

func (b *costGraph) node(op, name string, ins []string, out string, attrs ...*model.Attr) string {
	b.g.Nodes = append(b.g.Nodes, &model.Node{Name: name, Op: op, Inputs: ins, Outputs: []string{out}, Attrs: attrs})
	return out
}

func (b *costGraph) out(names ...string) {
	for _, n := range names {
		b.g.Outputs = append(b.g.Outputs, &model.ValueInfo{Name: n})
	}
}

func (b *costGraph) model() *model.Model {
	return &model.Model{Format: "onnx", IRVersion: 8, Opsets: map[string]int64{"": 17}, Graph: b.g}
}

func atG(name string, g *model.Graph) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrGraph, Graph: g}
}

const f32c = model.Float32

// TestCostsHandWorked checks each MAC rule on one small node, the
// arithmetic in the comment beside each figure.
func TestCostsHandWorked(t *testing.T) {
	cases := []struct {
		name  string
		build func(b *costGraph) string
		macs  int64
	}{
		{"depthwise conv", func(b *costGraph) string {
			x := b.in("x", f32c, 1, 8, 10, 10)
			return b.node("Conv", "dw", []string{x, b.w("w", 8, 1, 3, 3)}, "y", atI("group", 8), atIs("pads", 1, 1, 1, 1))
		}, 8 * 10 * 10 * 1 * 3 * 3}, // derived: output [1,8,10,10] = 800 elements × C_in/group 1 × kernel 3×3 = 7,200
		{"grouped conv", func(b *costGraph) string {
			x := b.in("x", f32c, 1, 8, 6, 6)
			return b.node("Conv", "g", []string{x, b.w("w", 16, 4, 1, 1)}, "y", atI("group", 2))
		}, 16 * 6 * 6 * 4}, // derived: output [1,16,6,6] = 576 elements × C_in/group 8/2=4 × kernel 1 = 2,304
		{"dilated conv", func(b *costGraph) string {
			x := b.in("x", f32c, 1, 2, 9, 9)
			return b.node("Conv", "dil", []string{x, b.w("w", 4, 2, 3, 3)}, "y", atIs("dilations", 2, 2))
		}, 4 * 5 * 5 * 2 * 9}, // derived: effective kernel (3-1)·2+1 = 5, output 9-5+1 = 5 → [1,4,5,5] = 100 × C_in 2 × 3×3 = 1,800 (dilation adds no taps)
		{"ConvTranspose output_padding", func(b *costGraph) string {
			x := b.in("x", f32c, 1, 2, 3, 3)
			return b.node("ConvTranspose", "ct", []string{x, b.w("w", 2, 3, 3, 3)}, "y", atIs("strides", 2, 2), atIs("output_padding", 1, 1))
		}, 18 * 3 * 9}, // derived: output 2·(3-1)+1+3 = 8, [1,3,8,8]; MACs = input 1·2·3·3 = 18 × C_out/group 3 × 3×3 = 486
		{"batched broadcast MatMul", func(b *costGraph) string {
			return b.node("MatMul", "mm", []string{b.in("a", f32c, 2, 1, 4, 5), b.in("b", f32c, 3, 5, 6)}, "y")
		}, 2 * 3 * 4 * 6 * 5}, // derived: [2,1,4,5]×[3,5,6] → [2,3,4,6] = 144 elements × K 5 = 720
		{"Gemm transA", func(b *costGraph) string {
			return b.node("Gemm", "gemm", []string{b.in("a", f32c, 4, 3), b.w("b", 4, 5)}, "y", atI("transA", 1))
		}, 3 * 5 * 4}, // derived: Aᵀ is [3,4], so M=3, K=4; B [4,5] → [3,5] = 15 × K 4 = 60
		{"Einsum batched matmul", func(b *costGraph) string {
			return b.node("Einsum", "es", []string{b.in("x", f32c, 2, 3, 4), b.in("y", f32c, 2, 4, 5)}, "z", atS("equation", "bij,bjk->bik"))
		}, 2 * 3 * 4 * 5}, // derived: b=2 · i=3 · j=4 · k=5 = 120
		{"LSTM bidirectional", func(b *costGraph) string {
			x := b.in("x", f32c, 5, 2, 3)
			return b.node("LSTM", "lstm", []string{x, b.w("W", 2, 16, 3), b.w("R", 2, 16, 4)}, "y",
				atI("hidden_size", 4), atS("direction", "bidirectional"))
		}, 4 * (3 + 4) * 4 * 5 * 2 * 2}, // derived: 4 gates × (input 3 + hidden 4) × hidden 4 × seq 5 × batch 2 × 2 directions = 2,240
		{"GRU", func(b *costGraph) string {
			x := b.in("x", f32c, 7, 1, 10)
			return b.node("GRU", "gru", []string{x, b.w("W", 1, 24, 10), b.w("R", 1, 24, 8)}, "y")
		}, 3 * (10 + 8) * 8 * 7}, // derived: 3 gates × (10 + 8) × hidden 8 (R's last dim) × seq 7 × batch 1 × 1 direction = 3,024
		{"QLinearConv", func(b *costGraph) string {
			x := b.in("x", model.Uint8, 1, 3, 5, 5)
			s, z := b.in("s", f32c), b.in("z", model.Uint8)
			w := b.in("wq", model.Uint8, 2, 3, 3, 3)
			return b.node("QLinearConv", "qc", []string{x, s, z, w, s, z, s, z}, "y")
		}, 2 * 3 * 3 * 3 * 9}, // derived: output [1,2,3,3] = 18 × C_in 3 × 3×3 = 486, as the float Conv
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b := newCostGraph()
			b.out(c.build(b))
			got := costsOf(t, b.model(), nil)
			if len(got.Unresolved) > 0 {
				t.Fatalf("unresolved: %+v", got.Unresolved)
			}
			if got.MACs != c.macs || got.FLOPs != 2*c.macs {
				t.Errorf("MACs %d, FLOPs %d; want %d and %d", got.MACs, got.FLOPs, c.macs, 2*c.macs)
			}
			if len(got.Nodes) != 1 || !got.Nodes[0].Known || got.Nodes[0].MACs != c.macs {
				t.Errorf("nodes %+v", got.Nodes)
			}
		})
	}
}

// TestCostsFLOPs checks FLOPs = 2 × MACs + one per output element of
// elementwise ops, window elements of pools, on a small classifier.
func TestCostsFLOPs(t *testing.T) {
	b := newCostGraph()
	x := b.in("x", f32c, 1, 3, 8, 8)
	y := b.node("Conv", "conv", []string{x, b.w("w", 4, 3, 3, 3)}, "c", atIs("pads", 1, 1, 1, 1))
	y = b.node("Relu", "relu", []string{y}, "r")
	y = b.node("MaxPool", "pool", []string{y}, "p", atIs("kernel_shape", 2, 2), atIs("strides", 2, 2))
	y = b.node("GlobalAveragePool", "gap", []string{y}, "g")
	y = b.node("Flatten", "flat", []string{y}, "f")
	y = b.node("Gemm", "fc", []string{y, b.w("fcw", 10, 4)}, "l", atI("transB", 1))
	b.out(b.node("Softmax", "softmax", []string{y}, "s"))
	got := costsOf(t, b.model(), nil)
	want := map[string]OpCost{
		"Conv":              {1, 6912, 13824}, // derived: output [1,4,8,8] = 256 × C_in 3 × 3×3 = 6,912 MACs
		"Relu":              {1, 0, 256},      // derived: one per output element, 4·8·8 = 256
		"MaxPool":           {1, 0, 256},      // derived: output [1,4,4,4] = 64 × window 2×2 = 256
		"GlobalAveragePool": {1, 0, 64},       // derived: output [1,4,1,1] = 4 × window 4×4 = 64, one per input element
		"Flatten":           {1, 0, 0},        // data movement: 0 by definition
		"Gemm":              {1, 40, 80},      // derived: output [1,10] × K 4 = 40 MACs
		"Softmax":           {1, 0, 10},       // derived: one per output element
	}
	for op, w := range want {
		if got.ByOp[op] != w {
			t.Errorf("%s: %+v, want %+v", op, got.ByOp[op], w)
		}
	}
	if len(got.ByOp) != len(want) {
		t.Errorf("by op: %+v", got.ByOp)
	}
	// derived: MACs 6,912 + 40 = 6,952; FLOPs 2·6,952 + 256 + 256 + 64 + 10 = 14,490
	if got.MACs != 6952 || got.FLOPs != 14490 {
		t.Errorf("MACs %d, FLOPs %d; want 6952 and 14490", got.MACs, got.FLOPs)
	}
	if len(got.Nodes) != 7 || got.Nodes[0].Node != "conv" || got.Nodes[0].FLOPs != 13824 {
		t.Errorf("nodes %+v", got.Nodes)
	}
}

// vi is a value_info of a known float32 (or other) shape.
func vi(name string, dt model.DType, dims ...int64) *model.ValueInfo {
	return &model.ValueInfo{Name: name, Type: model.TensorType(dt, model.KnownShape(dims...))}
}

func matmulNode(name, a, b, out string) *model.Node {
	return &model.Node{Name: name, Op: "MatMul", Inputs: []string{a, b}, Outputs: []string{out}}
}

// TestCostsIf checks that If counts its more expensive branch, whichever
// it is, and that branch nodes read values of the enclosing graph.
func TestCostsIf(t *testing.T) {
	b := newCostGraph()
	cond := b.in("cond", model.Bool)
	x := b.in("x", f32c, 1, 4)
	wa, wb, wc := b.w("wa", 4, 8), b.w("wb", 4, 16), b.w("wc", 16, 8)
	then := &model.Graph{Name: "then",
		Nodes:   []*model.Node{matmulNode("then_mm", x, wa, "t")},
		Outputs: []*model.ValueInfo{{Name: "t"}}}
	els := &model.Graph{Name: "else",
		Nodes:   []*model.Node{matmulNode("else_mm1", x, wb, "e1"), matmulNode("else_mm2", "e1", wc, "e")},
		Outputs: []*model.ValueInfo{{Name: "e"}}}
	b.g.Nodes = append(b.g.Nodes, &model.Node{Name: "if", Op: "If", Inputs: []string{cond}, Outputs: []string{"y"},
		Attrs: []*model.Attr{atG("then_branch", then), atG("else_branch", els)}})
	b.out("y")
	got := costsOf(t, b.model(), nil)
	// derived: then [1,4]×[4,8] = 8 × 4 = 32 MACs; else [1,4]×[4,16] = 16 × 4 = 64
	// plus [1,16]×[16,8] = 8 × 16 = 128, 192 MACs: the else branch counts.
	if got.MACs != 192 || got.FLOPs != 384 || len(got.Unresolved) != 0 {
		t.Errorf("MACs %d, FLOPs %d, unresolved %+v; want 192, 384, none", got.MACs, got.FLOPs, got.Unresolved)
	}
	if got.ByOp["MatMul"] != (OpCost{Nodes: 2, MACs: 192, FLOPs: 384}) {
		t.Errorf("by op %+v", got.ByOp)
	}
	if len(got.Nodes) != 1 || got.Nodes[0].Op != "If" || got.Nodes[0].MACs != 192 || !got.Nodes[0].Known {
		t.Errorf("nodes %+v", got.Nodes)
	}
}

// loopModel is a Loop of M iterations (M a constant, or a runtime input
// when m < 0; with a runtime condition when cond) whose body multiplies
// the carried [1,4] state by a [4,4] weight.
func loopModel(m int64, cond bool) *model.Model {
	b := newCostGraph()
	var mIn string
	if m >= 0 {
		mIn = b.i64("M", m)
	} else {
		mIn = b.in("M", model.Int64)
	}
	condIn := ""
	if cond {
		condIn = b.in("keep_going", model.Bool)
	}
	s0 := b.in("s0", f32c, 1, 4)
	w := b.w("wl", 4, 4)
	body := &model.Graph{Name: "body",
		Inputs: []*model.ValueInfo{vi("iter", model.Int64), vi("cond_in", model.Bool), vi("s_in", f32c, 1, 4)},
		Nodes: []*model.Node{
			{Name: "cond_pass", Op: "Identity", Inputs: []string{"cond_in"}, Outputs: []string{"cond_out"}},
			matmulNode("body_mm", "s_in", w, "s_out"),
		},
		Outputs: []*model.ValueInfo{{Name: "cond_out"}, {Name: "s_out"}}}
	b.g.Nodes = append(b.g.Nodes, &model.Node{Name: "loop", Op: "Loop", Inputs: []string{mIn, condIn, s0}, Outputs: []string{"s"},
		Attrs: []*model.Attr{atG("body", body)}})
	b.out("s")
	return b.model()
}

func TestCostsLoop(t *testing.T) {
	got := costsOf(t, loopModel(3, false), nil)
	// derived: body [1,4]×[4,4] = 4 × 4 = 16 MACs, × M 3 = 48 MACs, 96 FLOPs
	// (Identity is data movement)
	if got.MACs != 48 || got.FLOPs != 96 || len(got.Unresolved) != 0 {
		t.Errorf("M=3: MACs %d, FLOPs %d, unresolved %+v; want 48, 96, none", got.MACs, got.FLOPs, got.Unresolved)
	}
	if got.ByOp["MatMul"] != (OpCost{Nodes: 1, MACs: 48, FLOPs: 96}) {
		t.Errorf("by op %+v", got.ByOp)
	}

	// derived: with a runtime condition M=3 still bounds the loop: 48 MACs
	if got = costsOf(t, loopModel(3, true), nil); got.MACs != 48 || len(got.Unresolved) != 0 {
		t.Errorf("M=3 with a condition: MACs %d, unresolved %+v; want 48, none", got.MACs, got.Unresolved)
	}
	// A while loop as exporters write it (from memory: torch.onnx gives a
	// scripted while loop M = INT64_MAX and a condition): M is a bound, not a
	// count, so the body counts once (16 MACs) and the node is listed.
	if got = costsOf(t, loopModel(math.MaxInt64, true), nil); got.MACs != 16 || len(got.Unresolved) != 1 ||
		!strings.Contains(got.Unresolved[0].Reason, "trip count unknown") {
		t.Errorf("M=INT64_MAX with a condition: MACs %d, unresolved %+v; want 16 and trip count unknown", got.MACs, got.Unresolved)
	}
	// derived: a condition that is false before the first iteration runs the
	// body 0 times (ONNX Loop spec: the loop runs while cond and i < M).
	falseCond := loopModel(3, false)
	falseCond.Graph.Initializers = append(falseCond.Graph.Initializers, &model.Tensor{Name: "stop", DType: model.Bool, Dims: []int64{},
		Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{{0}}}})
	for _, n := range falseCond.Graph.Nodes {
		if n.Op == "Loop" {
			n.Inputs[1] = "stop"
		}
	}
	if got = costsOf(t, falseCond, nil); got.MACs != 0 || len(got.Unresolved) != 0 {
		t.Errorf("cond false: MACs %d, unresolved %+v; want 0, none", got.MACs, got.Unresolved)
	}
	got = costsOf(t, loopModel(-1, false), nil)
	// derived: M is a runtime input, so the body counts once: 16 MACs
	if got.MACs != 16 || len(got.Unresolved) != 1 || got.Unresolved[0].Node != "loop" ||
		!strings.Contains(got.Unresolved[0].Reason, "trip count unknown") || got.Nodes[0].Known {
		t.Errorf("runtime M: MACs %d, unresolved %+v, nodes %+v; want 16 and loop unresolved with trip count unknown", got.MACs, got.Unresolved, got.Nodes)
	}
}

func TestCostsScan(t *testing.T) {
	b := newCostGraph()
	xs := b.in("xs", f32c, 5, 1, 3)
	w := b.w("ws", 3, 2)
	body := &model.Graph{Name: "body",
		Inputs:  []*model.ValueInfo{vi("x_t", f32c, 1, 3)},
		Nodes:   []*model.Node{matmulNode("scan_mm", "x_t", w, "y_t")},
		Outputs: []*model.ValueInfo{{Name: "y_t"}}}
	b.g.Nodes = append(b.g.Nodes, &model.Node{Name: "scan", Op: "Scan", Inputs: []string{xs}, Outputs: []string{"ys"},
		Attrs: []*model.Attr{atG("body", body), atI("num_scan_inputs", 1)}})
	b.out("ys")
	got := costsOf(t, b.model(), nil)
	// derived: body [1,3]×[3,2] = 2 × 3 = 6 MACs, × scan length 5 (xs's axis 0) = 30
	if got.MACs != 30 || len(got.Unresolved) != 0 {
		t.Errorf("MACs %d, unresolved %+v; want 30, none", got.MACs, got.Unresolved)
	}
}

// TestCostsSymbolicBatch checks that a node whose shapes hold an unbound
// symbol is listed, not counted as zero, and that binding it gives the
// exact count.
func TestCostsSymbolicBatch(t *testing.T) {
	m, err := build.ResNet18(build.Options{BatchSymbol: "batch", Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	free := costsOf(t, m, nil)
	if len(free.Unresolved) == 0 {
		t.Fatalf("MACs %d with batch unbound and nothing unresolved", free.MACs)
	}
	first := free.Unresolved[0]
	if first.Node != "conv1" || first.Reason != "MACs unknown: output shape [batch,64,112,112] has symbolic dims" {
		t.Errorf("first unresolved %+v", first)
	}
	for _, n := range free.Nodes {
		if n.Op == "Conv" && (n.Known || n.MACs != 0) {
			t.Errorf("%s counted with batch unbound: %+v", n.Node, n)
		}
	}
	bound := costsOf(t, m, map[string]int64{"batch": 1})
	m1, err := build.ResNet18(build.Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	want := costsOf(t, m1, nil)
	if len(bound.Unresolved) != 0 || bound.MACs != want.MACs || bound.FLOPs != want.FLOPs {
		t.Errorf("batch=1: MACs %d FLOPs %d unresolved %d; want %d, %d, 0", bound.MACs, bound.FLOPs, len(bound.Unresolved), want.MACs, want.FLOPs)
	}
}

// TestCostsUncosted checks that a standard operator no convention covers
// counts 0 without making the model's MACs unknown.
func TestCostsUncosted(t *testing.T) {
	b := newCostGraph()
	b.out(b.node("Det", "det", []string{b.in("x", f32c, 3, 3)}, "d"))
	got := costsOf(t, b.model(), nil)
	if got.MACs != 0 || got.FLOPs != 0 || len(got.Unresolved) != 0 || !got.Nodes[0].Known {
		t.Errorf("Det: %+v", got)
	}
}

// TestCostsUnknownOperator checks that an operator of no rule is listed.
func TestCostsUnknownOperator(t *testing.T) {
	b := newCostGraph()
	x := b.in("x", f32c, 1, 4)
	b.g.Nodes = append(b.g.Nodes, &model.Node{Name: "custom", Op: "FusedThing", Domain: "com.example", Inputs: []string{x}, Outputs: []string{"y"}})
	b.out("y")
	m := b.model()
	m.Opsets["com.example"] = 1
	inf, err := Infer(m, InferOptions{})
	if err != nil {
		t.Fatal(err)
	}
	got := CountCosts(inf)
	if len(got.Unresolved) != 1 || !strings.Contains(got.Unresolved[0].Reason, "no cost rule for operator com.example:FusedThing") {
		t.Errorf("unresolved %+v", got.Unresolved)
	}
}

// TestMeasureCosts checks the wiring into Metrics: macs and flops after
// param_bytes in the JSON contract, cost entries in unresolved when the
// batch is unbound, exact figures with --dim batch=1.
func TestMeasureCosts(t *testing.T) {
	m, err := build.MobileNetV2(build.Options{BatchSymbol: "batch", Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	free, err := Measure(m, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, u := range free.Unresolved {
		found = found || strings.HasPrefix(u.Reason, "MACs unknown: output shape [batch,")
	}
	if !found {
		t.Errorf("batch unbound: no cost entry among unresolved %+v", free.Unresolved)
	}
	bound, err := Measure(m, 0, Options{Dims: map[string]int64{"batch": 1}})
	if err != nil {
		t.Fatal(err)
	}
	if !published(bound.MACs, 0.301e9, 0.001e9, 0.001) || bound.FLOPs < 2*bound.MACs || len(bound.Unresolved) != 0 { // torchvision model documentation, mobilenet_v2: 0.301 GMACs, confirmed
		t.Errorf("batch=1: MACs %d, FLOPs %d, unresolved %+v", bound.MACs, bound.FLOPs, bound.Unresolved)
	}
	js, err := json.Marshal(bound)
	if err != nil {
		t.Fatal(err)
	}
	s := string(js)
	pb, ma, fl, sp := strings.Index(s, `"param_bytes":`), strings.Index(s, `"macs":`), strings.Index(s, `"flops":`), strings.Index(s, `"sparsity":`)
	if pb < 0 || !(pb < ma && ma < fl && fl < sp) {
		t.Errorf("JSON keys param_bytes, macs, flops, sparsity at %d, %d, %d, %d: %s", pb, ma, fl, sp, s[:min(len(s), 300)])
	}
}

// TestCostsHostile runs the cost rules on nodes that shape inference
// rejects but whose output the file declares, so the rules see what a
// hostile file can give them: each must be listed, none may panic or go
// negative.
func TestCostsHostile(t *testing.T) {
	big := int64(1) << 40
	cases := []struct {
		name  string
		build func(b *costGraph) string
		out   []int64
	}{
		{"Conv weights rank 1", func(b *costGraph) string {
			return b.node("Conv", "n", []string{b.in("x", f32c, 1, 2, 3, 3), b.w("w", 2)}, "y")
		}, []int64{1, 2, 3, 3}},
		{"ConvTranspose weights rank 1", func(b *costGraph) string {
			return b.node("ConvTranspose", "n", []string{b.in("x", f32c, 1, 2, 3, 3), b.w("w", 2)}, "y")
		}, []int64{1, 2, 3, 3}},
		{"Conv overflow", func(b *costGraph) string {
			return b.node("Conv", "n", []string{b.in("x", f32c, 1<<62, 2, 3, 3), b.w("w", 2, 2, 3, 3)}, "y")
		}, []int64{1 << 62, 2, 1, 1}}, // output elements 2⁶³ overflow int64
		{"Gemm rank 3", func(b *costGraph) string {
			return b.node("Gemm", "n", []string{b.in("a", f32c, 2, 3, 4), b.w("b", 4, 5)}, "y")
		}, []int64{2, 5}},
		{"MatMul scalar", func(b *costGraph) string {
			return b.node("MatMul", "n", []string{b.in("a", f32c), b.w("b", 4, 5)}, "y")
		}, []int64{5}},
		{"Einsum operand count", func(b *costGraph) string {
			return b.node("Einsum", "n", []string{b.in("x", f32c, 2, 3)}, "y", atS("equation", "ij,jk->ik"))
		}, []int64{2, 3}},
		{"LSTM overflow", func(b *costGraph) string {
			return b.node("LSTM", "n", []string{b.in("x", f32c, int(big), 1, int(big)), b.w("W", 1, 4, 4)}, "y", atI("hidden_size", 1<<62))
		}, []int64{1, 1, 1, 1}},
		{"MaxPool negative kernel", func(b *costGraph) string {
			return b.node("MaxPool", "n", []string{b.in("x", f32c, 1, 1, 4, 4)}, "y", atIs("kernel_shape", -2, 2))
		}, []int64{1, 1, 2, 2}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b := newCostGraph()
			y := c.build(b)
			b.g.Outputs = append(b.g.Outputs, vi(y, f32c, c.out...))
			inf, err := Infer(b.model(), InferOptions{})
			if err != nil {
				t.Fatal(err)
			}
			got := CountCosts(inf)
			if len(got.Unresolved) == 0 || got.MACs < 0 || got.FLOPs < 0 || got.Nodes[0].Known {
				t.Errorf("MACs %d, FLOPs %d, unresolved %+v", got.MACs, got.FLOPs, got.Unresolved)
			}
		})
	}
}

// TestCostsFunction checks that a call of a model-local function costs
// its body, instantiated for each call's shapes.
func TestCostsFunction(t *testing.T) {
	b := newCostGraph()
	x := b.in("x", f32c, 1, 4)
	w1, w2 := b.w("w1", 4, 8), b.w("w2", 8, 2)
	b.g.Nodes = append(b.g.Nodes,
		&model.Node{Name: "dense1", Op: "Dense", Domain: "local", Inputs: []string{x, w1}, Outputs: []string{"h"}},
		&model.Node{Name: "dense2", Op: "Dense", Domain: "local", Inputs: []string{"h", w2}, Outputs: []string{"y"}})
	b.out("y")
	m := b.model()
	m.Opsets["local"] = 1
	m.Functions = []*model.Function{{Name: "Dense", Domain: "local", Inputs: []string{"a", "w"}, Outputs: []string{"r"},
		Nodes:  []*model.Node{matmulNode("mm", "a", "w", "t"), {Name: "act", Op: "Relu", Inputs: []string{"t"}, Outputs: []string{"r"}}},
		Opsets: map[string]int64{"": 17}}}
	got := costsOf(t, m, nil)
	// derived: dense1 [1,4]×[4,8] = 8 × 4 = 32 MACs, Relu 8; dense2 [1,8]×[8,2] = 2 × 8 = 16 MACs, Relu 2;
	// MACs 48, FLOPs 2·48 + 8 + 2 = 106
	if got.MACs != 48 || got.FLOPs != 106 || len(got.Unresolved) != 0 {
		t.Errorf("MACs %d, FLOPs %d, unresolved %+v; want 48, 106, none", got.MACs, got.FLOPs, got.Unresolved)
	}
	if got.ByOp["MatMul"] != (OpCost{Nodes: 2, MACs: 48, FLOPs: 96}) || got.Nodes[0].MACs != 32 || got.Nodes[1].MACs != 16 {
		t.Errorf("by op %+v, nodes %+v", got.ByOp, got.Nodes)
	}
}
