// Package benchmodel builds the large generated model the benchmarks and
// the side-by-side timing script measure.
package benchmodel

import (
	"fmt"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// Build returns a model of about mb megabytes of float32 weights: 1024×1024
// fully connected layers (4 MiB each) with ReLU between them, fed by a small
// convolutional stem and followed by an exporter-style shape subgraph
// (Shape → Gather → Concat → Reshape), so that decoding, folding and
// inference all have work.
func Build(mb int) (*model.Model, error) { return BuildSeeded(mb, 0) }

// BuildSeeded is Build with the weights drawn from another seed, so that
// several models of one size are different files.
func BuildSeeded(mb int, seed uint64) (*model.Model, error) {
	layers := max(1, mb*1000*1000/(1024*1024*4))
	b := build.New(fmt.Sprintf("bench-%dmb", mb), 13, build.Seed(seed))
	x := b.InputShape("x", model.Float32, model.Shape{model.Sym("batch"), model.Known(4), model.Known(16), model.Known(16)})
	x = b.Conv("stem", x, build.Conv2D(4, 3, 1, 1).WithBias())
	x = b.Relu("stem_relu", x)
	x = b.Flatten("flatten", x, 1)
	for i := range layers {
		x = b.Gemm(fmt.Sprintf("fc%d", i), x, 1024, true)
		x = b.Relu(fmt.Sprintf("relu%d", i), x)
	}
	x = b.Reshape("unflatten", x, 0, 4, 16, 16)
	b.Output(x)
	return b.Model()
}

// BuildNodes returns a model of about n nodes and little weight, as deep
// exported networks of small layers are: blocks of MatMul (a 16×16
// weight), Add (a 16-element bias) and Relu on x [batch, 16], every tenth
// block followed by a Reshape to [-1, 16] whose shape is a constant.
func BuildNodes(n int) (*model.Model, error) {
	b := build.New(fmt.Sprintf("bench-%dnodes", n), 13)
	x := b.InputShape("x", model.Float32, model.Shape{model.Sym("batch"), model.Known(16)})
	for i := 0; b.Err() == nil && i*3 < n; i++ {
		x = b.MatMul(fmt.Sprintf("mm%d", i), x, b.Weight(fmt.Sprintf("w%d", i), model.Float32, 16, 16))
		x = b.Add(fmt.Sprintf("add%d", i), x, b.Weight(fmt.Sprintf("b%d", i), model.Float32, 16))
		x = b.Relu(fmt.Sprintf("relu%d", i), x)
		if i%10 == 9 {
			x = b.Reshape(fmt.Sprintf("reshape%d", i), x, -1, 16)
		}
	}
	b.Output(x)
	return b.Model()
}
