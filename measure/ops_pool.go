package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// Pooling: the windowed pools (MaxPool, AveragePool, LpPool) share the
// convolution window geometry of ops_conv.go; the global pools collapse
// every spatial axis to 1; the region pools (MaxRoiPool, RoiAlign) produce
// one fixed-size map per region; MaxUnpool and Col2Im go the other way,
// from windows back to an image.

var poolOps = map[string]opRule{
	"MaxPool":           {infer: inferWindowPool, rankFree: true},
	"AveragePool":       {infer: inferWindowPool, rankFree: true},
	"LpPool":            {infer: inferWindowPool, rankFree: true},
	"GlobalAveragePool": {infer: inferGlobalPool, rankFree: true},
	"GlobalMaxPool":     {infer: inferGlobalPool, rankFree: true},
	"GlobalLpPool":      {infer: inferGlobalPool, rankFree: true},
	"MaxRoiPool":        {infer: inferMaxRoiPool, rankFree: true},
	"RoiAlign":          {infer: inferRoiAlign, rankFree: true},
	"MaxUnpool":         {infer: inferMaxUnpool, rankFree: true},
	"Col2Im":            {infer: inferCol2Im, rankFree: true},
}

// inferWindowPool covers MaxPool, AveragePool and LpPool: [N, C, out...]
// with out per the pooling specs' formula (window.outDim). MaxPool's second
// output, Indices, has the same shape and type int64.
func inferWindowPool(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) < 3 {
		return nil, fmt.Errorf("input X has rank %d; %s needs [N, C, spatial...] (rank ≥ 3)", len(xs), c.node.Op)
	}
	n := len(xs) - 2
	kernel, ok := c.attrInts("kernel_shape")
	if !ok || len(kernel) == 0 {
		return nil, fmt.Errorf("%s has no kernel_shape attribute, which it requires", c.node.Op)
	}
	w, err := readWindow(c, n, kernel)
	if err != nil {
		return nil, err
	}
	w.ceil = c.attrInt("ceil_mode", 0) != 0
	out := model.Shape{xs[0], xs[1]}
	for i := 0; i < n; i++ {
		d, err := w.outDim(xs[2+i], i)
		if err != nil {
			return nil, err
		}
		out = append(out, d)
	}
	res := []*Value{tensor(c.dtype(0), out)}
	if c.node.Op == "MaxPool" {
		res = append(res, tensor(model.Int64, out))
	}
	return res, nil
}

// inferGlobalPool: [N, C, 1, ..., 1].
func inferGlobalPool(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) < 2 {
		return nil, fmt.Errorf("input X has rank %d; %s needs [N, C, spatial...] (rank ≥ 2)", len(xs), c.node.Op)
	}
	out := xs.Clone()
	for i := 2; i < len(out); i++ {
		out[i] = model.Known(1)
	}
	return []*Value{tensor(c.dtype(0), out)}, nil
}

// inferMaxRoiPool: [num_rois, C, pooled_shape[0], pooled_shape[1]], with
// rois of shape [num_rois, 5].
func inferMaxRoiPool(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	rs, err := c.shape(1)
	if err != nil {
		return nil, err
	}
	if len(xs) != 4 {
		return nil, fmt.Errorf("input X has rank %d; MaxRoiPool needs [N, C, H, W]", len(xs))
	}
	if len(rs) != 2 {
		return nil, fmt.Errorf("rois have rank %d; MaxRoiPool needs [num_rois, 5]", len(rs))
	}
	ps, ok := c.attrInts("pooled_shape")
	if !ok || len(ps) != 2 {
		return nil, fmt.Errorf("pooled_shape must be set to [height, width], got %v", ps)
	}
	if ps[0] <= 0 || ps[1] <= 0 {
		return nil, fmt.Errorf("pooled_shape %v has a non-positive size", ps)
	}
	return []*Value{tensor(c.dtype(0), model.Shape{rs[0], xs[1], model.Known(ps[0]), model.Known(ps[1])})}, nil
}

// inferRoiAlign: [num_rois, C, output_height, output_width], both
// attributes 1 by default; num_rois from rois [num_rois, 4] or
// batch_indices [num_rois].
func inferRoiAlign(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	rs, err := c.shape(1)
	if err != nil {
		return nil, err
	}
	if len(xs) != 4 {
		return nil, fmt.Errorf("input X has rank %d; RoiAlign needs [N, C, H, W]", len(xs))
	}
	if len(rs) != 2 {
		return nil, fmt.Errorf("rois have rank %d; RoiAlign needs [num_rois, 4]", len(rs))
	}
	num := rs[0]
	if bs, err := c.shape(2); err == nil && len(bs) == 1 {
		m, ok := mergeDim(num, bs[0])
		if !ok {
			return nil, fmt.Errorf("rois hold %d regions but batch_indices has %d entries", num.Value, bs[0].Value)
		}
		num = m
	}
	oh, ow := c.attrInt("output_height", 1), c.attrInt("output_width", 1)
	if oh <= 0 || ow <= 0 {
		return nil, fmt.Errorf("output_height %d and output_width %d must be positive", oh, ow)
	}
	return []*Value{tensor(c.dtype(0), model.Shape{num, xs[1], model.Known(oh), model.Known(ow)})}, nil
}

