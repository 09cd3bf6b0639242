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
