package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestReduceShapes(t *testing.T) {
	x := nnRT("x", f32, 3, 2, 2)
	keep0 := atI("keepdims", 0)
	keep1 := atI("keepdims", 1)
	runNNCases(t, []nnCase{
		// corpus test_reduce_sum_keepdims_example: axes input from opset 13
		{name: "ReduceSum axes input", op: "ReduceSum", opset: 13, in: []nnIn{x, nnI64("axes", []int64{1})}, attrs: []*model.Attr{keep1}, want: []string{"float32[3,1,2]"}},
		// corpus test_reduce_sum_do_not_keepdims_example
		{name: "ReduceSum no keepdims", op: "ReduceSum", opset: 13, in: []nnIn{x, nnI64("axes", []int64{1})}, attrs: []*model.Attr{keep0}, want: []string{"float32[3,2]"}},
		// corpus test_reduce_sum_default_axes_keepdims_example: empty axes reduce all
		{name: "ReduceSum empty axes", op: "ReduceSum", opset: 13, in: []nnIn{x, nnI64("axes", []int64{})}, attrs: []*model.Attr{keep1}, want: []string{"float32[1,1,1]"}},
		// ONNX operator spec (ReduceSum-13): no axes input reduces all
		{name: "ReduceSum all", op: "ReduceSum", opset: 13, in: []nnIn{x}, want: []string{"float32[1,1,1]"}},
		// corpus test_reduce_sum_empty_axes_input_noop_example
		{name: "ReduceSum noop", op: "ReduceSum", opset: 13, in: []nnIn{x, nnI64("axes", []int64{})}, attrs: []*model.Attr{keep1, atI("noop_with_empty_axes", 1)}, want: []string{"float32[3,2,2]"}},
		// corpus pytorch-operator test_operator_reduced_sum: axes attribute before opset 13
		{name: "ReduceSum attr", op: "ReduceSum", opset: 6, in: []nnIn{nnRT("x", f32, 1, 2, 3, 4)}, attrs: []*model.Attr{atIs("axes", 2), keep0}, want: []string{"float32[1,2,4]"}},
		// corpus test_reduce_mean_negative_axes_keepdims_example: axes attribute up to opset 17
		{name: "ReduceMean attr negative", op: "ReduceMean", opset: 13, in: []nnIn{x}, attrs: []*model.Attr{atIs("axes", -2), keep1}, want: []string{"float32[3,1,2]"}},
		// ONNX operator spec (ReduceMean-18): axes became an input
		{name: "ReduceMean opset 18", op: "ReduceMean", opset: 18, in: []nnIn{nnRT("x", f32, "N", 64, 7, 7), nnI64("axes", []int64{2, 3})}, want: []string{"float32[N,64,1,1]"}},
		// ONNX operator spec (ReduceMax-18): no axes and noop_with_empty_axes=0 reduce everything
		{name: "ReduceMax opset 18 all", op: "ReduceMax", opset: 18, in: []nnIn{x}, attrs: []*model.Attr{keep0}, want: []string{"float32[]"}},
		{name: "ReduceL2", op: "ReduceL2", opset: 13, in: []nnIn{x}, attrs: []*model.Attr{atIs("axes", 2), keep0}, want: []string{"float32[3,2]"}},
		{name: "ReduceLogSumExp", op: "ReduceLogSumExp", opset: 18, in: []nnIn{x, nnI64("axes", []int64{0})}, want: []string{"float32[1,2,2]"}},
		{name: "ReduceSumSquare", op: "ReduceSumSquare", opset: 11, in: []nnIn{x}, attrs: []*model.Attr{atIs("axes", 0, 2)}, want: []string{"float32[1,2,1]"}},
		{name: "ReduceL1 int", op: "ReduceL1", opset: 13, in: []nnIn{nnRT("x", model.Int32, 4, 5)}, want: []string{"int32[1,1]"}},
		{name: "ReduceLogSum", op: "ReduceLogSum", opset: 13, in: []nnIn{x}, attrs: []*model.Attr{atIs("axes", 1, 2), keep0}, want: []string{"float32[3]"}},
		{name: "ReduceProd", op: "ReduceProd", opset: 18, in: []nnIn{x, nnI64("axes", []int64{-1})}, want: []string{"float32[3,2,1]"}},
		{name: "ReduceMin", op: "ReduceMin", opset: 1, in: []nnIn{x}, attrs: []*model.Attr{atIs("axes", 1)}, want: []string{"float32[3,1,2]"}},
		{name: "axes at run time", op: "ReduceMax", opset: 18, in: []nnIn{x, nnRT("axes", model.Int64, 1)}, err: `axes (input 1, "axes") is computed at run time`},
		{name: "axis range", op: "ReduceSum", opset: 13, in: []nnIn{x, nnI64("axes", []int64{3})}, err: "axis 3 is out of range for rank 3"},
		{name: "axis repeated", op: "ReduceMean", opset: 13, in: []nnIn{x}, attrs: []*model.Attr{atIs("axes", 1, -2)}, err: "repeated"},

		// corpus test_argmax_keepdims_example
		{name: "ArgMax", op: "ArgMax", opset: 13, in: []nnIn{nnRT("x", f32, 2, 2)}, attrs: []*model.Attr{atI("axis", 1), keep1}, want: []string{"int64[2,1]"}},
		// corpus test_argmin_no_keepdims_random
		{name: "ArgMin no keepdims", op: "ArgMin", opset: 13, in: []nnIn{nnRT("x", f32, 2, 3, 4)}, attrs: []*model.Attr{atI("axis", 1), keep0}, want: []string{"int64[2,4]"}},
		// hand-worked, after test_argmin_no_keepdims_random: select_last_index (ArgMin-12) leaves the shape alone
		{name: "ArgMin select_last_index", op: "ArgMin", opset: 13, in: []nnIn{nnRT("x", f32, 2, 3, 4)}, attrs: []*model.Attr{atI("axis", 1), keep0, atI("select_last_index", 1)}, want: []string{"int64[2,4]"}},
		// corpus test_argmax_default_axis_example: axis 0 by default
		{name: "ArgMax default axis", op: "ArgMax", opset: 13, in: []nnIn{nnRT("x", f32, 2, 2)}, attrs: []*model.Attr{keep1}, want: []string{"int64[1,2]"}},
		// hand-worked, after test_argmax_default_axis_example: a symbolic dim on axis 0 goes, the rest stays
		{name: "ArgMax default axis symbolic", op: "ArgMax", in: []nnIn{nnRT("x", f32, "N", 10)}, want: []string{"int64[1,10]"}},
		{name: "ArgMax axis", op: "ArgMax", in: []nnIn{nnRT("x", f32, 2, 2)}, attrs: []*model.Attr{atI("axis", 2)}, err: "axis 2 is out of range for rank 2"},

		// corpus test_top_k: K input
		{name: "TopK", op: "TopK", opset: 11, in: []nnIn{nnRT("x", f32, 3, 4), nnI64("k", []int64{3})}, attrs: []*model.Attr{atI("axis", 1)}, want: []string{"float32[3,3]", "int64[3,3]"}},
		// ONNX operator spec (TopK-11): axis -1 by default
		{name: "TopK default axis", op: "TopK", opset: 11, in: []nnIn{nnRT("x", f32, 3, 4), nnI64("k", []int64{3})}, want: []string{"float32[3,3]", "int64[3,3]"}},
		// ONNX operator spec (TopK-1): k attribute
		{name: "TopK opset 1", op: "TopK", opset: 1, in: []nnIn{nnRT("x", f32, "N", 100)}, attrs: []*model.Attr{atI("k", 5)}, want: []string{"float32[N,5]", "int64[N,5]"}},
		// corpus test_top_k_negative_axis
		{name: "TopK axis -1", op: "TopK", opset: 11, in: []nnIn{nnRT("x", f32, 3, 4), nnI64("k", []int64{3})}, attrs: []*model.Attr{atI("axis", -1)}, want: []string{"float32[3,3]", "int64[3,3]"}},
		// hand-worked, after test_top_k_negative_axis: axis -2 of [3,4,5] is axis 1, K = 2 of its 4
		{name: "TopK axis", op: "TopK", opset: 11, in: []nnIn{nnRT("x", f32, 3, 4, 5), nnI64("k", []int64{2})}, attrs: []*model.Attr{atI("axis", -2)}, want: []string{"float32[3,2,5]", "int64[3,2,5]"}},
		{name: "TopK K at run time", op: "TopK", opset: 11, in: []nnIn{nnRT("x", f32, 3, 4), nnRT("k", model.Int64, 1)}, err: `K (input 1, "k") is computed at run time`},
		{name: "TopK K too big", op: "TopK", opset: 11, in: []nnIn{nnRT("x", f32, 3, 4), nnI64("k", []int64{5})}, err: "K is 5 but axis 1 holds only 4 entries"},

		// corpus test_cumsum_2d_negative_axis
		{name: "CumSum", op: "CumSum", opset: 14, in: []nnIn{nnRT("x", model.Float64, 2, 3), nnInts("axis", model.Int32, []int64{-1}, []int64{}...)}, want: []string{"float64[2,3]"}},
		{name: "CumSum axis", op: "CumSum", opset: 14, in: []nnIn{nnRT("x", f32, 2, 3), nnI64("axis", []int64{2}, []int64{}...)}, err: "axis 2 is out of range"},
	})
}

