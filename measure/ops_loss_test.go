package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestLossShapes(t *testing.T) {
	none := atS("reduction", "none")
	runNNCases(t, []nnCase{
		// corpus test_sce_none_log_prob: loss [N], log_prob like the scores
		{name: "SCE none", op: "SoftmaxCrossEntropyLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5), nnRT("y", model.Int64, 3)}, attrs: []*model.Attr{none}, want: []string{"float32[3]", "float32[3,5]"}},
		// corpus test_sce_mean_3d_log_prob: mean is a scalar
		{name: "SCE mean", op: "SoftmaxCrossEntropyLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5, 2), nnRT("y", model.Int64, 3, 2)}, attrs: []*model.Attr{atS("reduction", "mean")}, want: []string{"float32[]", "float32[3,5,2]"}},
		// ONNX operator spec (SoftmaxCrossEntropyLoss-13): reduction is mean by default
		{name: "SCE default mean", op: "SoftmaxCrossEntropyLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5, 2), nnRT("y", model.Int64, 3, 2)}, want: []string{"float32[]", "float32[3,5,2]"}},
		// corpus test_sce_NCd1d2d3d4d5_none_no_weight
		{name: "SCE K-dim", op: "SoftmaxCrossEntropyLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5, 6, 6, 5, 3, 4), nnRT("y", model.Int64, 3, 6, 6, 5, 3, 4)}, attrs: []*model.Attr{none}, want: []string{"float32[3,6,6,5,3,4]"}},
		// corpus test_sce_sum
		{name: "SCE sum", op: "SoftmaxCrossEntropyLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5), nnRT("y", model.Int64, 3)}, attrs: []*model.Attr{atS("reduction", "sum")}, want: []string{"float32[]"}},
		// hand-worked, after test_sce_sum: a class-weight input [C] leaves the sum a scalar
		{name: "SCE sum weights", op: "SoftmaxCrossEntropyLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5), nnRT("y", model.Int64, 3), nnRT("w", f32, 5)}, attrs: []*model.Attr{atS("reduction", "sum")}, want: []string{"float32[]"}},
		// corpus test_nllloss_NCd1d2_with_weight
		{name: "NLL none", op: "NegativeLogLikelihoodLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5, 6, 6), nnRT("y", model.Int64, 3, 6, 6), nnRT("w", f32, 5)}, attrs: []*model.Attr{none}, want: []string{"float32[3,6,6]"}},
		// corpus test_nllloss_NCd1d2_reduction_mean
		{name: "NLL mean", op: "NegativeLogLikelihoodLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5, 6, 6), nnRT("y", model.Int64, 3, 6, 6)}, attrs: []*model.Attr{atS("reduction", "mean")}, want: []string{"float32[]"}},
		// hand-worked, after test_nllloss_NCd1d2_reduction_mean: the default mean of a symbolic batch is a scalar
		{name: "NLL default mean symbolic", op: "NegativeLogLikelihoodLoss", opset: 13, in: []nnIn{nnRT("x", f32, "N", 5, 6, 6), nnRT("y", model.Int64, "N", 6, 6)}, want: []string{"float32[]"}},
		// hand-worked: the loss takes the batch symbol
		{name: "NLL symbolic", op: "NegativeLogLikelihoodLoss", opset: 13, in: []nnIn{nnRT("x", f32, "N", 5), nnRT("y", model.Int64, "N")}, attrs: []*model.Attr{none}, want: []string{"float32[N]"}},
		{name: "labels shape", op: "NegativeLogLikelihoodLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5, 6), nnRT("y", model.Int64, 3, 7)}, err: "labels have shape [3,7]; scores [3,5,6] need labels of shape [3,6]"},
		{name: "reduction", op: "SoftmaxCrossEntropyLoss", opset: 13, in: []nnIn{nnRT("x", f32, 3, 5), nnRT("y", model.Int64, 3)}, attrs: []*model.Attr{atS("reduction", "avg")}, err: `reduction "avg"`},
	})
}

func TestTrainingShapes(t *testing.T) {
	r := nnF32("r", []float64{0.1}, []int64{}...)
	tc := nnI64("t", []int64{0}, []int64{}...)
	x1, x2 := nnRT("x1", f32, 1), nnRT("x2", f32, 2)
	g1, g2 := nnRT("g1", f32, 1), nnRT("g2", f32, 2)
	v1, v2 := nnRT("v1", f32, 1), nnRT("v2", f32, 2)
	h1, h2 := nnRT("h1", f32, 1), nnRT("h2", f32, 2)
	runNNCases(t, []nnCase{
		// corpus test_adagrad_multiple: X_new ×2, H_new ×2
		{name: "Adagrad", op: "Adagrad", domain: trainingDomain, opset: 1, in: []nnIn{r, tc, x1, x2, g1, g2, h1, h2},
			attrs: []*model.Attr{atF("decay_factor", 0.1), atF("epsilon", 1e-5), atF("norm_coefficient", 0.001)},
			want:  []string{"float32[1]", "float32[2]", "float32[1]", "float32[2]"}},
		// corpus test_adam_multiple: X_new, V_new, H_new for two tensors
		{name: "Adam", op: "Adam", domain: trainingDomain, opset: 1, in: []nnIn{r, tc, x1, x2, g1, g2, v1, v2, h1, h2},
			attrs: []*model.Attr{atF("alpha", 0.95), atF("beta", 0.85), atF("norm_coefficient", 0.001)},
			want:  []string{"float32[1]", "float32[2]", "float32[1]", "float32[2]", "float32[1]", "float32[2]"}},
		// corpus test_momentum: X_new, V_new
		{name: "Momentum", op: "Momentum", domain: trainingDomain, opset: 1, in: []nnIn{r, tc, x2, g2, v2},
			attrs: []*model.Attr{atF("alpha", 0.95), atF("beta", 0.1), atS("mode", "standard"), atF("norm_coefficient", 0.001)}, want: []string{"float32[2]", "float32[2]"}},
		{name: "Momentum inputs", op: "Momentum", domain: trainingDomain, opset: 1, in: []nnIn{r, tc, x2, g2}, nOut: 2, err: "takes R, T and 3 groups of n tensors; it has 4 inputs"},
		// hand-worked, after simple/test_gradient_of_add_and_mul (whose a and b are scalars, with the
		// Add and Mul that make y): output i is shaped like xs[i]
		{name: "Gradient", op: "Gradient", domain: trainingDomain, opset: 1, in: []nnIn{nnRT("a", f32, 3), nnRT("b", f32, 1)},
			attrs: []*model.Attr{atSs("xs", "a", "b"), atS("y", "d")}, want: []string{"float32[3]", "float32[1]"}},
		{name: "Gradient no xs", op: "Gradient", domain: trainingDomain, opset: 1, in: []nnIn{nnRT("a", f32, 3)}, err: "no xs attribute"},
	})
}
