package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// Quantization: QuantizeLinear, DequantizeLinear and DynamicQuantizeLinear
// keep their input's shape; what they decide is the element type, which is
// what a quantized model's memory is counted at.

var quantOps = map[string]opRule{
	"QuantizeLinear":        {infer: inferQuantize, rankFree: true},
	"DequantizeLinear":      {infer: inferDequantize, rankFree: true},
	"DynamicQuantizeLinear": {infer: inferDynamicQuantize, rankFree: true},
}

// inferQuantize: y takes y_zero_point's type; without a zero point, the
// output_dtype attribute (opset 21), else uint8 as the spec defaults.
func inferQuantize(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	dt := c.dtype(2)
	if od := model.DType(c.attrInt("output_dtype", 0)); od != model.Undefined {
		if dt != model.Undefined && dt != od {
			return nil, fmt.Errorf("output_dtype %s disagrees with y_zero_point's type %s", od, dt)
		}
		dt = od
	}
	if dt == model.Undefined {
		dt = model.Uint8
	}
	return []*Value{tensor(dt, xs)}, nil
}

// inferDequantize: y is float32 up to opset 18; from opset 19 it takes
// x_scale's type (float16 and bfloat16 scales are allowed).
func inferDequantize(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	dt := model.Float32
	if c.opset >= 19 && c.dtype(1) != model.Undefined {
		dt = c.dtype(1)
	}
	return []*Value{tensor(dt, xs)}, nil
}

// inferDynamicQuantize: y uint8 shaped like x, scalar float32 y_scale and
// scalar uint8 y_zero_point.
func inferDynamicQuantize(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	return []*Value{
		tensor(model.Uint8, xs),
		tensor(model.Float32, model.Shape{}),
		tensor(model.Uint8, model.Shape{}),
	}, nil
}
