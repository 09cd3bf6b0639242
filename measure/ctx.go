package measure

import (
	"fmt"
	"slices"

	"github.com/loadline/loadline/model"
)

// ctx is what an operator's shape rule sees: the node, what is known of its
// inputs, the operator set version in force, and the enclosing scope (for
// subgraphs).
type ctx struct {
	e     *engine
	node  *model.Node
	in    []*Value
	sc    *scope
	path  *trail
	opset int64
	idx   int // the node's index in its graph
}

// label names the node in messages: its name, else op#index.
func (c *ctx) label() string { return nodeLabel(c.node, c.idx) }

// opRule is one row of the operator table.
type opRule struct {
	infer func(c *ctx) ([]*Value, error)
	// rankFree marks rules that handle inputs of unknown rank themselves.
	rankFree bool
}

// has reports whether input i is present.
func (c *ctx) has(i int) bool { return i < len(c.in) && c.in[i] != nil }

// input returns input i or nil.
func (c *ctx) input(i int) *Value {
	if c.has(i) {
		return c.in[i]
	}
	return nil
}

// need returns input i, failing when it is missing.
func (c *ctx) need(i int) (*Value, error) {
	if !c.has(i) {
		return nil, fmt.Errorf("required input %d is missing", i)
	}
	return c.in[i], nil
}

// shape returns the known shape of input i.
func (c *ctx) shape(i int) (model.Shape, error) {
	v, err := c.need(i)
	if err != nil {
		return nil, err
	}
	if !v.Type.RankKnown {
		return nil, fmt.Errorf("input %d has unknown shape", i)
	}
	return v.Type.Shape, nil
}

// dtype returns the element type of input i (Undefined when absent).
func (c *ctx) dtype(i int) model.DType {
	if v := c.input(i); v != nil {
		if v.Type.Kind == model.KindSequence && v.Type.Elem != nil {
			return v.Type.Elem.DType
		}
		return v.Type.DType
	}
	return model.Undefined
}

// consts returns the contents of input i when known.
func (c *ctx) consts(i int) *Data {
	if v := c.input(i); v != nil {
		return v.Const()
	}
	return nil
}

// constInts returns input i's contents as int64s, when known.
func (c *ctx) constInts(i int) ([]int64, bool) {
	return c.consts(i).KnownInts()
}

// needInts returns input i's contents, failing with a reason that names the
// input when they are not known statically.
func (c *ctx) needInts(i int, what string) ([]int64, error) {
	if !c.has(i) {
		return nil, fmt.Errorf("%s (input %d) is missing", what, i)
	}
	v, ok := c.constInts(i)
	if !ok {
		return nil, fmt.Errorf("%s (input %d, %q) is computed at run time; its value is not known statically", what, i, c.node.Inputs[i])
	}
	return v, nil
}

func (c *ctx) attr(name string) *model.Attr { return c.node.Attr(name) }

func (c *ctx) attrInt(name string, def int64) int64 {
	if a := c.attr(name); a != nil {
		return a.Int
	}
	return def
}

func (c *ctx) attrFloat(name string, def float64) float64 {
	if a := c.attr(name); a != nil {
		return float64(a.Float)
	}
	return def
}

func (c *ctx) attrString(name, def string) string {
	if a := c.attr(name); a != nil {
		return a.String
	}
	return def
}

func (c *ctx) attrInts(name string) ([]int64, bool) {
	if a := c.attr(name); a != nil {
		return a.Ints, true
	}
	return nil, false
}

// tensor builds an output tensor value.
func tensor(dt model.DType, s model.Shape) *Value {
	return &Value{Type: model.TensorType(dt, s)}
}

// tensorConst builds an output tensor value with known contents.
func tensorConst(dt model.DType, s model.Shape, d *Data) *Value {
	v := tensor(dt, s)
	if d != nil && d.Len() <= maxFoldElements {
		v.setHeld(d)
	}
	return v
}

// unknownRank builds an output of known dtype whose shape is not known.
func unknownRank(dt model.DType) *Value {
	return &Value{Type: model.Type{Kind: model.KindTensor, DType: dt}}
}

