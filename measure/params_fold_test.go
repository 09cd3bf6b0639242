package measure

import (
	"fmt"
	"testing"

	"github.com/loadline/loadline/model"
)

// TestParamsThroughFoldedNodes: a weight that reaches its consumer through
// a node inference folds (Transpose, Cast, Identity of a constant: exporters
// write them for transposed, half-precision and shared weights) is still a
// parameter, whether it is small enough for inference to hold its values
// (64×64 = 4,096 elements, under maxFoldElements) or not (512×512 =
// 262,144). Hand-worked: params = n², param_bytes = 4n² (float32).
func TestParamsThroughFoldedNodes(t *testing.T) {
	for _, op := range []string{"Transpose", "Cast", "Identity"} {
		for _, n := range []int64{64, 512} {
			t.Run(fmt.Sprintf("%s/%d", op, n), func(t *testing.T) {
				w := &model.Tensor{Name: "w", DType: model.Float32, Dims: []int64{n, n},
					Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{make([]byte, 4*n*n)}}}
				var attrs []*model.Attr
				if op == "Cast" {
					attrs = append(attrs, atI("to", int64(model.Float32)))
				}
				g := &model.Graph{
					Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(n))},
					Initializers: []*model.Tensor{w},
					Nodes:        []*model.Node{node(op, []string{"w"}, []string{"wt"}, attrs...), node("MatMul", []string{"x", "wt"}, []string{"y"})},
					Outputs:      []*model.ValueInfo{{Name: "y"}},
				}
				m, err := Measure(graphModel(g), 0, Options{})
				if err != nil {
					t.Fatal(err)
				}
				if m.Params != n*n || m.ParamBytes != 4*n*n {
					t.Errorf("params %d, param_bytes %d; want %d and %d", m.Params, m.ParamBytes, n*n, 4*n*n)
				}
			})
		}
	}
}

// TestParamsShapeChainNotWeights: constants that only feed shape arithmetic
// (here Concat of two constant pieces of a shape, into Reshape's shape) are
// not parameters, folded or not.
func TestParamsShapeChainNotWeights(t *testing.T) {
	a := nnI64("a", []int64{1, 2}, 2).tensor()
	b := nnI64("b", []int64{3, 4}, 2).tensor()
	g := &model.Graph{
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(24))},
		Initializers: []*model.Tensor{a, b},
		Nodes: []*model.Node{
			node("Concat", []string{"a", "b"}, []string{"shape"}, atI("axis", 0)),
			node("Reshape", []string{"x", "shape"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m, err := Measure(graphModel(g), 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if m.Params != 0 {
		t.Errorf("params %d, want 0: the constants only make a shape", m.Params)
	}
}

// TestParamsInSubgraphs: weights a branch holds itself, as an initializer
// of the branch (then) or a Constant node in it (else), are parameters of
// the model: both branches are stored. Hand-worked: two 8×8 weights,
// params = 128.
func TestParamsInSubgraphs(t *testing.T) {
	w := nnF32("w", make([]float64, 64), 8, 8).tensor()
	cw := nnF32("cw", make([]float64, 64), 8, 8).tensor()
	thenG := &model.Graph{Name: "then", Initializers: []*model.Tensor{w},
		Nodes:   []*model.Node{node("MatMul", []string{"x", "w"}, []string{"y1"})},
		Outputs: []*model.ValueInfo{{Name: "y1"}}}
	elseG := &model.Graph{Name: "else",
		Nodes: []*model.Node{
			{Op: "Constant", Name: "k", Outputs: []string{"cw"}, Attrs: []*model.Attr{{Name: "value", Kind: model.AttrTensor, Tensor: cw}}},
			node("MatMul", []string{"x", "cw"}, []string{"y2"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y2"}}}
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(8)), input("c", model.Bool)},
		Nodes: []*model.Node{node("If", []string{"c"}, []string{"y"},
			&model.Attr{Name: "then_branch", Kind: model.AttrGraph, Graph: thenG},
			&model.Attr{Name: "else_branch", Kind: model.AttrGraph, Graph: elseG})},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m, err := Measure(graphModel(g), 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if m.Params != 128 {
		t.Errorf("params %d, want 2 × 64 = 128", m.Params)
	}
}

// TestParamsShapeOnlyOperands: constants read only for their shape, type or
// as indices are not parameters: EyeLike's input and the *Like random
// generators' (only the shape and type count), CastLike's target_type (only
// its type), AffineGrid's size, OneHot's indices and MaxUnpool's indices.
// Each constant here has 8 elements; params must stay 0.
func TestParamsShapeOnlyOperands(t *testing.T) {
	c := func(name string) *model.Tensor { return nnI64(name, make([]int64, 8), 8).tensor() }
	for _, tc := range []struct {
		op  string
		ins []string
	}{
		{"EyeLike", []string{"k"}},
		{"RandomNormalLike", []string{"k"}},
		{"RandomUniformLike", []string{"k"}},
		{"CastLike", []string{"x", "k"}},
		{"AffineGrid", []string{"x", "k"}},
		{"OneHot", []string{"k", "x", "x"}},
		{"MaxUnpool", []string{"x", "k"}},
	} {
		t.Run(tc.op, func(t *testing.T) {
			g := &model.Graph{
				Inputs:       []*model.ValueInfo{input("x", model.Int64, model.Known(8))},
				Initializers: []*model.Tensor{c("k")},
				Nodes:        []*model.Node{node(tc.op, tc.ins, []string{"y"})},
				Outputs:      []*model.ValueInfo{{Name: "y"}},
			}
			m, err := Measure(graphModel(g), 0, Options{})
			if err != nil {
				t.Fatal(err)
			}
			if m.Params != 0 {
				t.Errorf("params %d, want 0", m.Params)
			}
		})
	}
}
