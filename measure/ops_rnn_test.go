package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestRNNShapes(t *testing.T) {
	runNNCases(t, []nnCase{
		// corpus test_lstm_defaults: Y [seq, dirs, batch, hidden], Y_h and Y_c [dirs, batch, hidden]
		{name: "LSTM", op: "LSTM", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 12, 2), nnRT("r", f32, 1, 12, 3)},
			attrs: []*model.Attr{atI("hidden_size", 3)}, want: []string{"float32[1,1,3,3]", "float32[1,3,3]", "float32[1,3,3]"}},
		// corpus test_lstm_batchwise: layout 1 puts batch first
		{name: "LSTM layout 1", op: "LSTM", opset: 14, in: []nnIn{nnRT("x", f32, 3, 1, 2), nnRT("w", f32, 1, 28, 2), nnRT("r", f32, 1, 28, 7)},
			attrs: []*model.Attr{atI("hidden_size", 7), atI("layout", 1)}, want: []string{"float32[3,1,1,7]", "float32[3,1,7]", "float32[3,1,7]"}},
		// ONNX operator spec (GRU-7): bidirectional gives 2 directions; hidden from R's last dim
		{name: "GRU bidirectional symbolic", op: "GRU", opset: 7, in: []nnIn{nnRT("x", f32, "S", "B", 10), nnRT("w", f32, 2, 15, 10), nnRT("r", f32, 2, 15, 5)},
			attrs: []*model.Attr{atS("direction", "bidirectional")}, want: []string{"float32[S,2,B,5]", "float32[2,B,5]"}},
		// corpus test_simple_rnn_defaults: hidden from W's dim 1 when R is of unknown rank
		{name: "RNN hidden from W", op: "RNN", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 4, 2), nnUnk("r", f32)},
			want: []string{"float32[1,1,3,4]", "float32[1,3,4]"}},
		// corpus test_gru_defaults: hidden 5 from W [1, 15, 2] / 3 gates
		{name: "GRU hidden from W", op: "GRU", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 15, 2), nnUnk("r", f32)},
			want: []string{"", "float32[1,3,5]"}},
		{name: "direction mismatch", op: "LSTM", in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 2, 12, 2), nnRT("r", f32, 2, 12, 3)}, err: "W hold 2 directions, direction attribute says 1"},
		{name: "X rank", op: "RNN", in: []nnIn{nnRT("x", f32, 3, 2), nnRT("w", f32, 1, 4, 2), nnRT("r", f32, 1, 4, 4)}, err: "input X has rank 2"},
		{name: "bad direction", op: "RNN", in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 4, 2), nnRT("r", f32, 1, 4, 4)}, attrs: []*model.Attr{atS("direction", "both")}, err: `direction "both"`},
	})
}

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
