package gittest

import (
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// TeamModels returns the model files of an invented team's repository,
// by path from its root, built with loadline's own graph builder:
//
//   - models/cam/detect.onnx and models/cam/classify.onnx: two small
//     convolutional classifiers (build.ConvClassifier) with fixed shapes;
//   - models/kws/spot.onnx: a keyword spotter whose input has the symbolic
//     dims N and frames (no "batch"), measurable once both are bound;
//   - models/misc/reshaper.onnx: a classifier whose output is reshaped to
//     a shape given as a graph input (target_shape), so its MACs, arena and
//     ram cannot be computed until that input's value is bound; its file,
//     params and weights can.
func TeamModels(t testing.TB) map[string][]byte {
	t.Helper()
	out := map[string][]byte{}
	add := func(p string, m *model.Model, err error) {
		t.Helper()
		if err != nil {
			t.Fatalf("%s: %v", p, err)
		}
		data, err := onnx.Encode(m)
		if err != nil {
			t.Fatalf("%s: %v", p, err)
		}
		out[p] = data
	}
	m, err := build.ConvClassifier("detect", 32, 8)
	add("models/cam/detect.onnx", m, err)
	m, err = build.ConvClassifier("classify", 16, 16)
	add("models/cam/classify.onnx", m, err)

	b := build.New("spot", 13)
	x := b.InputShape("audio", model.Float32, model.Shape{model.Sym("N"), model.Known(1), model.Sym("frames"), model.Known(10)})
	x = b.Conv("conv", x, build.Conv2D(8, 3, 1, 1).WithBias())
	x = b.Relu("relu", x)
	x = b.GlobalAveragePool("pool", x)
	x = b.Flatten("flat", x, 1)
	x = b.Gemm("fc", x, 4, true)
	b.Output(x)
	m, err = b.Model()
	add("models/kws/spot.onnx", m, err)

	m, err = build.ConvClassifier("reshaper", 8, 4)
	if err == nil {
		g := m.Graph
		out0 := g.Outputs[0]
		g.Inputs = append(g.Inputs, &model.ValueInfo{Name: "target_shape", Type: model.TensorType(model.Int64, model.KnownShape(2))})
		g.Nodes = append(g.Nodes, &model.Node{Name: "reshape", Op: "Reshape", Inputs: []string{out0.Name, "target_shape"}, Outputs: []string{"reshaped"}})
		g.Outputs = []*model.ValueInfo{{Name: "reshaped", Type: model.Type{Kind: model.KindTensor, DType: model.Float32}}}
	}
	add("models/misc/reshaper.onnx", m, err)
	return out
}
