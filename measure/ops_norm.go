package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// Normalisations. Y always has X's type; what differs is the statistics
// outputs: BatchNormalization's running or saved mean and variance, and
// LayerNormalization's Mean and InvStdDev. (MeanVarianceNormalization is
// shape-preserving and lives with the elementwise family.)

var normOps = map[string]opRule{
	"BatchNormalization":    {infer: inferBatchNorm, rankFree: true},
	"InstanceNormalization": {infer: inferNormSame, rankFree: true},
	"LayerNormalization":    {infer: inferLayerNorm, rankFree: true},
	"GroupNormalization":    {infer: inferNormSame, rankFree: true},
	"LRN":                   {infer: inferNormSame, rankFree: true},
}

// inferNormSame: Y has X's type and shape; X needs a channel axis.
func inferNormSame(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) < 2 {
		return nil, fmt.Errorf("input X has rank %d; %s needs [N, C, ...] (rank ≥ 2)", len(xs), c.node.Op)
	}
	return []*Value{tensor(c.dtype(0), xs)}, nil
}

// inferBatchNorm. Inputs X, scale, B, mean, var. Outputs by opset:
//
//	≥ 14: Y, running_mean, running_var (the last two with training_mode=1)
//	 6–13: Y, mean, var, saved_mean, saved_var (the last four optional)
//	  < 6: the same five outputs
//
// Every statistic has the shape of the mean (outputs 1 and 3) or variance
// (outputs 2 and 4) input: [C], or before opset 9 with spatial=0 the
// per-activation [C, D1, ..., Dn]. From opset 14 they take the mean input's
// type (T2), which may differ from X's.
func inferBatchNorm(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) < 2 {
		return nil, fmt.Errorf("input X has rank %d; BatchNormalization needs [N, C, ...] (rank ≥ 2)", len(xs))
	}
	res := []*Value{tensor(c.dtype(0), xs)}
	statType := c.dtype(0)
	if c.opset >= 14 && c.dtype(3) != model.Undefined {
		statType = c.dtype(3)
	}
	fallback := model.Shape{xs[1]}
	if c.opset < 9 && c.attrInt("spatial", 1) == 0 {
		fallback = xs[1:].Clone()
	}
	for k := 1; k < len(c.node.Outputs) && k <= 4; k++ {
		src := 3 // mean
		if k%2 == 0 {
			src = 4 // var
		}
		s := fallback
		if v := c.input(src); v != nil && v.Type.RankKnown {
			s = v.Type.Shape
		}
		res = append(res, tensor(statType, s))
	}
	return res, nil
}

// inferLayerNorm: Y like X; Mean and InvStdDev are X's shape with the
// normalised axes [axis, rank) set to 1, of type stash_type (float32 by
// default), as the LayerNormalization spec defines them.
func inferLayerNorm(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	r := len(xs)
	axis := c.attrInt("axis", -1)
	// The spec allows axis in [-r, r]: r normalises nothing.
	if axis < 0 {
		axis += int64(r)
	}
	if axis < 0 || axis > int64(r) {
		return nil, fmt.Errorf("axis %d is out of range for rank %d (allowed: [-%d, %d])", c.attrInt("axis", -1), r, r, r)
	}
	stat := xs.Clone()
	for i := int(axis); i < r; i++ {
		stat[i] = model.Known(1)
	}
	stash := model.DType(c.attrInt("stash_type", int64(model.Float32)))
	return []*Value{tensor(c.dtype(0), xs), tensor(stash, stat), tensor(stash, stat)}, nil
}
