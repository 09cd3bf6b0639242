package measure

import (
	"fmt"
	"math"
	"slices"

	"github.com/loadline/loadline/model"
)

// Elementwise operators: output shape is the broadcast of the inputs; small
// known contents are folded, which shape subgraphs (integer Add/Mul/Div on
// dims, Equal and Where on shapes) need.

var elementwiseOps = map[string]opRule{}

// unary operators whose folding is a float function (nil: shape only).
var unaryFloat = map[string]func(float64) float64{
	"Abs": math.Abs, "Acos": math.Acos, "Acosh": math.Acosh, "Asin": math.Asin, "Asinh": math.Asinh,
	"Atan": math.Atan, "Atanh": math.Atanh, "Ceil": math.Ceil, "Cos": math.Cos, "Cosh": math.Cosh,
	"Erf": math.Erf, "Exp": math.Exp, "Floor": math.Floor, "Log": math.Log, "Neg": func(x float64) float64 { return -x },
	"Reciprocal": func(x float64) float64 { return 1 / x }, "Round": math.RoundToEven,
	"Sigmoid": func(x float64) float64 { return 1 / (1 + math.Exp(-x)) },
	"Sign": func(x float64) float64 {
		switch {
		case x > 0:
			return 1
		case x < 0:
			return -1
		}
		return 0
	},
	"Sin": math.Sin, "Sinh": math.Sinh, "Sqrt": math.Sqrt, "Tan": math.Tan, "Tanh": math.Tanh,
	"Relu":     func(x float64) float64 { return math.Max(x, 0) },
	"Softplus": func(x float64) float64 { return math.Log1p(math.Exp(x)) },
	"Softsign": func(x float64) float64 { return x / (1 + math.Abs(x)) },
	// Activations whose attributes matter only for values: shape only.
	"Elu": nil, "Selu": nil, "Celu": nil, "LeakyRelu": nil, "ThresholdedRelu": nil, "HardSigmoid": nil,
	"HardSwish": nil, "Shrink": nil, "Gelu": nil, "Mish": nil, "Softmax": nil, "LogSoftmax": nil, "Hardmax": nil,
	"LpNormalization": nil, "MeanVarianceNormalization": nil, "BitwiseNot": nil, "Bernoulli": nil,
	"RandomUniformLike": nil, "RandomNormalLike": nil,
}

type binaryOp struct {
	ints   func(a, b model.Dim) (model.Dim, bool)
	floats func(a, b float64) float64
	bool   bool // the result is a bool tensor
}

func knownPair(f func(a, b int64) int64) func(a, b model.Dim) (model.Dim, bool) {
	return func(a, b model.Dim) (model.Dim, bool) {
		if !a.IsKnown() || !b.IsKnown() {
			return model.Dim{}, false
		}
		return model.Known(f(a.Value, b.Value)), true
	}
}

func b2i(b bool) int64 {
	if b {
		return 1
	}
	return 0
}

func cmpOp(f func(a, b float64) bool) binaryOp {
	return binaryOp{
		ints: func(a, b model.Dim) (model.Dim, bool) {
			if a == b && !a.IsKnown() {
				// The same symbol on both sides compares as equal values.
				return model.Known(b2i(f(0, 0))), true
			}
			if !a.IsKnown() || !b.IsKnown() {
				return model.Dim{}, false
			}
			return model.Known(b2i(f(float64(a.Value), float64(b.Value)))), true
		},
		floats: func(a, b float64) float64 { return float64(b2i(f(a, b))) },
		bool:   true,
	}
}