// normAxis maps a possibly negative axis into [0, rank).
func normAxis(axis int64, rank int) (int, error) {
	if axis < 0 {
		axis += int64(rank)
	}
	if axis < 0 || axis >= int64(rank) {
		return 0, fmt.Errorf("axis %d is out of range for rank %d", axis, rank)
	}
	return int(axis), nil
}

// normAxes maps a list of axes, rejecting duplicates.
func normAxes(axes []int64, rank int) ([]int, error) {
	out := make([]int, len(axes))
	seen := map[int]bool{}
	for i, a := range axes {
		n, err := normAxis(a, rank)
		if err != nil {
			return nil, err
		}
		if seen[n] {
			return nil, fmt.Errorf("axis %d is repeated", a)
		}
		seen[n] = true
		out[i] = n
	}
	return out, nil
}

// same returns one output with the type of input 0 (shape-preserving ops).
func same(c *ctx) ([]*Value, error) {
	v, err := c.need(0)
	if err != nil {
		return nil, err
	}
	return []*Value{{Type: v.Type}}, nil
}

// broadcast applies the multidirectional broadcasting rule to shapes.
func broadcast(shapes ...model.Shape) (model.Shape, error) {
	return broadcastInto(nil, shapes...)
}

// broadcastInto is broadcast, built in dst's storage when it has room (a
// caller's buffer on the stack, for a result it may not keep).
func broadcastInto(dst model.Shape, shapes ...model.Shape) (model.Shape, error) {
	rank := 0
	for _, s := range shapes {
		rank = max(rank, len(s))
	}
	out := dst[:0]
	if dst == nil || cap(out) < rank {
		out = make(model.Shape, rank) // as before: a scalar's shape is empty, not nil
	}
	out = out[:rank]
	for i := range out {
		out[i] = model.Known(1)
	}
	for _, s := range shapes {
		off := rank - len(s)
		for i, d := range s {
			o := out[off+i]
			switch {
			case d.IsKnown() && d.Value == 1:
			case o.IsKnown() && o.Value == 1:
				out[off+i] = d
			case o == d:
			case o.IsKnown() && d.IsKnown():
				// A copy in the message, so that shapes does not escape:
				// callers pass it from the stack.
				return nil, fmt.Errorf("shapes %v cannot be broadcast together (dim %d: %d vs %d)", slices.Clone(shapes), off+i, o.Value, d.Value)
			case d.IsKnown():
				// A symbol meeting a known size >1 must equal it.
				out[off+i] = d
			case o.IsKnown():
			default:
				out[off+i] = dimMax(o, d)
			}
		}
	}
	return out, nil
}

// strides returns row-major strides for known dims.
func strides(dims []int64) []int64 {
	st := make([]int64, len(dims))
	acc := int64(1)
	for i := len(dims) - 1; i >= 0; i-- {
		st[i] = acc
		acc *= dims[i]
	}
	return st
}

// broadcastIndex maps each output element to the element of an input of
// shape in (right-aligned broadcasting).
func broadcastIndex(out, in []int64) []int {
	n := int64(1)
	for _, d := range out {
		n *= d
	}
	idx := make([]int, n)
	ost := strides(out)
	ist := strides(in)
	off := len(out) - len(in)
	for k := int64(0); k < n; k++ {
		rem := k
		src := int64(0)
		for a := range out {
			q := rem / ost[a]
			rem %= ost[a]
			if a >= off && in[a-off] != 1 {
				src += q * ist[a-off]
			}
		}
		idx[k] = int(src)
	}
	return idx
}

// knownElems returns the element count of a fully known shape within the
// folding limit.
func knownElems(s model.Shape) (int64, bool) {
	n, ok := s.Elements()
	if !ok || n > maxFoldElements {
		return 0, false
	}
	return n, true
}

// outName returns the name of output i, for naming fresh symbols; a node
// that declares fewer outputs (a hostile file) gets a stand-in.
func (c *ctx) outName(i int) string {
	if i < len(c.node.Outputs) && c.node.Outputs[i] != "" {
		return c.node.Outputs[i]
	}
	return fmt.Sprintf("%s_out%d", c.node.Op, i)
}
