package tflite

import (
	"testing"
)

// TestBuilder: a small DS-CNN built, encoded and decoded again, with the
// shapes the builder computed (hand-worked: SAME stride 2 on 10×10 → 5×5;
// VALID 3×3 on 5×5 → 3×3).
func TestBuilder(t *testing.T) {
	b := NewBuilder(Int8)
	x := b.Input("x", 1, 10, 10, 1)
	y := b.Conv2D("conv", x, 8, 3, 2, true, "RELU")
	y = b.DepthwiseConv2D("dw", y, 3, 1, false, "RELU6")
	y = b.AveragePool2D("pool", y)
	y = b.Reshape("flat", y, 1, 8)
	y = b.FullyConnected("fc", y, 4, "NONE")
	b.Output(b.Softmax("prob", y))
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	data, err := Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	g, err := Decode(data, Options{Path: "ds.tflite"})
	if err != nil {
		t.Fatal(err)
	}
	var ops []string
	for _, n := range g.Graph.Nodes {
		ops = append(ops, n.Op)
	}
	want := []string{"CONV_2D", "DEPTHWISE_CONV_2D", "AVERAGE_POOL_2D", "RESHAPE", "FULLY_CONNECTED", "SOFTMAX"}
	if len(ops) != len(want) {
		t.Fatalf("ops %v, want %v", ops, want)
	}
	for i := range want {
		if ops[i] != want[i] {
			t.Fatalf("ops %v, want %v", ops, want)
		}
	}
	for _, vi := range g.Graph.ValueInfo {
		switch vi.Name {
		case "conv":
			if vi.Type.Shape.String() != "[1,5,5,8]" {
				t.Errorf("conv %s", vi.Type)
			}
		case "dw":
			if vi.Type.Shape.String() != "[1,3,3,8]" {
				t.Errorf("dw %s", vi.Type)
			}
		}
	}
}
