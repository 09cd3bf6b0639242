package onnx

import (
	"testing"

	"github.com/loadline/loadline/model"
)

// TestNegativeDeclaredDim: a declared dim_value of -1 (written by some
// exporters for "unknown") decodes as a fresh symbol, not as a size.
func TestNegativeDeclaredDim(t *testing.T) {
	m := &model.Model{IRVersion: 8, Opsets: map[string]int64{"": 13}, Graph: &model.Graph{
		Name:    "g",
		Inputs:  []*model.ValueInfo{{Name: "x", Type: model.TensorType(model.Float32, model.Shape{model.Known(-1), model.Known(3)})}},
		Nodes:   []*model.Node{{Op: "Relu", Inputs: []string{"x"}, Outputs: []string{"y"}}},
		Outputs: []*model.ValueInfo{{Name: "y", Type: model.TensorType(model.Float32, model.Shape{model.Known(-1), model.Known(3)})}},
	}}
	b, err := Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	got, err := Decode(b, Options{Path: "neg.onnx"})
	if err != nil {
		t.Fatal(err)
	}
	s := got.Graph.Inputs[0].Type.Shape
	if s[0].IsKnown() || s[0].Symbol == "" || !s[1].IsKnown() || s[1].Value != 3 {
		t.Errorf("input shape %v: want a fresh symbol and 3", s)
	}
}
