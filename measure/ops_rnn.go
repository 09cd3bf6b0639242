package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// Recurrent layers: RNN (1 gate), GRU (3), LSTM (4). Inputs X, W, R, B,
// sequence_lens, initial_h (, initial_c, P for LSTM). With layout 0 (the
// default, and the only layout before opset 14) X is [seq, batch, input],
// Y is [seq, num_directions, batch, hidden] and Y_h (and LSTM's Y_c) is
// [num_directions, batch, hidden]; with layout 1 the batch axis comes
// first: X [batch, seq, input], Y [batch, seq, num_directions, hidden],
// Y_h [batch, num_directions, hidden].

var rnnOps = map[string]opRule{
	"RNN":  {infer: rnnRule(1), rankFree: true},
	"GRU":  {infer: rnnRule(3), rankFree: true},
	"LSTM": {infer: rnnRule(4), rankFree: true},
}

func rnnRule(gates int64) func(c *ctx) ([]*Value, error) {
	return func(c *ctx) ([]*Value, error) {
		xs, err := c.shape(0)
		if err != nil {
			return nil, err
		}
		if len(xs) != 3 {
			return nil, fmt.Errorf("input X has rank %d; %s needs [seq_length, batch_size, input_size]", len(xs), c.node.Op)
		}
		layout := c.attrInt("layout", 0)
		if layout != 0 && layout != 1 {
			return nil, fmt.Errorf("layout %d is neither 0 nor 1", layout)
		}
		seq, batch := xs[0], xs[1]
		if layout == 1 {
			seq, batch = xs[1], xs[0]
		}
		var dirs int64
		switch d := c.attrString("direction", "forward"); d {
		case "forward", "reverse":
			dirs = 1
		case "bidirectional":
			dirs = 2
		default:
			return nil, fmt.Errorf("direction %q is not forward, reverse or bidirectional", d)
		}
		ws, err := c.shape(1)
		if err != nil {
			return nil, err
		}
		if len(ws) != 3 {
			return nil, fmt.Errorf("weights W have rank %d; %s needs [num_directions, %d*hidden_size, input_size]", len(ws), c.node.Op, gates)
		}
		if ws[0].IsKnown() && ws[0].Value != dirs {
			return nil, fmt.Errorf("weights W hold %d directions, direction attribute says %d", ws[0].Value, dirs)
		}
		hidden, err := rnnHidden(c, ws, gates)
		if err != nil {
			return nil, err
		}
		nd := model.Known(dirs)
		y := model.Shape{seq, nd, batch, hidden}
		yh := model.Shape{nd, batch, hidden}
		if layout == 1 {
			y = model.Shape{batch, seq, nd, hidden}
			yh = model.Shape{batch, nd, hidden}
		}
		dt := c.dtype(0)
		out := []*Value{tensor(dt, y), tensor(dt, yh)}
		if gates == 4 {
			out = append(out, tensor(dt, yh.Clone()))
		}
		return out, nil
	}
}

// rnnHidden is the hidden size: the hidden_size attribute, else R's last
// dim ([num_directions, gates*hidden, hidden]), else W's dim 1 / gates.
func rnnHidden(c *ctx, ws model.Shape, gates int64) (model.Dim, error) {
	if h := c.attrInt("hidden_size", 0); h > 0 {
		return model.Known(h), nil
	}
	if rs, err := c.shape(2); err == nil && len(rs) == 3 && rs[2].IsKnown() {
		return rs[2], nil
	}
	if ws[1].IsKnown() {
		if ws[1].Value%gates != 0 {
			return model.Dim{}, fmt.Errorf("W's dim 1 (%d) is not a multiple of the %d gates", ws[1].Value, gates)
		}
		return model.Known(ws[1].Value / gates), nil
	}
	if rs, err := c.shape(2); err == nil && len(rs) == 3 {
		return rs[2], nil
	}
	return dimDiv(ws[1], model.Known(gates)), nil
}
