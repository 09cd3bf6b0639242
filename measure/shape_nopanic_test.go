package measure

import (
	"fmt"
	"math/rand"
	"testing"

	"github.com/loadline/loadline/model"
)

// TestShapeRulesNoPanic throws random inputs at every rule of the
// elementwise, shape and control families, as TestNNRulesNoPanic does for
// the nn families. Known contents always match their shape, as they do
// when the engine builds them, so a failure is a real bug.
func TestShapeRulesNoPanic(t *testing.T) {
	fams := map[string]map[string]opRule{"elementwise": elementwiseOps, "shape": shapeOps, "control": controlOps}
	rng := rand.New(rand.NewSource(2))
	dims := []int64{0, 1, 2, 3, 4, 7, 1 << 40}
	ints := []int64{-3, -1, 0, 1, 2, 3, 5, 1 << 33, -1 << 63, 1<<63 - 1}
	randValue := func() *Value {
		if rng.Intn(8) == 0 {
			return nil
		}
		r := rng.Intn(5)
		s := make(model.Shape, r)
		n := int64(1)
		for i := range s {
			d := dims[rng.Intn(len(dims))]
			if rng.Intn(6) == 0 {
				s[i] = model.Sym("N")
				n = -1
				continue
			}
			s[i] = model.Known(d)
			if n >= 0 {
				n *= d
			}
		}
		dt := []model.DType{f32, model.Int64, model.Bool, model.String}[rng.Intn(4)]
		v := &Value{Type: model.TensorType(dt, s)}
		if n >= 0 && n <= 64 && rng.Intn(2) == 0 {
			switch {
			case dt == model.String:
				v.setHeld(&Data{Strings: make([]string, n)})
			case dt == f32:
				f := make([]float64, n)
				for i := range f {
					f[i] = []float64{-1, 0, 0.5, 3, 1e30}[rng.Intn(5)]
				}
				v.setHeld(&Data{Floats: f})
			default:
				x := make([]int64, n)
				for i := range x {
					x[i] = ints[rng.Intn(len(ints))]
				}
				v.setHeld(intData(x...))
				if n > 0 && rng.Intn(4) == 0 {
					v.Const().Ints[0] = model.Sym("N")
				}
			}
		}
		if rng.Intn(12) == 0 {
			el := v.Type
			v = seqValue(el, []*Value{v}, rng.Intn(2) == 0)
		}
		return v
	}
	intAttrs := []string{"axis", "keepdims", "to", "start", "end", "allowzero", "blocksize", "num_outputs", "new_axis", "fmod", "dtype", "sample_size", "num_scan_inputs"}
	intsAttrs := []string{"perm", "axes", "split", "shape", "starts", "ends", "pads", "scan_input_axes", "scan_output_axes"}
	e := newEngine(&model.Model{Opsets: map[string]int64{"": 17}}, InferOptions{})
	for fam, rules := range fams {
		for op, rule := range rules {
			for iter := 0; iter < 300; iter++ {
				n := &model.Node{Name: "n", Op: op}
				var in []*Value
				for j := rng.Intn(6); j > 0; j-- {
					in = append(in, randValue())
					n.Inputs = append(n.Inputs, fmt.Sprintf("i%d", len(in)))
				}
				for j := rng.Intn(4); j > 0; j-- {
					n.Outputs = append(n.Outputs, fmt.Sprintf("o%d", j))
				}
				for j := rng.Intn(4); j > 0; j-- {
					if rng.Intn(2) == 0 {
						n.Attrs = append(n.Attrs, atI(intAttrs[rng.Intn(len(intAttrs))], ints[rng.Intn(len(ints))]))
					} else {
						k := rng.Intn(5)
						v := make([]int64, k)
						for i := range v {
							v[i] = ints[rng.Intn(len(ints))]
						}
						n.Attrs = append(n.Attrs, atIs(intsAttrs[rng.Intn(len(intsAttrs))], v...))
					}
				}
				opset := []int64{1, 7, 9, 11, 13, 17, 18, 21}[rng.Intn(8)]
				func() {
					defer func() {
						if r := recover(); r != nil {
							t.Errorf("%s/%s panicked: %v\nnode %+v\ninputs %v", fam, op, r, n, in)
						}
					}()
					_, _ = rule.infer(&ctx{e: e, node: n, in: in, opset: opset, sc: &scope{vals: namedValues(0)}})
				}()
			}
		}
	}
}
