package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestQuantShapes(t *testing.T) {
	runNNCases(t, []nnCase{
		// corpus test_quantizelinear: uint8 zero point
		{name: "QuantizeLinear uint8", op: "QuantizeLinear", opset: 13, in: []nnIn{nnRT("x", f32, 6), nnRT("s", f32), nnRT("z", model.Uint8)}, want: []string{"uint8[6]"}},
		// ONNX operator spec: the output takes y_zero_point's type
		{name: "QuantizeLinear int8", op: "QuantizeLinear", in: []nnIn{nnRT("x", f32, "N", 3, 8, 8), nnRT("s", f32, 3), nnRT("z", model.Int8, 3)}, attrs: []*model.Attr{atI("axis", 1)}, want: []string{"int8[N,3,8,8]"}},
		// ONNX operator spec: without a zero point the output is uint8
		{name: "QuantizeLinear default", op: "QuantizeLinear", opset: 10, in: []nnIn{nnRT("x", f32, 4), nnRT("s", f32)}, want: []string{"uint8[4]"}},
		// ONNX operator spec (QuantizeLinear-21): output_dtype when there is no zero point
		{name: "QuantizeLinear output_dtype", op: "QuantizeLinear", opset: 21, in: []nnIn{nnRT("x", f32, 4, 64), nnRT("s", f32, 4, 2)},
			attrs: []*model.Attr{atI("output_dtype", int64(model.Int4)), atI("block_size", 32)}, want: []string{"int4[4,64]"}},
		{name: "QuantizeLinear dtype clash", op: "QuantizeLinear", opset: 21, in: []nnIn{nnRT("x", f32, 4), nnRT("s", f32), nnRT("z", model.Uint8)},
			attrs: []*model.Attr{atI("output_dtype", int64(model.Int8))}, err: "output_dtype int8 disagrees with y_zero_point's type uint8"},
		// corpus test_dequantizelinear: float32 up to opset 18
		{name: "DequantizeLinear", op: "DequantizeLinear", opset: 13, in: []nnIn{nnRT("x", model.Uint8, 4), nnRT("s", f32), nnRT("z", model.Uint8)}, want: []string{"float32[4]"}},
		// ONNX operator spec (DequantizeLinear-19): the output takes x_scale's type
		{name: "DequantizeLinear float16", op: "DequantizeLinear", opset: 19, in: []nnIn{nnRT("x", model.Int8, 2, 3), nnRT("s", model.Float16)}, want: []string{"float16[2,3]"}},
		// corpus test_dynamicquantizelinear_min_adjusted
		{name: "DynamicQuantizeLinear", op: "DynamicQuantizeLinear", opset: 11, in: []nnIn{nnRT("x", f32, 3, 4)}, want: []string{"uint8[3,4]", "float32[]", "uint8[]"}},
	})
}
