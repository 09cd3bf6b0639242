package measure

import (
	"fmt"
	"math/rand"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
)

// TestNNRulesNoPanic throws random ranks, dims (negative, zero, huge,
// symbolic), contents and attributes at every rule of the nn families: each
// must return outputs or an error, never panic.
func TestNNRulesNoPanic(t *testing.T) {
	fams := map[string]map[string]opRule{
		"conv": convOps, "pool": poolOps, "matmul": matmulOps, "norm": normOps, "rnn": rnnOps, "quant": quantOps,
		"resize": resizeOps, "reduce": reduceOps, "signal": signalOps, "loss": lossOps, "detect": detectOps,
	}
	rng := rand.New(rand.NewSource(1))
	dims := []model.Dim{model.Known(-1), model.Known(0), model.Known(1), model.Known(2), model.Known(3), model.Known(4),
		model.Known(7), model.Known(1 << 40), model.Known(-1 << 62), model.Sym("N"), model.Sym("(a+1)/2")}
	ints := []int64{-3, -1, 0, 1, 2, 3, 5, 1 << 33, -1 << 63}
	randInts := func(n int) []int64 {
		v := make([]int64, n)
		for i := range v {
			v[i] = ints[rng.Intn(len(ints))]
		}
		return v
	}
	randValue := func() *Value {
		if rng.Intn(8) == 0 {
			return nil
		}
		if rng.Intn(10) == 0 {
			return &Value{Type: model.Type{Kind: model.KindTensor, DType: f32}}
		}
		r := rng.Intn(6)
		s := make(model.Shape, r)
		for i := range s {
			s[i] = dims[rng.Intn(len(dims))]
		}
		dt := []model.DType{f32, model.Int64, model.Uint8, model.Float16}[rng.Intn(4)]
		v := &Value{Type: model.TensorType(dt, s)}
		if rng.Intn(2) == 0 {
			n := rng.Intn(9)
			if rng.Intn(2) == 0 {
				v.setHeld(intData(randInts(n)...))
				if rng.Intn(4) == 0 && n > 0 {
					v.Const().Ints[0] = model.Sym("N")
				}
			} else {
				f := make([]float64, n)
				for i := range f {
					f[i] = []float64{-1, 0, 0.5, 1, 2, 1e30, 1e-30}[rng.Intn(7)]
				}
				v.setHeld(&Data{Floats: f})
			}
		}
		return v
	}
	intAttrs := []string{"group", "axis", "keepdims", "k", "transA", "transB", "ceil_mode", "layout", "hidden_size",
		"onesided", "noop_with_empty_axes", "training_mode", "spatial", "output_height", "output_width", "output_dtype",
		"stash_type", "output_datatype", "center_point_box"}
	intsAttrs := []string{"kernel_shape", "strides", "pads", "dilations", "output_padding", "output_shape", "axes", "pooled_shape"}
	strAttrs := map[string][]string{
		"auto_pad":                 {"NOTSET", "SAME_UPPER", "VALID", "bogus"},
		"direction":                {"forward", "bidirectional", "x"},
		"reduction":                {"none", "sum", "mean", "x"},
		"keep_aspect_ratio_policy": {"stretch", "not_larger", "not_smaller", "x"},
		"equation":                 {"ij,jk->ik", "...ii->...i", "a...b", "i,i", "->", "ij->jj", "...,...->...", "ab,,", ".", "a..."},
	}
	for fam, rules := range fams {
		for op, rule := range rules {
			for iter := 0; iter < 400; iter++ {
				n := &model.Node{Name: "n", Op: op}
				if i := strings.IndexByte(op, ':'); i >= 0 {
					n.Domain, n.Op = op[:i], op[i+1:]
				}
				var in []*Value
				for j := rng.Intn(11); j > 0; j-- {
					in = append(in, randValue())
					n.Inputs = append(n.Inputs, fmt.Sprintf("i%d", len(in)))
				}
				for j := rng.Intn(4); j > 0; j-- {
					n.Outputs = append(n.Outputs, fmt.Sprintf("o%d", j))
				}
				for j := rng.Intn(5); j > 0; j-- {
					switch rng.Intn(3) {
					case 0:
						n.Attrs = append(n.Attrs, atI(intAttrs[rng.Intn(len(intAttrs))], ints[rng.Intn(len(ints))]))
					case 1:
						n.Attrs = append(n.Attrs, atIs(intsAttrs[rng.Intn(len(intsAttrs))], randInts(rng.Intn(7))...))
					default:
						for name, vals := range strAttrs {
							n.Attrs = append(n.Attrs, atS(name, vals[rng.Intn(len(vals))]))
							break
						}
					}
				}
				opset := []int64{1, 7, 9, 11, 13, 17, 18, 19, 20, 21}[rng.Intn(10)]
				func() {
					defer func() {
						if r := recover(); r != nil {
							t.Errorf("%s/%s panicked: %v\nnode %+v\ninputs %v", fam, op, r, n, in)
						}
					}()
					_, _ = rule.infer(&ctx{node: n, in: in, opset: opset})
				}()
			}
		}
	}
}
