package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// Losses and the training-domain optimisers. A deployed model rarely holds
// these, but training exports do, and a report on them should still read.

// trainingDomain is the domain of the optimiser operators.
const trainingDomain = "ai.onnx.preview.training"

var lossOps = map[string]opRule{
	"SoftmaxCrossEntropyLoss":    {infer: inferLoss, rankFree: true},
	"NegativeLogLikelihoodLoss":  {infer: inferLoss, rankFree: true},
	trainingDomain + ":Adagrad":  {infer: optimizerRule(2), rankFree: true},
	trainingDomain + ":Adam":     {infer: optimizerRule(3), rankFree: true},
	trainingDomain + ":Momentum": {infer: optimizerRule(2), rankFree: true},
	trainingDomain + ":Gradient": {infer: inferGradient, rankFree: true},
}

// inferLoss: scores (or NLL's input) [N, C, D1, ..., Dk] and labels
// [N, D1, ..., Dk]. The loss is [N, D1, ..., Dk] with reduction "none" and
// a scalar with "mean" (the default) or "sum"; SoftmaxCrossEntropyLoss's
// optional log_prob output has the scores' shape.
func inferLoss(c *ctx) ([]*Value, error) {
	ss, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(ss) < 2 {
		return nil, fmt.Errorf("scores have rank %d; %s needs [N, C, D1, ..., Dk] (rank ≥ 2)", len(ss), c.node.Op)
	}
	// The loss has the labels' shape: [N, D1, ..., Dk].
	loss := append(model.Shape{ss[0]}, ss[2:]...)
	if ls, err := c.shape(1); err == nil {
		if len(ls) != len(loss) {
			return nil, fmt.Errorf("labels have shape %v; scores %v need labels of shape %v", ls, ss, loss)
		}
		for i := range loss {
			m, ok := mergeDim(loss[i], ls[i])
			if !ok {
				return nil, fmt.Errorf("labels have shape %v; scores %v need labels of shape %v", ls, ss, loss)
			}
			loss[i] = m
		}
	}
	switch red := c.attrString("reduction", "mean"); red {
	case "none":
	case "mean", "sum":
		loss = model.Shape{}
	default:
		return nil, fmt.Errorf("reduction %q is not none, mean or sum", red)
	}
	dt := c.dtype(0)
	return []*Value{tensor(dt, loss), tensor(dt, ss)}, nil
}

// optimizerRule covers Adagrad (groups X, G, H → X_new, H_new), Momentum
// (X, G, V → X_new, V_new) and Adam (X, G, V, H → X_new, V_new, H_new).
// After the inputs R and T come the n tensors of each group in turn; every
// updated tensor has its input's shape and type. outGroups is how many
// groups the outputs hold; the gradients G are the one input group with no
// output.
func optimizerRule(outGroups int) func(c *ctx) ([]*Value, error) {
	return func(c *ctx) ([]*Value, error) {
		inGroups := outGroups + 1
		tensors := len(c.in) - 2
		if tensors <= 0 || tensors%inGroups != 0 {
			return nil, fmt.Errorf("%s takes R, T and %d groups of n tensors; it has %d inputs", c.node.Op, inGroups, len(c.in))
		}
		n := tensors / inGroups
		if len(c.node.Outputs) > outGroups*n {
			return nil, fmt.Errorf("%s with %d optimised tensors has %d outputs, at most %d", c.node.Op, n, len(c.node.Outputs), outGroups*n)
		}
		out := make([]*Value, outGroups*n)
		for j := range out {
			g, k := j/n, j%n
			src := 2 + k // X
			if g > 0 {
				// Skip the gradients group: the g-th output group is
				// input group g+1.
				src = 2 + (g+1)*n + k
			}
			v, err := c.shape(src)
			if err != nil {
				return nil, err
			}
			out[j] = tensor(c.dtype(src), v)
		}
		return out, nil
	}
}

// inferGradient: the node's inputs are the tensors of its xs attribute
// followed by those of zs, and output i is the gradient of y with respect
// to xs[i], so it has input i's shape and type.
func inferGradient(c *ctx) ([]*Value, error) {
	xs := c.attr("xs")
	if xs == nil || len(xs.Strings) == 0 {
		return nil, fmt.Errorf("Gradient has no xs attribute naming the tensors to differentiate by")
	}
	if len(c.node.Outputs) > len(xs.Strings) || len(c.in) < len(xs.Strings) {
		return nil, fmt.Errorf("Gradient differentiates by %d tensors but has %d inputs and %d outputs", len(xs.Strings), len(c.in), len(c.node.Outputs))
	}
	out := make([]*Value, len(c.node.Outputs))
	for i := range out {
		s, err := c.shape(i)
		if err != nil {
			return nil, err
		}
		out[i] = tensor(c.dtype(i), s)
	}
	return out, nil
}
