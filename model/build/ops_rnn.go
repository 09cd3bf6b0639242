package build

import "github.com/loadline/loadline/model"

// RNNSpec describes an LSTM or GRU layer on X of shape
// [seq_length, batch, input_size] (ONNX's default layout 0).
type RNNSpec struct {
	Hidden    int64
	Direction string // "forward" (the default when empty), "reverse" or "bidirectional"
	Bias      bool   // create the B initializer
}

// LSTM appends an LSTM node with its weights name+".W" [dirs, 4·hidden,
// input], name+".R" [dirs, 4·hidden, hidden] and, with s.Bias, name+".B"
// [dirs, 8·hidden]. It returns Y, [seq, dirs, batch, hidden]; the Y_h and
// Y_c outputs are omitted.
func (b *Builder) LSTM(name string, x Value, s RNNSpec) Value {
	return b.recurrent("LSTM", name, x, s, 4)
}

// GRU appends a GRU node as PyTorch exports nn.GRU (linear_before_reset 1)
// with weights name+".W" [dirs, 3·hidden, input], name+".R" [dirs,
// 3·hidden, hidden] and, with s.Bias, name+".B" [dirs, 6·hidden]. It
// returns Y; Y_h is omitted.
func (b *Builder) GRU(name string, x Value, s RNNSpec) Value {
	return b.recurrent("GRU", name, x, s, 3)
}

func (b *Builder) recurrent(op, name string, x Value, s RNNSpec, gates int64) Value {
	name = b.nodeName(op, name)
	if !b.required(op, name, x) {
		return Value{}
	}
	if len(x.Shape) != 3 || !x.Shape[2].IsKnown() {
		b.fail("%s %q: input %q has shape %s, want [seq, batch, input] with input known", op, name, x.Name, x.Shape)
		return Value{}
	}
	if s.Hidden < 1 {
		b.fail("%s %q: hidden size %d", op, name, s.Hidden)
		return Value{}
	}
	dir := s.Direction
	if dir == "" {
		dir = "forward"
	}
	dirs := int64(1)
	switch dir {
	case "forward", "reverse":
	case "bidirectional":
		dirs = 2
	default:
		b.fail("%s %q: unknown direction %q", op, name, dir)
		return Value{}
	}
	h := s.Hidden
	w := b.Weight(name+".W", x.DType, dirs, gates*h, x.Shape[2].Value)
	r := b.Weight(name+".R", x.DType, dirs, gates*h, h)
	var bias Value
	if s.Bias {
		bias = b.Weight(name+".B", x.DType, dirs, 2*gates*h)
	}
	if b.err != nil {
		return Value{}
	}
	attrs := []*model.Attr{attrString("direction", dir), attrInt("hidden_size", h)}
	if op == "GRU" {
		attrs = append(attrs, attrInt("linear_before_reset", 1))
	}
	shape := model.Shape{x.Shape[0], model.Known(dirs), x.Shape[1], model.Known(h)}
	return b.node(op, name, []Value{x, w, r, bias}, attrs, x.DType, shape)
}
