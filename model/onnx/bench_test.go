package onnx

import (
	"fmt"
	"testing"

	"github.com/loadline/loadline/model"
)

// largeModel builds a model of about 200 MB: 50 float32 initializers of
// 1M elements (4 MiB each) and 400 nodes, all weights sharing one buffer
// (Encode copies them into the file).
func largeModel() *model.Model {
	weights := make([]byte, 4<<20)
	for i := range weights {
		weights[i] = byte(i * 7)
	}
	g := &model.Graph{Name: "large"}
	g.Inputs = []*model.ValueInfo{tensorValueInfo("x", model.Float32, model.Sym("batch"), model.Known(1024))}
	prev := "x"
	for i := range 50 {
		w := fmt.Sprintf("layer%d.weight", i)
		g.Initializers = append(g.Initializers, rawTensor(w, model.Float32, []int64{1024, 1024}, weights))
		for j, op := range []string{"MatMul", "Add", "Relu", "Identity", "Relu", "Identity", "Relu", "Identity"} {
			out := fmt.Sprintf("layer%d.%d", i, j)
			in := []string{prev}
			if op == "MatMul" || op == "Add" {
				in = append(in, w)
			}
			g.Nodes = append(g.Nodes, &model.Node{Name: out, Op: op, Inputs: in, Outputs: []string{out}})
			g.ValueInfo = append(g.ValueInfo, tensorValueInfo(out, model.Float32, model.Sym("batch"), model.Known(1024)))
			prev = out
		}
	}
	g.Outputs = []*model.ValueInfo{tensorValueInfo(prev, model.Float32, model.Sym("batch"), model.Known(1024))}
	return &model.Model{IRVersion: 8, Opsets: map[string]int64{"": 17}, Graph: g}
}

// BenchmarkDecodeLarge decodes a ~200 MB model. Weights are sub-slices of
// the input, so B/op is the metadata's, a tiny fraction of the file.
func BenchmarkDecodeLarge(b *testing.B) {
	data, err := Encode(largeModel())
	if err != nil {
		b.Fatal(err)
	}
	b.SetBytes(int64(len(data)))
	b.ReportAllocs()
	for b.Loop() {
		m, err := Decode(data, Options{Path: "large.onnx"})
		if err != nil {
			b.Fatal(err)
		}
		if len(m.Graph.Initializers) != 50 {
			b.Fatal("lost initializers")
		}
	}
	b.ReportMetric(float64(len(data)), "file_bytes")
}