var binaryOps = map[string]binaryOp{
	"Add": {ints: func(a, b model.Dim) (model.Dim, bool) { return dimAdd(a, b), true }, floats: func(a, b float64) float64 { return a + b }},
	"Sub": {ints: func(a, b model.Dim) (model.Dim, bool) { return dimSub(a, b), true }, floats: func(a, b float64) float64 { return a - b }},
	"Mul": {ints: func(a, b model.Dim) (model.Dim, bool) { return dimMul(a, b), true }, floats: func(a, b float64) float64 { return a * b }},
	"Div": {ints: func(a, b model.Dim) (model.Dim, bool) {
		if b.IsKnown() && b.Value == 0 {
			return model.Dim{}, false
		}
		return dimDiv(a, b), true
	}, floats: func(a, b float64) float64 { return a / b }},
	"Pow":            {ints: knownPair(func(a, b int64) int64 { return int64(math.Pow(float64(a), float64(b))) }), floats: math.Pow},
	"Max":            {ints: func(a, b model.Dim) (model.Dim, bool) { return dimMax(a, b), true }, floats: math.Max},
	"Min":            {ints: func(a, b model.Dim) (model.Dim, bool) { return dimMin(a, b), true }, floats: math.Min},
	"Sum":            {ints: func(a, b model.Dim) (model.Dim, bool) { return dimAdd(a, b), true }, floats: func(a, b float64) float64 { return a + b }},
	"And":            {ints: knownPair(func(a, b int64) int64 { return b2i(a != 0 && b != 0) }), bool: true},
	"Or":             {ints: knownPair(func(a, b int64) int64 { return b2i(a != 0 || b != 0) }), bool: true},
	"Xor":            {ints: knownPair(func(a, b int64) int64 { return b2i((a != 0) != (b != 0)) }), bool: true},
	"BitwiseAnd":     {ints: knownPair(func(a, b int64) int64 { return a & b })},
	"BitwiseOr":      {ints: knownPair(func(a, b int64) int64 { return a | b })},
	"BitwiseXor":     {ints: knownPair(func(a, b int64) int64 { return a ^ b })},
	"Equal":          cmpOp(func(a, b float64) bool { return a == b }),
	"Less":           cmpOp(func(a, b float64) bool { return a < b }),
	"Greater":        cmpOp(func(a, b float64) bool { return a > b }),
	"LessOrEqual":    cmpOp(func(a, b float64) bool { return a <= b }),
	"GreaterOrEqual": cmpOp(func(a, b float64) bool { return a >= b }),
}

func init() {
	for op, f := range unaryFloat {
		elementwiseOps[op] = opRule{infer: unaryRule(op, f)}
	}
	for op, b := range binaryOps {
		elementwiseOps[op] = opRule{infer: binaryRule(op, b)}
	}
	// PRelu's slope broadcasts onto X (per channel in opsets before 7): the
	// output is always shaped like X.
	elementwiseOps["PRelu"] = opRule{infer: same}
	elementwiseOps["Mean"] = opRule{infer: binaryRule("Mean", binaryOp{})}
	elementwiseOps["Mod"] = opRule{infer: inferMod}
	elementwiseOps["BitShift"] = opRule{infer: inferBitShift}
	elementwiseOps["Not"] = opRule{infer: inferNot}
	elementwiseOps["IsNaN"] = opRule{infer: boolLike}
	elementwiseOps["IsInf"] = opRule{infer: boolLike}
	elementwiseOps["Where"] = opRule{infer: inferWhere}
	elementwiseOps["Clip"] = opRule{infer: inferClip}
	elementwiseOps["Cast"] = opRule{infer: inferCast}
	elementwiseOps["CastLike"] = opRule{infer: inferCastLike}
	elementwiseOps["Dropout"] = opRule{infer: inferDropout}
	elementwiseOps["Identity"] = opRule{infer: inferIdentity, rankFree: true}
}

func unaryRule(op string, f func(float64) float64) func(c *ctx) ([]*Value, error) {
	return func(c *ctx) ([]*Value, error) {
		in, err := c.need(0)
		if err != nil {
			return nil, err
		}
		out := &Value{Type: in.Type}
		if in.Const() != nil {
			switch {
			case in.Const().Floats != nil && f != nil:
				fs := make([]float64, len(in.Const().Floats))
				for i, x := range in.Const().Floats {
					fs[i] = f(x)
				}
				out.setHeld(&Data{Floats: fs})
			case in.Const().Ints != nil && f != nil:
				if xs, ok := in.Const().KnownInts(); ok {
					r := make([]int64, len(xs))
					for i, x := range xs {
						r[i] = int64(f(float64(x)))
					}
					out.setHeld(intData(r...))
				}
			}
		}
		return []*Value{out}, nil
	}
}

// foldBinary folds fn over a and b broadcast to out; nil when not possible.
func foldBinary(a, b *Value, out model.Shape, op binaryOp) *Data {
	if a.Const() == nil || b.Const() == nil {
		return nil
	}
	od, ok := out.Ints()
	if !ok {
		return nil
	}
	if n, ok := knownElems(out); !ok || n > maxFoldElements {
		return nil
	}
	ad, ok1 := a.Type.Shape.Ints()
	bd, ok2 := b.Type.Shape.Ints()
	if !ok1 || !ok2 {
		return nil
	}
	ai, bi := broadcastIndex(od, ad), broadcastIndex(od, bd)
	if a.Const().Ints != nil && b.Const().Ints != nil && op.ints != nil {
		res := make([]model.Dim, len(ai))
		for k := range ai {
			if ai[k] >= len(a.Const().Ints) || bi[k] >= len(b.Const().Ints) {
				return nil
			}
			v, ok := op.ints(a.Const().Ints[ai[k]], b.Const().Ints[bi[k]])
			if !ok {
				return nil
			}
			res[k] = v
		}
		return &Data{Ints: res}
	}
	if op.floats == nil {
		return nil
	}
	af, ok1 := a.Const().AsFloats()
	bf, ok2 := b.Const().AsFloats()
	if !ok1 || !ok2 {
		return nil
	}
	res := make([]float64, len(ai))
	for k := range ai {
		if ai[k] >= len(af) || bi[k] >= len(bf) {
			return nil
		}
		res[k] = op.floats(af[ai[k]], bf[bi[k]])
	}
	if op.bool || a.Const().Ints != nil {
		out := make([]int64, len(res))
		for i, x := range res {
			out[i] = int64(x)
		}
		return intData(out...)
	}
	return &Data{Floats: res}
}

