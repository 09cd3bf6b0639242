package measure

import (
	"fmt"
	"math"

	"github.com/loadline/loadline/model"
)

// Reductions over axes: the Reduce* operators, ArgMax/ArgMin, TopK (which
// keeps K entries of an axis) and CumSum (which keeps them all). Shape
// subgraphs reduce Shape outputs (ReduceProd of a shape is an element
// count), so ReduceSum/Prod/Max/Min fold small known contents, symbols
// kept ("batch*12").

var reduceOps = map[string]opRule{
	"ArgMax": {infer: inferArgReduce, rankFree: true},
	"ArgMin": {infer: inferArgReduce, rankFree: true},
	"TopK":   {infer: inferTopK, rankFree: true},
	"CumSum": {infer: inferCumSum, rankFree: true},
}

// reduceFold says how a Reduce* operator folds known contents; nil fields
// mean the operator is not folded.
type reduceFold struct {
	ints   func(a, b model.Dim) model.Dim
	floats func(a, b float64) float64
	empty  *float64 // the result over no elements, nil when undefined
}

var (
	zero, one   = 0.0, 1.0
	reduceFolds = map[string]reduceFold{
		"ReduceSum":       {ints: dimAdd, floats: func(a, b float64) float64 { return a + b }, empty: &zero},
		"ReduceProd":      {ints: dimMul, floats: func(a, b float64) float64 { return a * b }, empty: &one},
		"ReduceMax":       {ints: dimMax, floats: math.Max},
		"ReduceMin":       {ints: dimMin, floats: math.Min},
		"ReduceMean":      {},
		"ReduceL1":        {},
		"ReduceL2":        {},
		"ReduceLogSum":    {},
		"ReduceLogSumExp": {},
		"ReduceSumSquare": {},
	}
)

func init() {
	for op, f := range reduceFolds {
		reduceOps[op] = opRule{infer: reduceRule(op, f), rankFree: true}
	}
}

// reduceRule builds the rule of one Reduce* operator. The axes are an
// attribute up to opset 17 (ReduceSum: up to 12) and an optional input
// after; with the input form, no axes and noop_with_empty_axes=1 make the
// operator the identity. No axes otherwise means every axis. keepdims (1
// by default) keeps reduced axes as size 1.
func reduceRule(op string, fold reduceFold) func(c *ctx) ([]*Value, error) {
	return func(c *ctx) ([]*Value, error) {
		in, err := c.need(0)
		if err != nil {
			return nil, err
		}
		xs, err := c.shape(0)
		if err != nil {
			return nil, err
		}
		r := len(xs)
		axesInput := c.opset >= 18 || (op == "ReduceSum" && c.opset >= 13)
		var axes []int64
		if axesInput {
			if presentInput(c, 1) {
				if axes, err = c.needInts(1, "axes"); err != nil {
					return nil, err
				}
			}
			if len(axes) == 0 && c.attrInt("noop_with_empty_axes", 0) != 0 {
				return []*Value{{Type: in.Type, contents: heldContents(in.Const())}}, nil
			}
		} else if a, ok := c.attrInts("axes"); ok {
			axes = a
		}
		reduced := make([]bool, r)
		if len(axes) == 0 {
			for i := range reduced {
				reduced[i] = true
			}
		} else {
			ax, err := normAxes(axes, r)
			if err != nil {
				return nil, err
			}
			for _, a := range ax {
				reduced[a] = true
			}
		}
		keep := c.attrInt("keepdims", 1) != 0
		out := model.Shape{}
		for i, d := range xs {
			switch {
			case !reduced[i]:
				out = append(out, d)
			case keep:
				out = append(out, model.Known(1))
			}
		}
		res := tensor(c.dtype(0), out)
		res.setHeld(foldReduce(in, reduced, fold))
		return []*Value{res}, nil
	}
}

