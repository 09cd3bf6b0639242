package measure

import (
	"fmt"
	"math"
	"strconv"

	"github.com/loadline/loadline/model"
)

// Resampling: Resize and its predecessor Upsample scale the input's axes
// by factors or to given sizes; GridSample and AffineGrid sample at
// coordinates a grid gives; CenterCropPad crops or pads axes to sizes.
// Where the sizes come from an input, its value must be known statically.

var resizeOps = map[string]opRule{
	"Resize":        {infer: inferResize, rankFree: true},
	"Upsample":      {infer: inferUpsample, rankFree: true},
	"GridSample":    {infer: inferGridSample, rankFree: true},
	"AffineGrid":    {infer: inferAffineGrid, rankFree: true},
	"CenterCropPad": {infer: inferCenterCropPad, rankFree: true},
}

// presentInput reports whether optional input i holds something: named,
// and not an empty tensor (exporters pass an empty scales next to sizes).
func presentInput(c *ctx, i int) bool {
	v := c.input(i)
	if v == nil || v.Absent {
		return false
	}
	if v.Const() != nil && v.Const().Len() == 0 {
		return false
	}
	if v.Type.RankKnown {
		if n, ok := v.Type.Shape.Elements(); ok && n == 0 {
			return false
		}
	}
	return true
}

// scaledDim is floor(in * scale), computed in float32 as ONNX's shape
// inference and onnxruntime compute it: 10 × 0.7f rounds to 7.0 in float32
// and floors to 7, where float64 arithmetic on the stored 0.699999988
// would floor to 6. A symbolic size stays an expression.
func scaledDim(in model.Dim, scale float64) (model.Dim, error) {
	if scale <= 0 || math.IsNaN(scale) || math.IsInf(scale, 0) {
		return model.Dim{}, fmt.Errorf("scale %v is not a positive finite number", scale)
	}
	if in.IsKnown() {
		out := math.Floor(float64(float32(in.Value) * float32(scale)))
		if out > 1<<53 || out < 0 {
			return model.Dim{}, fmt.Errorf("size %d scaled by %v gives %g, not a usable size", in.Value, scale, out)
		}
		return model.Known(int64(out)), nil
	}
	if scale == math.Trunc(scale) {
		return dimMul(in, model.Known(int64(scale))), nil
	}
	if inv := 1 / scale; inv == math.Trunc(inv) {
		return dimFloorDiv(in, model.Known(int64(inv))), nil
	}
	return symbolic("floor(" + operand(in) + "*" + strconv.FormatFloat(scale, 'g', 6, 32) + ")"), nil
}

// scaleFloats reads a scales input as floats, failing when it is computed
// at run time.
func scaleFloats(c *ctx, i int) ([]float64, error) {
	if !c.has(i) {
		return nil, fmt.Errorf("scales (input %d) is missing", i)
	}
	d := c.consts(i)
	if d == nil {
		return nil, fmt.Errorf("scales (input %d, %q) is computed at run time; the output shape depends on its value", i, c.node.Inputs[i])
	}
	f, ok := d.AsFloats()
	if !ok {
		return nil, fmt.Errorf("scales (input %d) does not hold numbers", i)
	}
	return f, nil
}

// inferResize. Inputs: X, scales (opset 10); X, roi, scales, sizes (opset
// 11 on, either scales or sizes). From opset 18 the axes attribute says
// which axes scales or sizes cover, and keep_aspect_ratio_policy can turn
// sizes into one common scale. The spec's formula is out = floor(in *
// scale); roi, which the spec also multiplies in for tf_crop_and_resize,
// is ignored as ONNX's shape inference and onnxruntime ignore it.
func inferResize(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	r := len(xs)
	axes := make([]int, r)
	for i := range axes {
		axes[i] = i
	}
	if a, ok := c.attrInts("axes"); ok && c.opset >= 18 {
		if axes, err = normAxes(a, r); err != nil {
			return nil, err
		}
	}
	scalesAt, sizesAt := 2, 3
	if c.opset < 11 {
		scalesAt, sizesAt = 1, -1
	}
	out := xs.Clone()
	switch {
	case sizesAt > 0 && presentInput(c, sizesAt):
		// sizes wins over a scales input that exporters often fill with
		// an empty or placeholder tensor alongside it.
		sizes, err := valueDims(c, sizesAt, "sizes")
		if err != nil {
			return nil, err
		}
		if len(sizes) != len(axes) {
			return nil, fmt.Errorf("sizes has %d entries for %d axes", len(sizes), len(axes))
		}
		policy := c.attrString("keep_aspect_ratio_policy", "stretch")
		if c.opset < 18 {
			policy = "stretch"
		}
		switch policy {
		case "stretch":
			for i, a := range axes {
				out[a] = sizes[i]
			}
		case "not_larger", "not_smaller":
			// One scale for all axes, the smallest (largest) of the
			// per-axis ratios; each axis is then round(scale * in).
			scale := 0.0
			for i, a := range axes {
				if !xs[a].IsKnown() || !sizes[i].IsKnown() {
					return nil, fmt.Errorf("keep_aspect_ratio_policy %s needs known sizes; axis %d is %v, sizes[%d] is %v", policy, a, xs[a], i, sizes[i])
				}
				if xs[a].Value == 0 {
					return nil, fmt.Errorf("axis %d has size 0 and cannot be scaled", a)
				}
				s := float64(float32(sizes[i].Value) / float32(xs[a].Value))
				if i == 0 || (policy == "not_larger" && s < scale) || (policy == "not_smaller" && s > scale) {
					scale = s
				}
			}
			for _, a := range axes {
				out[a] = model.Known(int64(math.Round(float64(float32(scale) * float32(xs[a].Value)))))
			}
		default:
			return nil, fmt.Errorf("keep_aspect_ratio_policy %q is not stretch, not_larger or not_smaller", policy)
		}
	case presentInput(c, scalesAt):
		scales, err := scaleFloats(c, scalesAt)
		if err != nil {
			return nil, err
		}
		if len(scales) != len(axes) {
			return nil, fmt.Errorf("scales has %d entries for %d axes", len(scales), len(axes))
		}
		for i, a := range axes {
			if out[a], err = scaledDim(xs[a], scales[i]); err != nil {
				return nil, fmt.Errorf("axis %d: %v", a, err)
			}
		}
	default:
		return nil, fmt.Errorf("neither scales nor sizes is given")
	}
	return []*Value{tensor(c.dtype(0), out)}, nil
}

