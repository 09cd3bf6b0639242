package measure

import (
	"sync"

	"github.com/loadline/loadline/model"
)

// graphIndex numbers the values one graph names, so that inference (for
// the main graph, Values) and the passes after it (the memory planners,
// the costs, the weights) keep their per-value records in slices indexed
// by number rather than in maps keyed by name: on a graph of 100,000
// nodes, name look-ups were most of their time. Every name the
// graph's inputs, initializers, nodes and outputs mention gets a number,
// names of an enclosing graph that its nodes read included (inference has
// no value for those in this graph: vals[id] is nil, as a look-up by name
// in the graph's own values finds nothing).
type graphIndex struct {
	g     *model.Graph // the graph numbered
	ids   nameTable    // finds a name's number in names
	names []string
	// vals holds, by number, what inference found of each value.
	vals []*Value
	// in and out hold the numbers of every node's inputs and outputs in
	// turn, -1 for an omitted one (""); node i's are in[inAt[i]:inAt[i+1]]
	// and out[outAt[i]:outAt[i+1]].
	in, out     []int32
	inAt, outAt []int32
	// held caches heldTensors (static.go), which three passes read,
	// found once (heldOnce) even when passes run side by side.
	held     []heldTensor
	heldOnce sync.Once
}

// Values is what inference found of the values of one graph, by name. The
// main graph's are kept by number (numberedValues): a graph of 100,000
// nodes names some 170,000 values, and a map of them beside the index's
// own was the largest part of inference's memory and much of its time.
// A subgraph's, a function body's and a TFLite graph's are kept by name.
type Values struct {
	x      *graphIndex       // the names numbered, nil for values kept by name alone
	byID   []*Value          // by number, when x is set
	byName map[string]*Value // the names x does not number, or all when x is nil
}

// namedValues is an empty table kept by name, with room for n names.
func namedValues(n int) *Values { return &Values{byName: make(map[string]*Value, n)} }

// numberedValues is an empty table of the values x numbers, the slice x's
// passes read (graphIndex.vals) its storage.
func numberedValues(x *graphIndex) *Values {
	vs := &Values{x: x, byID: make([]*Value, len(x.names))}
	x.vals = vs.byID
	return vs
}

// Get is the value named name, nil when nothing is known of it.
func (vs *Values) Get(name string) *Value {
	v, _ := vs.lookup(name)
	return v
}

// lookup is Get, and whether the table holds name at all: a subgraph's
// name held with no value still hides an enclosing graph's (scope).
func (vs *Values) lookup(name string) (*Value, bool) {
	if vs == nil {
		return nil, false
	}
	if vs.x != nil {
		if id := vs.x.lookup(name); id >= 0 {
			v := vs.byID[id]
			return v, v != nil
		}
	}
	v, ok := vs.byName[name]
	return v, ok
}

// set records v as the value named name.
func (vs *Values) set(name string, v *Value) {
	if vs.x != nil {
		if id := vs.x.lookup(name); id >= 0 {
			vs.byID[id] = v
			return
		}
	}
	if vs.byName == nil {
		vs.byName = map[string]*Value{}
	}
	vs.byName[name] = v
}

// newGraphIndex numbers the values of g, whose inferred values are vals.
func newGraphIndex(g *model.Graph, vals *Values) *graphIndex {
	x := numberGraph(g)
	x.fill(vals)
	return x
}

// numberGraph numbers the values of g, their values not yet filled in. It
// reads the graph alone, so that it can run while inference does
// (Measure).
func numberGraph(g *model.Graph) *graphIndex {
	nIn, nOut := 0, 0
	for _, n := range g.Nodes {
		nIn += len(n.Inputs)
		nOut += len(n.Outputs)
	}
	size := len(g.Inputs) + len(g.Initializers) + nOut + len(g.Outputs) + len(g.Sparse)
	x := &graphIndex{g: g, ids: newNameTable(size), names: make([]string, 0, size),
		in: make([]int32, 0, nIn), out: make([]int32, 0, nOut),
		inAt: make([]int32, 0, len(g.Nodes)+1), outAt: make([]int32, 0, len(g.Nodes)+1)}
	number := func(name string) int32 {
		if name == "" {
			return -1
		}
		id, slot, ok := x.ids.find(x.names, name)
		if ok {
			return id
		}
		id = int32(len(x.names))
		x.ids.slots[slot] = id
		x.names = append(x.names, name)
		x.ids.grow(x.names)
		return id
	}
	for _, in := range g.Inputs {
		number(in.Name)
	}
	for _, t := range g.Initializers {
		number(t.Name)
	}
	for _, n := range g.Nodes {
		x.inAt = append(x.inAt, int32(len(x.in)))
		x.outAt = append(x.outAt, int32(len(x.out)))
		for _, name := range n.Inputs {
			x.in = append(x.in, number(name))
		}
		for _, name := range n.Outputs {
			x.out = append(x.out, number(name))
		}
	}
	x.inAt = append(x.inAt, int32(len(x.in)))
	x.outAt = append(x.outAt, int32(len(x.out)))
	for _, o := range g.Outputs {
		number(o.Name)
	}
	// Last, so that the numbers above do not depend on them: sparse
	// initializers no node reads, which inference records all the same.
	for _, sp := range g.Sparse {
		if sp.Values != nil {
			number(sp.Values.Name)
		}
	}
	return x
}

