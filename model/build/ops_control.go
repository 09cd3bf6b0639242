package build

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// If appends an If node on the boolean scalar cond whose branches are
// built by then and els: each gets a builder for its subgraph (names stay
// unique across the model; the enclosing graph's tensors can be read) and
// returns the branch's outputs, as many in each branch, with equal
// dtypes. The If's outputs are named name, name+"_1", …; a dim on which
// the branches disagree becomes a fresh symbol.
func (b *Builder) If(name string, cond Value, then, els func(sub *Builder) []Value) []Value {
	name = b.nodeName("If", name)
	if !b.required("If", name, cond) {
		return nil
	}
	if cond.DType != model.Bool {
		b.fail("If %q: condition %q is %s, want bool", name, cond.Name, cond.DType)
		return nil
	}
	branch := func(label string, f func(*Builder) []Value) (*model.Graph, []Value) {
		sub := &Builder{name: name + "_" + label, opset: b.opset, declared: b.declared, seed: b.seed,
			tensors: b.tensors, nodes: b.nodes, outputs: map[string]bool{}, auto: b.auto, fresh: b.fresh}
		sub.g.Name = sub.name
		outs := f(sub)
		b.fresh = sub.fresh
		if sub.err != nil {
			b.fail("If %q %s: %v", name, label, sub.err)
			return nil, nil
		}
		if len(outs) == 0 {
			b.fail("If %q: %s has no outputs", name, label)
			return nil, nil
		}
		for _, o := range outs {
			sub.Output(o)
		}
		if sub.err != nil {
			b.fail("If %q %s: %v", name, label, sub.err)
			return nil, nil
		}
		g := sub.g
		return &g, outs
	}
	tg, to := branch("then", then)
	eg, eo := branch("else", els)
	if b.err != nil {
		return nil
	}
	if len(to) != len(eo) {
		b.fail("If %q: then_branch has %d outputs, else_branch %d", name, len(to), len(eo))
		return nil
	}
	outs := make([]Value, len(to))
	for i := range to {
		if to[i].DType != eo[i].DType {
			b.fail("If %q: output %d is %s in then_branch, %s in else_branch", name, i, to[i].DType, eo[i].DType)
			return nil
		}
		shape := to[i].Shape.Clone()
		if len(shape) != len(eo[i].Shape) {
			b.fail("If %q: output %d has rank %d in then_branch, %d in else_branch", name, i, len(shape), len(eo[i].Shape))
			return nil
		}
		for a := range shape {
			if shape[a] != eo[i].Shape[a] {
				shape[a] = b.unknownDim()
			}
		}
		o := name
		if i > 0 {
			o = fmt.Sprintf("%s_%d", name, i)
			if !b.claimTensor(o) {
				return nil
			}
		}
		outs[i] = Value{Name: o, DType: to[i].DType, Shape: shape}
	}
	attrs := []*model.Attr{
		{Name: "then_branch", Kind: model.AttrGraph, Graph: tg},
		{Name: "else_branch", Kind: model.AttrGraph, Graph: eg},
	}
	b.emit("If", name, []Value{cond}, attrs, outs...)
	return outs
}