// inferUpsample: out = floor(in * scale) per axis, with the scales from the
// height_scale and width_scale attributes (opset 1, NCHW input), the
// scales attribute (opsets 7 and 8) or the scales input (opset 9 on).
func inferUpsample(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	var scales []float64
	switch {
	case c.opset >= 9:
		if scales, err = scaleFloats(c, 1); err != nil {
			return nil, err
		}
	case c.opset >= 7:
		a := c.attr("scales")
		if a == nil {
			return nil, fmt.Errorf("Upsample has no scales attribute, which opset %d requires", c.opset)
		}
		for _, f := range a.Floats {
			scales = append(scales, float64(f))
		}
	default:
		if len(xs) != 4 {
			return nil, fmt.Errorf("input X has rank %d; Upsample-1 needs [N, C, H, W]", len(xs))
		}
		scales = []float64{1, 1, c.attrFloat("height_scale", 1), c.attrFloat("width_scale", 1)}
	}
	if len(scales) != len(xs) {
		return nil, fmt.Errorf("scales has %d entries for input rank %d", len(scales), len(xs))
	}
	out := make(model.Shape, len(xs))
	for i := range xs {
		if out[i], err = scaledDim(xs[i], scales[i]); err != nil {
			return nil, fmt.Errorf("axis %d: %v", i, err)
		}
	}
	return []*Value{tensor(c.dtype(0), out)}, nil
}

// inferGridSample: X [N, C, D1, ..., Dr] sampled at grid [N, O1, ..., Or,
// r] gives [N, C, O1, ..., Or] (r = 2 only before opset 20).
func inferGridSample(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	gs, err := c.shape(1)
	if err != nil {
		return nil, err
	}
	if len(xs) < 3 {
		return nil, fmt.Errorf("input X has rank %d; GridSample needs [N, C, spatial...]", len(xs))
	}
	if len(gs) != len(xs) {
		return nil, fmt.Errorf("grid has rank %d, input X rank %d; they must match", len(gs), len(xs))
	}
	n := len(xs) - 2
	if last := gs[len(gs)-1]; last.IsKnown() && last.Value != int64(n) {
		return nil, fmt.Errorf("grid's last dim is %d; %d spatial axes need %d coordinates", last.Value, n, n)
	}
	batch, ok := mergeDim(xs[0], gs[0])
	if !ok {
		return nil, fmt.Errorf("input X has batch %d, grid has batch %d", xs[0].Value, gs[0].Value)
	}
	out := model.Shape{batch, xs[1]}
	out = append(out, gs[1:len(gs)-1]...)
	return []*Value{tensor(c.dtype(0), out)}, nil
}

// inferAffineGrid: theta [N, 2, 3] with size (N, C, H, W) gives a grid
// [N, H, W, 2]; theta [N, 3, 4] with size (N, C, D, H, W) gives
// [N, D, H, W, 3].
func inferAffineGrid(c *ctx) ([]*Value, error) {
	size, err := valueDims(c, 1, "size")
	if err != nil {
		return nil, err
	}
	if len(size) != 4 && len(size) != 5 {
		return nil, fmt.Errorf("size has %d entries; AffineGrid needs (N, C, H, W) or (N, C, D, H, W)", len(size))
	}
	n := len(size) - 2
	if ts, err := c.shape(0); err == nil {
		if len(ts) != 3 {
			return nil, fmt.Errorf("theta has rank %d; AffineGrid needs [N, %d, %d]", len(ts), n, n+1)
		}
		if _, ok := mergeDim(ts[0], size[0]); !ok {
			return nil, fmt.Errorf("theta holds %d matrices but size says batch %d", ts[0].Value, size[0].Value)
		}
	}
	out := model.Shape{size[0]}
	out = append(out, size[2:]...)
	out = append(out, model.Known(int64(n)))
	return []*Value{tensor(c.dtype(0), out)}, nil
}

// inferCenterCropPad: the input with each of axes (all by default) set to
// the matching entry of the shape input.
func inferCenterCropPad(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	sizes, err := valueDims(c, 1, "shape")
	if err != nil {
		return nil, err
	}
	axes := make([]int, len(xs))
	for i := range axes {
		axes[i] = i
	}
	if a, ok := c.attrInts("axes"); ok {
		if axes, err = normAxes(a, len(xs)); err != nil {
			return nil, err
		}
	}
	if len(sizes) != len(axes) {
		return nil, fmt.Errorf("shape has %d entries for %d axes", len(sizes), len(axes))
	}
	out := xs.Clone()
	for i, a := range axes {
		if sizes[i].IsKnown() && sizes[i].Value < 0 {
			return nil, fmt.Errorf("shape[%d] is %d, a negative size", i, sizes[i].Value)
		}
		out[a] = sizes[i]
	}
	return []*Value{tensor(c.dtype(0), out)}, nil
}
