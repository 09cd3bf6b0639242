package measure

import (
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
