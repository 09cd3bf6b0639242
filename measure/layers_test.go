package measure

import (
	"fmt"
	"testing"

	"github.com/loadline/loadline/model"
)

func TestLayersDuplicateNodeNames(t *testing.T) {
	// Node names need not be unique in ONNX. Two MatMuls both named "mm":
	// x[1,4]·W1[4,8] is 1·8 outputs × K 4 = 32 MACs, a[1,8]·W2[8,2] is
	// 1·2 × 8 = 16 MACs; each layer must carry its own figure.
	w1 := nnF32("w1", make([]float64, 32), 4, 8).tensor()
	w2 := nnF32("w2", make([]float64, 16), 8, 2).tensor()
	mm1 := node("MatMul", []string{"x", "w1"}, []string{"a"})
	mm2 := node("MatMul", []string{"a", "w2"}, []string{"y"})
	mm1.Name, mm2.Name = "mm", "mm"
	g := &model.Graph{
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(4))},
		Initializers: []*model.Tensor{w1, w2},
		Nodes:        []*model.Node{mm1, mm2},
		Outputs:      []*model.ValueInfo{{Name: "y"}},
	}
	m, err := Measure(graphModel(g), 0, Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	if m.MACs != 48 {
		t.Fatalf("MACs %d, want 32 + 16 = 48", m.MACs)
	}
	if len(m.Layers) != 2 || m.Layers[0].MACs != 32 || m.Layers[1].MACs != 16 {
		t.Errorf("layers: got %+v, want MACs 32 then 16", m.Layers)
	}
}

func TestLayersTraffic(t *testing.T) {
	// Hand-worked: x float32 [1,4] · W float32 [4,8] → a [1,8], then
	// Relu(a) → y. MatMul: input 0 has 4 elements, output 8; weight bytes
	// 4·8·4 = 128; activation bytes x 16 + a 32 = 48. Relu: 8 in, 8 out,
	// no weights, activation bytes 32 + 32 = 64.
	w := nnF32("w", make([]float64, 32), 4, 8).tensor()
	g := &model.Graph{
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(4))},
		Initializers: []*model.Tensor{w},
		Nodes:        []*model.Node{node("MatMul", []string{"x", "w"}, []string{"a"}), node("Relu", []string{"a"}, []string{"y"})},
		Outputs:      []*model.ValueInfo{{Name: "y"}},
	}
	m, err := Measure(graphModel(g), 0, Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	mm, relu := m.Layers[0], m.Layers[1]
	if mm.InElements != 4 || mm.OutElements != 8 || mm.WeightBytes != 128 || mm.ActivationBytes != 48 || mm.DType != "float32" {
		t.Errorf("MatMul layer %+v", mm)
	}
	if relu.InElements != 8 || relu.OutElements != 8 || relu.WeightBytes != 0 || relu.ActivationBytes != 64 || relu.Depthwise {
		t.Errorf("Relu layer %+v", relu)
	}
}