// inferMaxUnpool: the output_shape input when given, else per the spec
// out = (in-1)*stride + kernel - pad_begin - pad_end on each spatial axis.
func inferMaxUnpool(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) < 3 {
		return nil, fmt.Errorf("input X has rank %d; MaxUnpool needs [N, C, spatial...] (rank ≥ 3)", len(xs))
	}
	if c.has(2) {
		dims, err := valueDims(c, 2, "output_shape")
		if err != nil {
			return nil, err
		}
		if len(dims) != len(xs) {
			return nil, fmt.Errorf("output_shape %v has %d entries, input X has rank %d", model.Shape(dims), len(dims), len(xs))
		}
		return []*Value{tensor(c.dtype(0), append(model.Shape{}, dims...))}, nil
	}
	n := len(xs) - 2
	kernel, ok := c.attrInts("kernel_shape")
	if !ok || len(kernel) == 0 {
		return nil, fmt.Errorf("MaxUnpool has no kernel_shape attribute, which it requires")
	}
	w, err := readWindow(c, n, kernel)
	if err != nil {
		return nil, err
	}
	out := model.Shape{xs[0], xs[1]}
	for i := 0; i < n; i++ {
		extra := w.kernel[i] - w.pads[i] - w.pads[i+n]
		d := dimAdd(dimMul(dimSub(xs[2+i], model.Known(1)), model.Known(w.strides[i])), model.Known(extra))
		if d.IsKnown() && d.Value <= 0 {
			return nil, fmt.Errorf("output size %d on spatial axis %d is not positive", d.Value, i)
		}
		out = append(out, d)
	}
	return []*Value{tensor(c.dtype(0), out)}, nil
}

// inferCol2Im: input [N, C*prod(block_shape), L], image_shape and
// block_shape inputs; output [N, C, image_shape...]. When every size is
// known, L is checked against the number of blocks the image holds.
func inferCol2Im(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) != 3 {
		return nil, fmt.Errorf("input has rank %d; Col2Im needs [N, C*prod(block_shape), L]", len(xs))
	}
	image, err := valueDims(c, 1, "image_shape")
	if err != nil {
		return nil, err
	}
	block, err := c.needInts(2, "block_shape")
	if err != nil {
		return nil, err
	}
	if len(image) != len(block) || len(image) == 0 {
		return nil, fmt.Errorf("image_shape has %d entries and block_shape %d; they must match and be non-empty", len(image), len(block))
	}
	n := len(block)
	w, err := readWindow(c, n, block)
	if err != nil {
		return nil, err
	}
	area := int64(1)
	for _, b := range block {
		var ok bool
		if area, ok = checkedMul(area, b); !ok {
			return nil, fmt.Errorf("block_shape %v has an area that overflows int64", block)
		}
	}
	ch := xs[1]
	if ch.IsKnown() {
		if ch.Value%area != 0 {
			return nil, fmt.Errorf("input dim 1 (%d) is not a multiple of the block area %d", ch.Value, area)
		}
		ch = model.Known(ch.Value / area)
	} else {
		ch = dimDiv(ch, model.Known(area))
	}
	blocks := model.Known(1)
	for i := 0; i < n; i++ {
		d, err := w.outDim(image[i], i)
		if err != nil {
			return nil, err
		}
		blocks = dimMul(blocks, d)
	}
	if blocks.IsKnown() && xs[2].IsKnown() && blocks.Value != xs[2].Value {
		return nil, fmt.Errorf("input holds %d blocks but image_shape %v with block_shape %v holds %d", xs[2].Value, model.Shape(image), block, blocks.Value)
	}
	out := model.Shape{xs[0], ch}
	out = append(out, image...)
	return []*Value{tensor(c.dtype(0), out)}, nil
}

// valueDims returns the contents of integer input i as dims, keeping
// symbols (a size read by Shape from a symbolic dim stays the symbol). It
// fails with a reason naming the input when the contents are not known
// statically.
func valueDims(c *ctx, i int, what string) ([]model.Dim, error) {
	if !c.has(i) {
		return nil, fmt.Errorf("%s (input %d) is missing", what, i)
	}
	d := c.consts(i)
	if d == nil {
		return nil, fmt.Errorf("%s (input %d, %q) is computed at run time; the output shape depends on its value", what, i, c.node.Inputs[i])
	}
	switch {
	case d.Ints != nil:
		return d.Ints, nil
	case d.Floats != nil:
		v, _ := d.KnownInts()
		out := make([]model.Dim, len(v))
		for j, x := range v {
			out[j] = model.Known(x)
		}
		return out, nil
	case d.Strings != nil:
		return nil, fmt.Errorf("%s (input %d) holds strings, not sizes", what, i)
	}
	return []model.Dim{}, nil
}