// sameShape is an input's shape when out equals it, else a copy of out
// (which may be a caller's buffer): most elementwise results have the
// shape of an input, and values share their shapes as they do their types
// (no rule changes a shape it did not make), so a large graph keeps one
// shape where it kept two.
func sameShape(out model.Shape, ins []model.Shape) model.Shape {
	for _, s := range ins {
		if slices.Equal(s, out) {
			return s[:len(s):len(s)]
		}
	}
	kept := make(model.Shape, len(out))
	copy(kept, out)
	return kept
}

func binaryRule(op string, b binaryOp) func(c *ctx) ([]*Value, error) {
	return func(c *ctx) ([]*Value, error) {
		if len(c.in) == 0 {
			return nil, fmt.Errorf("%s needs at least one input", op)
		}
		var buf [2]model.Shape
		shapes := buf[:0]
		for i := range c.in {
			s, err := c.shape(i)
			if err != nil {
				return nil, err
			}
			shapes = append(shapes, s)
		}
		var dims [4]model.Dim
		broadcasted, err := broadcastInto(dims[:0], shapes...)
		if err != nil {
			return nil, err
		}
		out := sameShape(broadcasted, shapes)
		dt := c.dtype(0)
		if b.bool {
			dt = model.Bool
		}
		res := tensor(dt, out)
		if b.ints != nil || b.floats != nil {
			acc := c.in[0]
			for i := 1; i < len(c.in) && acc != nil; i++ {
				if acc.Const() == nil || c.in[i].Const() == nil {
					acc = nil // nothing to fold (foldBinary's own first test)
					break
				}
				s, _ := broadcast(acc.Type.Shape, c.in[i].Type.Shape)
				d := foldBinary(acc, c.in[i], s, b)
				if d == nil {
					acc = nil
					break
				}
				acc = tensorConst(c.dtype(0), s, d)
			}
			if acc != nil && len(c.in) > 1 {
				res.shareContents(acc)
			}
		}
		return []*Value{res}, nil
	}
}

func inferMod(c *ctx) ([]*Value, error) {
	fmod := c.attrInt("fmod", 0) == 1
	op := binaryOp{
		ints: knownPair(func(a, b int64) int64 {
			if b == 0 {
				return 0
			}
			r := a % b
			if !fmod && r != 0 && (r < 0) != (b < 0) {
				r += b
			}
			return r
		}),
		floats: func(a, b float64) float64 {
			r := math.Mod(a, b)
			if !fmod && r != 0 && (r < 0) != (b < 0) {
				r += b
			}
			return r
		},
	}
	return binaryRule("Mod", op)(c)
}

func inferBitShift(c *ctx) ([]*Value, error) {
	left := c.attrString("direction", "") == "LEFT"
	return binaryRule("BitShift", binaryOp{ints: knownPair(func(a, b int64) int64 {
		if b < 0 || b > 63 {
			return 0
		}
		if left {
			return int64(uint64(a) << uint(b))
		}
		return int64(uint64(a) >> uint(b))
	})})(c)
}

func inferNot(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	out := tensor(model.Bool, in.Type.Shape)
	if xs, ok := in.Const().KnownInts(); ok && in.Const().Ints != nil {
		r := make([]int64, len(xs))
		for i, x := range xs {
			r[i] = b2i(x == 0)
		}
		out.setHeld(intData(r...))
	}
	return []*Value{out}, nil
}

func boolLike(c *ctx) ([]*Value, error) {
	s, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	return []*Value{tensor(model.Bool, s)}, nil
}