// fill sets each numbered value to what inference found, vals.Get(name).
func (x *graphIndex) fill(vals *Values) {
	x.vals = make([]*Value, len(x.names))
	for id, name := range x.names {
		x.vals[id] = vals.Get(name)
	}
}

// lookup is the number of name, -1 for "" or a name the graph never
// mentions.
func (x *graphIndex) lookup(name string) int32 {
	if name == "" {
		return -1
	}
	id, _, _ := x.ids.find(x.names, name)
	return id
}

// ins and outs are the numbers of node i's inputs and outputs.
func (x *graphIndex) ins(i int) []int32  { return x.in[x.inAt[i]:x.inAt[i+1]] }
func (x *graphIndex) outs(i int) []int32 { return x.out[x.outAt[i]:x.outAt[i+1]] }

// value is the inferred value numbered id, nil for -1.
func (x *graphIndex) value(id int32) *Value {
	if id < 0 {
		return nil
	}
	return x.vals[id]
}

// staticSet tells which values of a graph take no activation memory: the
// initializers and sparse initializers, whatever inference knows
// statically (Value.Const) or found stored in the file (Value.Weight), and
// state kept between invocations (Value.State, counted apart as persistent
// bytes). Both memory views plan only the other tensors; a planner marks
// the outputs it folds as static too.
type staticSet struct {
	x      *graphIndex
	marked []bool // initializers and what a planner folded
}

// newStaticSet is the static set of g, whose numbered values are x.
func newStaticSet(g *model.Graph, x *graphIndex) *staticSet {
	s := &staticSet{x: x, marked: make([]bool, len(x.names))}
	for _, t := range g.Initializers {
		if id := x.lookup(t.Name); id >= 0 {
			s.marked[id] = true
		}
	}
	for _, sp := range g.Sparse {
		if sp.Values != nil {
			if id := x.lookup(sp.Values.Name); id >= 0 {
				s.marked[id] = true
			}
		}
	}
	return s
}

// has reports whether value id is static; -1 (an omitted input) is not.
func (s *staticSet) has(id int32) bool {
	if id < 0 {
		return false
	}
	if s.marked[id] {
		return true
	}
	v := s.x.vals[id]
	return v != nil && (v.Weight || v.State || v.Const() != nil)
}

// mark makes value id static.
func (s *staticSet) mark(id int32) {
	if id >= 0 {
		s.marked[id] = true
	}
}

// planStep is what both memory views do first at node i of the graph
// numbered x: every tensor the node reads, itself or through its
// subgraphs (planned with planBody into plan's bodyPeak and bodyArena),
// stays live through step i (touch); then the outputs that take no
// activation memory are marked static — all of them when the node folds
// (no subgraph, not random, at least one input, every input static), as a
// runtime computes it once at load time — and the others are appended to
// outs, which is returned, with whether the node holds a subgraph.
func planStep(plan *MemoryPlan, inf *Inference, x *graphIndex, static *staticSet, n *model.Node, i, depth int,
	bodyPeak, bodyArena map[int]int64, touch func(id int32), planBody func(*model.Graph, *Values) *MemoryPlan,
	outs []int32) ([]int32, bool) {
	ins := x.ins(i)
	for _, id := range ins {
		if id >= 0 {
			touch(id)
		}
	}
	var cond *Value
	if len(ins) > 0 {
		cond = x.value(ins[0])
	}
	hasBody := plan.bodies(n, i, depth, cond, inf.Subgraphs, bodyPeak, bodyArena,
		func(name string) {
			if id := x.lookup(name); id >= 0 {
				touch(id)
			}
		}, planBody)
	fold := !hasBody && !randomOps[n.Op]
	inputs := 0
	for _, id := range ins {
		if id < 0 {
			continue
		}
		inputs++
		if !static.has(id) {
			fold = false
		}
	}
	fold = fold && inputs > 0
	for _, id := range x.outs(i) {
		if id < 0 {
			continue
		}
		if fold || static.has(id) {
			static.mark(id)
			continue
		}
		outs = append(outs, id)
	}
	return outs, hasBody
}