// TestLayerTrafficConstantsAndShapeOperands: a layer's activation bytes are
// its run-time data inputs and its outputs; a constant it reads, stored or
// known before the run (a folded Shape, a folded Transpose of a weight), is
// weight bytes, and a run-time value it reads at a shape position (Shape's
// input, read only for its shape) is neither. Hand-worked, float32 but the
// int64 shapes, x [2,3,4] (96 B):
//
//	flat = Reshape(x, shape {6,4} stored, 16 B): weight 16, act x 96 +
//	       out 96 = 192
//	shp  = Shape(x) → [3] int64, 24 B, known before the run: x is read for
//	       its shape only, so act = out 24 (was 96 + 24 = 120)
//	back = Reshape(flat, shp): the folded shape is weight 24; act 96 + 96
//	       = 192 (was 96 + 24 + 96 = 216, weight 0)
//	wt   = Transpose(W [5,4] stored, 80 B): weight 80, act out 80
//	mm   = MatMul(back, wt) → [2,3,5], 120 B: wt is W transposed at load
//	       time, weight 80; act 96 + 120 = 216 (was 96 + 80 + 120 = 296,
//	       weight 0)
func TestLayerTrafficConstantsAndShapeOperands(t *testing.T) {
	w := nnF32("W", make([]float64, 20), 5, 4).tensor()
	shape := nnI64("shape", []int64{6, 4}, 2).tensor()
	g := &model.Graph{
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(2), model.Known(3), model.Known(4))},
		Initializers: []*model.Tensor{w, shape},
		Nodes: []*model.Node{
			node("Reshape", []string{"x", "shape"}, []string{"flat"}),
			node("Shape", []string{"x"}, []string{"shp"}),
			node("Reshape", []string{"flat", "shp"}, []string{"back"}),
			node("Transpose", []string{"W"}, []string{"wt"}),
			node("MatMul", []string{"back", "wt"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m, err := Measure(graphModel(g), 0, Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	want := []struct {
		op            string
		weight, activ int64
	}{{"Reshape", 16, 192}, {"Shape", 0, 24}, {"Reshape", 24, 192}, {"Transpose", 80, 80}, {"MatMul", 80, 216}}
	if len(m.Layers) != len(want) {
		t.Fatalf("%d layers, want %d", len(m.Layers), len(want))
	}
	for i, wl := range want {
		l := m.Layers[i]
		if l.Op != wl.op || l.WeightBytes != wl.weight || l.ActivationBytes != wl.activ {
			t.Errorf("layer %d %s: weight %d, activation %d; want %s %d, %d", i, l.Op, l.WeightBytes, l.ActivationBytes, wl.op, wl.weight, wl.activ)
		}
	}
	if m.Layers[4].DType != "float32" {
		t.Errorf("MatMul dtype %q, want float32", m.Layers[4].DType)
	}
}

// TestLayerTrafficIndexOperands: indices a kernel reads element by element
// are run-time data, counted in activation bytes (a run-time shape is not:
// TestLayerTrafficConstantsAndShapeOperands). Hand-worked: x float32[4,6]
// = 96 bytes; idx int64[4,6] (GatherElements' indices, as large as its
// output) = 192 bytes; y float32[4,6] = 96 bytes: 96 + 192 + 96 = 384.
// Gather's run-time indices likewise: int64[3] = 24 bytes, with x's 96
// and its output float32[3,6]'s 72: 192.
func TestLayerTrafficIndexOperands(t *testing.T) {
	g := &model.Graph{
		Inputs: []*model.ValueInfo{
			input("x", model.Float32, model.Known(4), model.Known(6)),
			input("idx", model.Int64, model.Known(4), model.Known(6)),
			input("rows", model.Int64, model.Known(3)),
		},
		Nodes: []*model.Node{
			node("GatherElements", []string{"x", "idx"}, []string{"y"}),
			node("Gather", []string{"x", "rows"}, []string{"picked"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}, {Name: "picked"}},
	}
	m, err := Measure(graphModel(g), 0, Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]int64{"GatherElements": 384, "Gather": 192}
	for _, l := range m.Layers {
		if l.ActivationBytes != want[l.Op] || l.WeightBytes != 0 {
			t.Errorf("%s: activation %d, weight %d; want %d, 0", l.Op, l.ActivationBytes, l.WeightBytes, want[l.Op])
		}
	}
}

// TestLayerTrafficManyInputs: a node of many inputs (past the handful a
// look along them serves) counts each distinct input once. Hand-worked:
// Concat of x0..x19, float32[2] each (8 bytes), then x0 and x5 again:
// inputs 20 × 8 = 160 bytes, output float32[44] = 176 bytes, 336 in all.
func TestLayerTrafficManyInputs(t *testing.T) {
	g := &model.Graph{}
	var ins []string
	for i := range 20 {
		name := fmt.Sprintf("x%d", i)
		g.Inputs = append(g.Inputs, input(name, model.Float32, model.Known(2)))
		ins = append(ins, name)
	}
	ins = append(ins, "x0", "x5")
	cat := node("Concat", ins, []string{"y"})
	cat.Attrs = []*model.Attr{{Name: "axis", Kind: model.AttrInt, Int: 0}}
	g.Nodes = []*model.Node{cat}
	g.Outputs = []*model.ValueInfo{{Name: "y"}}
	m, err := Measure(graphModel(g), 0, Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	if l := m.Layers[0]; l.ActivationBytes != 336 {
		t.Errorf("Concat of 22 inputs (20 distinct): activation bytes %d, want 336", l.ActivationBytes)
	}
}