// foldReduce combines the known contents of in over the reduced axes; nil
// when they are not known, too large, or the operator does not fold.
func foldReduce(in *Value, reduced []bool, fold reduceFold) *Data {
	if in.Const() == nil || fold.ints == nil {
		return nil
	}
	dims, ok := in.Type.Shape.Ints()
	if !ok {
		return nil
	}
	n, ok := knownElems(in.Type.Shape)
	if !ok || int64(in.Const().Len()) != n {
		return nil
	}
	// Output strides over the kept axes, in row-major order.
	outStride := make([]int64, len(dims))
	outN := int64(1)
	for a := len(dims) - 1; a >= 0; a-- {
		if !reduced[a] {
			outStride[a] = outN
			outN *= dims[a]
		}
	}
	target := make([]int, n)
	inStride := strides(dims)
	for k := int64(0); k < n; k++ {
		rem, o := k, int64(0)
		for a := range dims {
			q := rem / inStride[a]
			rem %= inStride[a]
			o += q * outStride[a]
		}
		target[k] = int(o)
	}
	if outN > maxFoldElements {
		return nil
	}
	if n == 0 && outN > 0 && fold.empty == nil {
		// A reduced axis of size 0: Max and Min of nothing are undefined.
		return nil
	}
	filled := make([]bool, outN)
	switch in.Const().kind() {
	case 'i':
		// Known entries and symbols accumulate apart and meet at the end,
		// so a shape's element count reads "N*12", not "(N*3)*4" (every
		// folded operator is commutative).
		known := make([]model.Dim, outN)
		syms := make([]model.Dim, outN)
		hasSym := make([]bool, outN)
		for k, t := range target {
			d := in.Const().Ints[k]
			switch {
			case !d.IsKnown() && hasSym[t]:
				syms[t] = fold.ints(syms[t], d)
			case !d.IsKnown():
				syms[t], hasSym[t] = d, true
			case filled[t]:
				known[t] = fold.ints(known[t], d)
			default:
				known[t], filled[t] = d, true
			}
		}
		acc := make([]model.Dim, outN)
		for t := range acc {
			switch {
			case hasSym[t] && filled[t]:
				acc[t] = fold.ints(syms[t], known[t])
			case hasSym[t]:
				acc[t] = syms[t]
			case filled[t]:
				acc[t] = known[t]
			default:
				acc[t] = model.Known(int64(*fold.empty))
			}
		}
		return &Data{Ints: acc}
	case 'f':
		acc := make([]float64, outN)
		for k, t := range target {
			if filled[t] {
				acc[t] = fold.floats(acc[t], in.Const().Floats[k])
			} else {
				acc[t], filled[t] = in.Const().Floats[k], true
			}
		}
		for t := range acc {
			if !filled[t] {
				acc[t] = *fold.empty
			}
		}
		return &Data{Floats: acc}
	}
	return nil
}

// inferArgReduce: ArgMax/ArgMin over axis (0 by default), int64 indices,
// the axis kept as size 1 unless keepdims=0. select_last_index changes
// values only.
func inferArgReduce(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) == 0 {
		return nil, fmt.Errorf("%s of a scalar has no axis to reduce", c.node.Op)
	}
	axis, err := normAxis(c.attrInt("axis", 0), len(xs))
	if err != nil {
		return nil, err
	}
	out := model.Shape{}
	for i, d := range xs {
		switch {
		case i != axis:
			out = append(out, d)
		case c.attrInt("keepdims", 1) != 0:
			out = append(out, model.Known(1))
		}
	}
	return []*Value{tensor(model.Int64, out)}, nil
}

// inferTopK: X with axis (-1 by default) cut to K entries; K is the k
// attribute before opset 10 and a one-element input after. Outputs Values
// (X's type) and Indices (int64).
func inferTopK(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if len(xs) == 0 {
		return nil, fmt.Errorf("TopK of a scalar has no axis to select along")
	}
	axis, err := normAxis(c.attrInt("axis", -1), len(xs))
	if err != nil {
		return nil, err
	}
	var k model.Dim
	if c.opset < 10 {
		a := c.attr("k")
		if a == nil {
			return nil, fmt.Errorf("TopK has no k attribute, which opset %d requires", c.opset)
		}
		k = model.Known(a.Int)
	} else {
		ks, err := valueDims(c, 1, "K")
		if err != nil {
			return nil, err
		}
		if len(ks) != 1 {
			return nil, fmt.Errorf("K holds %d values; TopK needs exactly one", len(ks))
		}
		k = ks[0]
	}
	if k.IsKnown() {
		if k.Value < 0 {
			return nil, fmt.Errorf("K is %d, a negative count", k.Value)
		}
		if d := xs[axis]; d.IsKnown() && k.Value > d.Value {
			return nil, fmt.Errorf("K is %d but axis %d holds only %d entries", k.Value, axis, d.Value)
		}
	}
	out := xs.Clone()
	out[axis] = k
	return []*Value{tensor(c.dtype(0), out), tensor(model.Int64, out.Clone())}, nil
}

// inferCumSum: the running sum keeps X's shape; the axis must exist.
func inferCumSum(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	if ax, ok := c.constInts(1); ok && len(ax) == 1 {
		if _, err := normAxis(ax[0], len(xs)); err != nil {
			return nil, err
		}
	}
	return []*Value{tensor(c.dtype(0), xs)}, nil
}
