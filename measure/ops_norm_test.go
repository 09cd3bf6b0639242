package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestNormShapes(t *testing.T) {
	x := nnRT("x", f32, 2, 3, 4, 5)
	c3 := func(name string) nnIn { return nnRT(name, f32, 3) }
	bn := []nnIn{x, c3("s"), c3("b"), c3("mean"), c3("var")}
	runNNCases(t, []nnCase{
		// corpus test_batchnorm_example
		{name: "BN inference", op: "BatchNormalization", opset: 15, in: bn, want: []string{"float32[2,3,4,5]"}},
		// corpus test_batchnorm_example_training_mode
		{name: "BN training", op: "BatchNormalization", opset: 15, in: bn, attrs: []*model.Attr{atI("training_mode", 1)},
			want: []string{"float32[2,3,4,5]", "float32[3]", "float32[3]"}},
		// ONNX operator spec (BatchNormalization-15): running statistics have type T2, the mean's
		{name: "BN mixed types", op: "BatchNormalization", opset: 15, in: []nnIn{nnRT("x", model.Float16, 2, 3, 4, 5), nnRT("s", model.Float16, 3), nnRT("b", model.Float16, 3), c3("mean"), c3("var")},
			attrs: []*model.Attr{atI("training_mode", 1)}, want: []string{"float16[2,3,4,5]", "float32[3]", "float32[3]"}},
		// ONNX operator spec (BatchNormalization-9): five outputs, mean, var, saved_mean, saved_var
		{name: "BN opset 9 five outputs", op: "BatchNormalization", opset: 9, in: bn,
			want: []string{"float32[2,3,4,5]", "float32[3]", "float32[3]", "float32[3]", "float32[3]"}},
		// ONNX operator spec (BatchNormalization-7): spatial=0 keeps per-activation statistics [C, D1, ..., Dn]
		{name: "BN opset 7 spatial 0", op: "BatchNormalization", opset: 7, in: []nnIn{x, nnRT("s", f32, 3, 4, 5), nnRT("b", f32, 3, 4, 5), nnUnk("mean", f32), nnUnk("var", f32)},
			attrs: []*model.Attr{atI("spatial", 0)}, want: []string{"float32[2,3,4,5]", "float32[3,4,5]", "float32[3,4,5]"}},
		// corpus pytorch-converted test_BatchNorm1d_3d_input_eval (its scale, bias, mean and
		// variance are initializers; here graph inputs of the same shapes)
		{name: "BN opset 6 1-D", op: "BatchNormalization", opset: 6, in: []nnIn{nnRT("x", f32, 4, 5, 3), nnRT("s", f32, 5), nnRT("b", f32, 5), nnRT("m", f32, 5), nnRT("v", f32, 5)},
			attrs: []*model.Attr{atF("epsilon", 1e-5), atI("is_test", 1), atF("momentum", 0.9)}, want: []string{"float32[4,5,3]"}},
		{name: "BN rank 1", op: "BatchNormalization", in: []nnIn{nnRT("x", f32, 3), c3("s"), c3("b"), c3("mean"), c3("var")}, err: "rank ≥ 2"},

		// corpus test_instancenorm_epsilon
		{name: "InstanceNormalization", op: "InstanceNormalization", opset: 6, in: []nnIn{x, c3("s"), c3("b")}, attrs: []*model.Attr{atF("epsilon", 0.01)}, want: []string{"float32[2,3,4,5]"}},
		// ONNX operator spec (GroupNormalization-21): Y like X
		{name: "GroupNormalization", op: "GroupNormalization", opset: 21, in: []nnIn{nnRT("x", f32, "N", 6, 8, 8), nnRT("s", f32, 6), nnRT("b", f32, 6)}, attrs: []*model.Attr{atI("num_groups", 2)}, want: []string{"float32[N,6,8,8]"}},
		// corpus test_lrn
		{name: "LRN", op: "LRN", opset: 13, in: []nnIn{nnRT("x", f32, 5, 5, 5, 5)}, attrs: []*model.Attr{atF("alpha", 0.0002), atF("beta", 0.5), atF("bias", 2), atI("size", 3)}, want: []string{"float32[5,5,5,5]"}},

		// corpus test_layer_normalization_default_axis
		{name: "LayerNorm default", op: "LayerNormalization", opset: 17, in: []nnIn{x, nnRT("w", f32, 5), nnRT("b", f32, 5)},
			want: []string{"float32[2,3,4,5]", "float32[2,3,4,1]", "float32[2,3,4,1]"}},
		// corpus test_layer_normalization_4d_axis1
		{name: "LayerNorm axis 1", op: "LayerNormalization", opset: 17, in: []nnIn{x, nnRT("w", f32, 3, 4, 5), nnRT("b", f32, 3, 4, 5)}, attrs: []*model.Attr{atI("axis", 1)},
			want: []string{"float32[2,3,4,5]", "float32[2,1,1,1]", "float32[2,1,1,1]"}},
		// corpus test_layer_normalization_4d_axis_negative_4
		{name: "LayerNorm axis -4", op: "LayerNormalization", opset: 17, in: []nnIn{x, nnRT("w", f32, 2, 3, 4, 5), nnRT("b", f32, 2, 3, 4, 5)}, attrs: []*model.Attr{atI("axis", -4)},
			want: []string{"float32[2,3,4,5]", "float32[1,1,1,1]", "float32[1,1,1,1]"}},
		// ONNX operator spec (LayerNormalization-17): Mean and InvStdDev have type stash_type, float32 by default
		{name: "LayerNorm float16", op: "LayerNormalization", opset: 17, in: []nnIn{nnRT("x", model.Float16, "B", "S", 768), nnRT("w", model.Float16, 768)},
			want: []string{"float16[B,S,768]", "float32[B,S,1]", "float32[B,S,1]"}},
		{name: "LayerNorm axis range", op: "LayerNormalization", opset: 17, in: []nnIn{x, nnRT("w", f32, 5)}, attrs: []*model.Attr{atI("axis", 5)}, err: "axis 5 is out of range for rank 4"},
	})
}