// TestReduceFold checks that ReduceSum/Prod/Max/Min fold known contents,
// symbols kept, as shape subgraphs need.
func TestReduceFold(t *testing.T) {
	ivals := func(s ...model.Dim) *Value {
		return &Value{Type: model.TensorType(model.Int64, model.KnownShape(int64(len(s)))), contents: heldContents(&Data{Ints: s})}
	}
	n := model.Sym("N")
	k := model.Known
	m22 := &Value{Type: model.TensorType(model.Int64, model.KnownShape(2, 2)), contents: heldContents(intData(1, 2, 3, 4))}
	f23 := &Value{Type: model.TensorType(f32, model.KnownShape(2, 3)), contents: heldContents(&Data{Floats: []float64{1, 5, 2, 4, 0, 3}})}
	cases := []struct {
		name  string
		op    string
		in    *Value
		attrs []*model.Attr
		want  string // the folded contents, as Value.String prints them
	}{
		// hand-worked: element count of a [N, 3, 4] shape
		{"ReduceProd of a shape", "ReduceProd", ivals(n, k(3), k(4)), []*model.Attr{atI("keepdims", 0)}, "int64[][N*12]"},
		// hand-worked: N + 3 + 4
		{"ReduceSum of a shape", "ReduceSum", ivals(k(3), n, k(4)), nil, "int64[1][N+7]"},
		// hand-worked: column sums of [[1,2],[3,4]]
		{"ReduceSum axis 0", "ReduceSum", m22, []*model.Attr{atIs("axes", 0), atI("keepdims", 0)}, "int64[2][4,6]"},
		// hand-worked: row maxima of [[1,5,2],[4,0,3]]
		{"ReduceMax floats", "ReduceMax", f23, []*model.Attr{atIs("axes", 1)}, "float32[2,1][5 4]"},
		// hand-worked: minimum of all
		{"ReduceMin all", "ReduceMin", f23, []*model.Attr{atI("keepdims", 0)}, "float32[][0]"},
		// hand-worked: max of a shape with a symbol stays an expression
		{"ReduceMax symbolic", "ReduceMax", ivals(n, k(7)), []*model.Attr{atI("keepdims", 0)}, "int64[][max(N,7)]"},
		// not folded: ReduceMean has no folding
		{"ReduceMean not folded", "ReduceMean", f23, []*model.Attr{atI("keepdims", 0)}, "float32[]"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			node := &model.Node{Op: tc.op, Inputs: []string{"x"}, Attrs: tc.attrs}
			out, err := reduceRule(tc.op, reduceFolds[tc.op])(&ctx{node: node, in: []*Value{tc.in}, opset: 11})
			if err != nil {
				t.Fatal(err)
			}
			if got := out[0].String(); got != tc.want {
				t.Errorf("got %s, want %s", got, tc.want)
			}
		})
	}
}

// TestReduceProdOfShape runs the exporter pattern Shape → ReduceProd through
// the engine: the element count of a [N, 3, 4] input folds to N*12.
func TestReduceProdOfShape(t *testing.T) {
	g := &model.Graph{
		Inputs: []*model.ValueInfo{{Name: "x", Type: model.TensorType(f32, model.Shape{model.Sym("N"), model.Known(3), model.Known(4)})}},
		Nodes: []*model.Node{
			{Name: "shape", Op: "Shape", Inputs: []string{"x"}, Outputs: []string{"s"}},
			{Name: "count", Op: "ReduceProd", Inputs: []string{"s"}, Outputs: []string{"n"}, Attrs: []*model.Attr{atI("keepdims", 0)}},
		},
		Outputs: []*model.ValueInfo{{Name: "n"}},
	}
	res, err := Infer(&model.Model{Opsets: map[string]int64{"": 13}, Graph: g}, InferOptions{})
	if err != nil {
		t.Fatal(err)
	}
	// hand-worked: N × 3 × 4
	if got := res.Values.Get("n").String(); got != "int64[][N*12]" {
		t.Errorf("got %s, want int64[][N*12]", got)
	}
}
