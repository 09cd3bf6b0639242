package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// inferStored is what loadline knows of a TFLite model's values: the types
// and shapes the file stores (a TFLite file stores every tensor's shape;
// nothing is inferred), with the symbolic dims of shape_signature bound by
// opts.Dims or else by the sizes the file was converted for
// (Model.DimDefaults). Each operator whose row in tfliteOps has a shape
// check is checked: when its stored output shape contradicts what its
// inputs imply, it is listed as unresolved and its output's shape is
// treated as unknown, so that nothing downstream trusts it.
func inferStored(m *model.Model, opts InferOptions) (*Inference, error) {
	// The bindings are checked against the inputs as ONNX's are (bind.go);
	// the file's own sizes fill in every dim they leave unbound.
	ins, bound, issues, err := boundInputs(m.Graph, m.Graph.Inputs, opts, !opts.Lenient)
	if err != nil {
		return nil, err
	}
	dims := map[string]int64{}
	for k, v := range m.DimDefaults {
		dims[k] = v
	}
	for k, v := range bound {
		dims[k] = v
	}
	s := &storedInference{dims: dims, res: &Inference{Model: m, Subgraphs: map[*model.Graph]*Values{}, Calls: map[*model.Node]*CallBody{},
		Dims: bound, BindingIssues: issues, Has: inputsText(m.Graph.Inputs, ins)}}
	s.inputs = map[string]*Value{}
	for i, in := range m.Graph.Inputs {
		v := *ins[i]
		v.Type = bindDims(v.Type, dims)
		s.inputs[in.Name] = &v
	}
	vals, err := s.graph(m.Graph, "", 0)
	if err != nil {
		return nil, err
	}
	s.res.Values = vals
	for _, in := range m.Graph.Inputs {
		s.res.Inputs = append(s.res.Inputs, NamedValue{in.Name, vals.Get(in.Name)})
	}
	for _, out := range m.Graph.Outputs {
		s.res.Outputs = append(s.res.Outputs, NamedValue{out.Name, vals.Get(out.Name)})
	}
	s.res.Unresolved = s.unresolved
	return s.res, nil
}

type storedInference struct {
	dims       map[string]int64
	inputs     map[string]*Value // the main graph's inputs, bound
	res        *Inference
	unresolved []Unresolved
}

// graph gives every tensor of g its stored type, checks g's operators and
// does the same for the subgraphs they run.
func (s *storedInference) graph(g *model.Graph, path string, depth int) (*Values, error) {
	if depth > maxGraphDepth {
		return nil, errDepth
	}
	vals := namedValues(len(g.Initializers) + len(g.ValueInfo))
	declare := func(vis []*model.ValueInfo, state bool) {
		for _, vi := range vis {
			if _, done := vals.lookup(vi.Name); !done {
				vals.set(vi.Name, &Value{Type: bindDims(vi.Type, s.dims), State: state})
			}
		}
	}
	for _, t := range g.Initializers {
		vals.set(t.Name, tensorValue(t))
	}
	declare(g.State, true)
	if depth == 0 {
		for name, v := range s.inputs {
			vals.set(name, v)
		}
	}
	declare(g.Inputs, false)
	declare(g.Outputs, false)
	declare(g.ValueInfo, false)
	for i, n := range g.Nodes {
		for _, a := range n.Attrs {
			if a.Kind == model.AttrGraph && a.Graph != nil {
				if _, done := s.res.Subgraphs[a.Graph]; done {
					continue
				}
				sub, err := s.graph(a.Graph, path+nodeName(n, i)+"/", depth+1)
				if err != nil {
					return nil, err
				}
				s.res.Subgraphs[a.Graph] = sub
			}
		}
		s.check(n, i, vals, path)
	}
	return vals, nil
}

// check compares n's stored output shapes with what its inputs imply.
func (s *storedInference) check(n *model.Node, i int, vals *Values, path string) {
	op, ok := tfliteOps[n.Op]
	if !ok || n.Domain != "tflite" || op.check == nil {
		return
	}
	c := newCostCtx(n)
	c.lookUp(vals.Get)
	want, err := op.check(c)
	bad := func(j int, reason string) {
		s.unresolved = append(s.unresolved, Unresolved{Node: path + nodeName(n, i), Op: n.Op, Reason: reason})
		if j >= 0 && j < len(n.Outputs) && n.Outputs[j] != "" {
			if v := vals.Get(n.Outputs[j]); v != nil {
				vals.set(n.Outputs[j], &Value{Type: model.Type{Kind: model.KindTensor, DType: v.Type.DType}})
			}
		}
	}
	if err != nil {
		bad(0, fmt.Sprintf("inconsistent shapes: %v; its stored output shape is not trusted", err))
		return
	}
	for j, w := range want {
		v := c.out(j)
		if v == nil || !v.Type.RankKnown || w == nil {
			continue
		}
		if !v.Type.Shape.Equal(w) {
			bad(j, fmt.Sprintf("inconsistent shapes: the stored output shape %s contradicts its inputs, which give %s; it is not trusted", v.Type.Shape, w))
		}
	}
}