func inferWhere(c *ctx) ([]*Value, error) {
	var shapes []model.Shape
	for i := 0; i < 3; i++ {
		s, err := c.shape(i)
		if err != nil {
			return nil, err
		}
		shapes = append(shapes, s)
	}
	out, err := broadcast(shapes...)
	if err != nil {
		return nil, err
	}
	res := tensor(c.dtype(1), out)
	cond, x, y := c.in[0], c.in[1], c.in[2]
	if cond.Const() != nil && x.Const() != nil && y.Const() != nil && x.Const().kind() == y.Const().kind() {
		od, ok := out.Ints()
		cd, ok1 := cond.Type.Shape.Ints()
		xd, ok2 := x.Type.Shape.Ints()
		yd, ok3 := y.Type.Shape.Ints()
		cv, ok4 := cond.Const().KnownInts()
		if ok && ok1 && ok2 && ok3 && ok4 {
			if n, fits := knownElems(out); fits {
				ci, xi, yi := broadcastIndex(od, cd), broadcastIndex(od, xd), broadcastIndex(od, yd)
				xs, ys := x.Const(), y.Const()
				sel := make([]int, n)
				// Build from a joined source: x's elements, then y's.
				joined := concatData([]*Data{xs, ys})
				for k := range sel {
					if ci[k] >= len(cv) || xi[k] >= xs.Len() || yi[k] >= ys.Len() {
						return []*Value{res}, nil
					}
					if cv[ci[k]] != 0 {
						sel[k] = xi[k]
					} else {
						sel[k] = xs.Len() + yi[k]
					}
				}
				res.setHeld(joined.take(sel))
			}
		}
	}
	return []*Value{res}, nil
}

func inferClip(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	out := &Value{Type: in.Type}
	if in.Const() != nil {
		lo, hi := math.Inf(-1), math.Inf(1)
		if c.opset < 11 {
			lo, hi = c.attrFloat("min", lo), c.attrFloat("max", hi)
		} else {
			if f, ok := c.consts(1).AsFloats(); ok && len(f) == 1 {
				lo = f[0]
			} else if c.has(1) {
				return []*Value{out}, nil
			}
			if f, ok := c.consts(2).AsFloats(); ok && len(f) == 1 {
				hi = f[0]
			} else if c.has(2) {
				return []*Value{out}, nil
			}
		}
		if fs, ok := in.Const().AsFloats(); ok {
			r := make([]float64, len(fs))
			for i, x := range fs {
				r[i] = math.Min(math.Max(x, lo), hi)
			}
			if in.Const().Ints != nil {
				ints := make([]int64, len(r))
				for i, x := range r {
					ints[i] = int64(x)
				}
				out.setHeld(intData(ints...))
			} else {
				out.setHeld(&Data{Floats: r})
			}
		}
	}
	return []*Value{out}, nil
}

// castData converts known contents to the representation of dtype to.
func castData(d *Data, to model.DType) *Data {
	if d == nil {
		return nil
	}
	switch {
	case to == model.String:
		if d.Strings != nil {
			return d
		}
		return nil
	case to.IsFloat():
		if d.Strings != nil {
			return nil
		}
		f, ok := d.AsFloats()
		if !ok {
			return nil
		}
		if to == model.Float32 || to == model.Float16 || to == model.BFloat16 {
			r := make([]float64, len(f))
			for i, x := range f {
				r[i] = float64(float32(x))
			}
			f = r
		}
		return &Data{Floats: f}
	case to == model.Bool:
		if d.Ints != nil {
			r := make([]model.Dim, len(d.Ints))
			for i, x := range d.Ints {
				if !x.IsKnown() {
					return nil
				}
				r[i] = model.Known(b2i(x.Value != 0))
			}
			return &Data{Ints: r}
		}
		if d.Floats != nil {
			r := make([]int64, len(d.Floats))
			for i, x := range d.Floats {
				r[i] = b2i(x != 0)
			}
			return intData(r...)
		}
	case to.IsInteger():
		if d.Ints != nil {
			return d
		}
		if d.Floats != nil {
			r := make([]int64, len(d.Floats))
			for i, x := range d.Floats {
				if math.IsNaN(x) || math.IsInf(x, 0) {
					return nil
				}
				r[i] = int64(x)
			}
			return intData(r...)
		}
	}
	return nil
}

func inferCast(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	to := model.DType(c.attrInt("to", 0))
	out := tensor(to, in.Type.Shape)
	out.setHeld(castData(in.Const(), to))
	return []*Value{out}, nil
}

func inferCastLike(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	to := c.dtype(1)
	out := tensor(to, in.Type.Shape)
	out.setHeld(castData(in.Const(), to))
	return []*Value{out}, nil
}

func inferDropout(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	return []*Value{{Type: in.Type, contents: heldContents(in.Const())}, tensor(model.Bool, in.Type.Shape)}, nil
}

func inferIdentity(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	v := *in
	v.Weight = false
	return []*Value{&v}, nil
}
