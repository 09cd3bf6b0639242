package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestRNNShapes(t *testing.T) {
	runNNCases(t, []nnCase{
		// corpus test_lstm_defaults: the node asks only for Y_h [dirs, batch, hidden]
		{name: "LSTM Y_h only", op: "LSTM", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 12, 2), nnRT("r", f32, 1, 12, 3)},
			attrs: []*model.Attr{atI("hidden_size", 3)}, nOut: 2, absent: []int{0}, want: []string{"", "float32[1,3,3]"}},
		// hand-worked, after test_lstm_defaults: all three outputs, Y [seq, dirs, batch, hidden],
		// Y_h and Y_c [dirs, batch, hidden]
		{name: "LSTM", op: "LSTM", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 12, 2), nnRT("r", f32, 1, 12, 3)},
			attrs: []*model.Attr{atI("hidden_size", 3)}, want: []string{"float32[1,1,3,3]", "float32[1,3,3]", "float32[1,3,3]"}},
		// corpus test_lstm_batchwise: layout 1 puts batch first
		{name: "LSTM layout 1", op: "LSTM", opset: 14, in: []nnIn{nnRT("x", f32, 3, 1, 2), nnRT("w", f32, 1, 28, 2), nnRT("r", f32, 1, 28, 7)},
			attrs: []*model.Attr{atI("hidden_size", 7), atI("layout", 1)}, want: []string{"float32[3,1,1,7]", "float32[3,1,7]"}},
		// ONNX operator spec (GRU-7): bidirectional gives 2 directions; hidden from R's last dim
		{name: "GRU bidirectional symbolic", op: "GRU", opset: 7, in: []nnIn{nnRT("x", f32, "S", "B", 10), nnRT("w", f32, 2, 15, 10), nnRT("r", f32, 2, 15, 5)},
			attrs: []*model.Attr{atS("direction", "bidirectional")}, want: []string{"float32[S,2,B,5]", "float32[2,B,5]"}},
		// corpus test_simple_rnn_defaults
		{name: "RNN", op: "RNN", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 4, 2), nnRT("r", f32, 1, 4, 4)},
			attrs: []*model.Attr{atI("hidden_size", 4)}, nOut: 2, absent: []int{0}, want: []string{"", "float32[1,3,4]"}},
		// hand-worked, after test_simple_rnn_defaults without hidden_size and with R of unknown
		// rank: hidden from W's dim 1
		{name: "RNN hidden from W", op: "RNN", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 4, 2), nnUnk("r", f32)},
			want: []string{"float32[1,1,3,4]", "float32[1,3,4]"}},
		// corpus test_gru_defaults
		{name: "GRU", op: "GRU", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 15, 2), nnRT("r", f32, 1, 15, 5)},
			attrs: []*model.Attr{atI("hidden_size", 5)}, nOut: 2, absent: []int{0}, want: []string{"", "float32[1,3,5]"}},
		// hand-worked, after test_gru_defaults without hidden_size and with R of unknown rank:
		// hidden 5 from W [1, 15, 2] / 3 gates
		{name: "GRU hidden from W", op: "GRU", opset: 14, in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 15, 2), nnUnk("r", f32)},
			want: []string{"", "float32[1,3,5]"}},
		{name: "direction mismatch", op: "LSTM", in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 2, 12, 2), nnRT("r", f32, 2, 12, 3)}, err: "W hold 2 directions, direction attribute says 1"},
		{name: "X rank", op: "RNN", in: []nnIn{nnRT("x", f32, 3, 2), nnRT("w", f32, 1, 4, 2), nnRT("r", f32, 1, 4, 4)}, err: "input X has rank 2"},
		{name: "bad direction", op: "RNN", in: []nnIn{nnRT("x", f32, 1, 3, 2), nnRT("w", f32, 1, 4, 2), nnRT("r", f32, 1, 4, 4)}, attrs: []*model.Attr{atS("direction", "both")}, err: `direction "both"`},
	})
}
