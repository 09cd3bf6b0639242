package measure

import (
	"fmt"
	"slices"

	"github.com/loadline/loadline/model"
)

// Activation memory, deployed view. Definition (README "Conventions",
// `loadline measure --help`): what an
// embedded runtime allocates, the graph view (memory.go) after these
// rewrites, each switchable in DeployOptions:
//
//   - FoldBN: a BatchNormalization whose input is a Conv's (or
//     ConvTranspose's) output read by nothing else is folded into that
//     convolution: the convolution's own output is never stored.
//   - FuseActivations: Relu, Clip, Sigmoid, HardSwish, LeakyRelu,
//     HardSigmoid and Tanh are fused into the node producing their input
//     when they are its only consumer (and that node is no view or
//     control-flow node): the producer writes the activated values. So is
//     a decomposed activation (decomposedActivation below): two or more
//     elementwise nodes that compute one tensor of the producer's shape and
//     dtype from the producer's output and constants alone, at least one of
//     them a nonlinearity, with nothing else reading the producer's output
//     or the group's intermediate tensors. That is how exporters write
//     SiLU/Swish (x·Sigmoid(x)), hard-swish (x·HardSigmoid(x), and
//     x·Relu6(x+3)/6 as Add, Clip, Mul and Div or ×1/6 in either order),
//     GELU (0.5·x·(1+Erf(x/√2)) and the Tanh approximation with Pow) and
//     Mish (x·Tanh(Softplus(x))).
//   - AliasViews: Reshape, Flatten, Squeeze, Unsqueeze and Identity alias
//     their input: one buffer, live from the first of them to the last use
//     of any. So do the nodes that copy nothing (noOpView): a Cast or
//     CastLike to the dtype its input already has, and an inference-mode
//     Dropout whose mask nobody reads. A fusion looks through any chain of
//     such views that nothing else reads (Conv → Cast → Relu, and
//     QuantizeLinear → Cast → Identity → DequantizeLinear as some exporters
//     write it, plan as without the views).
//   - FoldQDQ: a QuantizeLinear whose input is read by nothing else is fused
//     into its producer, which then writes the quantized tensor; a
//     DequantizeLinear aliases its quantized input, which its consumers
//     read directly. A quantized model's activations thus count at their
//     quantized dtype.
//   - InPlaceDepthwise (off by default): a depthwise convolution (group =
//     input channels = output channels) whose input buffer is read by
//     nothing after it writes its output over that buffer channel by
//     channel (MCUNetV2, Lin et al. 2021), when the output is no larger
//     than the input (padding can make it larger; that convolution is
//     left alone). The one-channel scratch the method needs is not counted.
//     The live bytes count the buffer at the input's size through the
//     convolution's step and at the output's after it; the arena keeps it
//     one block of the input's size, the output at the input's offset, until
//     the output dies (a runtime could free the tail sooner).
//
// A fused node, its producer and everything it fuses in run at the
// producer's step; the steps stay the file's node indices, so a fused
// node's step holds only what is live across it. Fusions need the fused
// node's other inputs to be known statically (a BatchNormalization's
// statistics, a Clip's bounds, a scale and zero point), and they chain:
// Conv → BatchNormalization → Clip → QuantizeLinear is one tensor, the
// int8 output. With every option off the deployed view is the graph view.

// DeployOptions switches the deployed view's rewrites on and off.
type DeployOptions struct {
	FoldBN           bool
	FuseActivations  bool
	AliasViews       bool
	FoldQDQ          bool
	InPlaceDepthwise bool
}

// DefaultDeployOptions has every rewrite on except InPlaceDepthwise, which
// needs a runtime that implements it.
func DefaultDeployOptions() DeployOptions {
	return DeployOptions{FoldBN: true, FuseActivations: true, AliasViews: true, FoldQDQ: true}
}

// fusableActivations are fused into their producer by FuseActivations.
var fusableActivations = map[string]bool{
	"Relu": true, "Clip": true, "Sigmoid": true, "HardSwish": true,
	"LeakyRelu": true, "HardSigmoid": true, "Tanh": true,
}

// viewOps alias their first input under AliasViews.
var viewOps = map[string]bool{
	"Reshape": true, "Flatten": true, "Squeeze": true, "Unsqueeze": true, "Identity": true,
}

// isView reports whether node n's first output is a view of its first
// input under AliasViews: a viewOps node, or one that copies nothing
// (noOpView).
func isView(n *model.Node, vals *Values) bool {
	return viewOps[n.Op] || noOpView(n, vals)
}

// noOpView reports whether n is a node exporters leave in a graph that
// changes nothing: a Cast or CastLike to the dtype its input already has,
// or a Dropout in inference mode (no training_mode input, or a false one)
// whose mask output nobody asked for.
func noOpView(n *model.Node, vals *Values) bool {
	if len(n.Inputs) == 0 || len(n.Outputs) == 0 || n.Outputs[0] == "" || storedOutputs(n) != 1 {
		return false
	}
	switch n.Op {
	case "Cast", "CastLike":
		in, out := vals.Get(n.Inputs[0]), vals.Get(n.Outputs[0])
		return in != nil && out != nil && in.Type.DType != model.Undefined && in.Type.DType == out.Type.DType
	case "Dropout":
		if len(n.Inputs) < 3 || n.Inputs[2] == "" {
			return true
		}
		v := vals.Get(n.Inputs[2])
		if v == nil {
			return false
		}
		x, ok := v.Const().KnownInts()
		return ok && len(x) == 1 && x[0] == 0
	}
	return false
}

// dtensor is one tensor of the deployed view, the value numbered id in the
// graph's index. A tensor whose parent is set shares its root's buffer; a
// dropped tensor is never stored.
type dtensor struct {
	id          int32
	buf         int32 // 1 + a root buffer's number among the bufInfos; 0 for none yet
	dropped     bool
	isOut       bool  // root buffers only: the buffer holds a graph output
	first, last int32 // steps: node indices of one graph
	producer    int32 // node whose output it is; -1 for a graph input
	head        int32 // node heading its fused group (the step it is written at)
	parent      *dtensor
}

// bufInfo is what the deployed view learns of a root buffer once
// lifetimes are gathered: kept apart from the tensors' records, as few
// tensors are roots.
type bufInfo struct {
	size   int64
	reason string
	segs   []Lifetime // the tensors the buffer holds, in turn
}

func (t *dtensor) root() *dtensor {
	for t.parent != nil {
		t = t.parent
	}
	return t
}

// readerLists holds, per value number, the nodes reading the value in node
// order, each node once (nested subgraphs' reads count at their
// control-flow node): one list for the graph, linked through entries.
type readerLists struct {
	head, tail []int32 // per value, its first and last entry; -1 for none
	count      []int32 // per value, how many nodes read it
	entries    []readerEntry
}

type readerEntry struct{ node, next int32 }

func newReaderLists(values, reads int) *readerLists {
	r := &readerLists{head: make([]int32, values), tail: make([]int32, values), count: make([]int32, values),
		entries: make([]readerEntry, 0, reads)}
	for i := range r.head {
		r.head[i], r.tail[i] = -1, -1
	}
	return r
}

// add records that node i reads value id, once however often it does.
func (r *readerLists) add(id int32, i int) {
	if id < 0 {
		return
	}
	if t := r.tail[id]; t >= 0 && r.entries[t].node == int32(i) {
		return
	}
	r.entries = append(r.entries, readerEntry{node: int32(i), next: -1})
	e := int32(len(r.entries) - 1)
	if t := r.tail[id]; t >= 0 {
		r.entries[t].next = e
	} else {
		r.head[id] = e
	}
	r.tail[id] = e
	r.count[id]++
}

// reads reports whether node i reads value id.
func (r *readerLists) reads(id int32, i int) bool {
	for e := r.head[id]; e >= 0; e = r.entries[e].next {
		if r.entries[e].node == int32(i) {
			return true
		}
	}
	return false
}

// PlanDeployed computes the deployed view of the activation memory of the
// inferred model's main graph.
func PlanDeployed(inf *Inference, opts DeployOptions) *MemoryPlan {
	return planDeployed(inf, opts, true)
}

// planDeployed is PlanDeployed, filling MemoryPlan.BufferOf only when
// buffers is set (the per-layer view reads it; on a large graph it is a
// map of every fused or aliased tensor, which the figures do not need).
func planDeployed(inf *Inference, opts DeployOptions, buffers bool) *MemoryPlan {
	return planDeployedGraph(inf, inf.Model.Graph, inf.Values, opts, buffers, 0)
}

func planDeployedGraph(inf *Inference, g *model.Graph, vals *Values, opts DeployOptions, buffers bool, depth int) *MemoryPlan {
	plan := &MemoryPlan{}
	steps := max(1, len(g.Nodes))
	lastStep := steps - 1

	x := inf.index(g, vals)
	static := newStaticSet(g, x)

	// Readers of each value: the nodes reading it (once per node, nested
	// subgraphs included) and, in readers, the graph's outputs too.
	readBy := newReaderLists(len(x.names), len(x.in))
	for i, n := range g.Nodes {
		for _, id := range x.ins(i) {
			readBy.add(id, i)
		}
		read := func(name string) { readBy.add(x.lookup(name), i) }
		for _, a := range n.Attrs {
			if a.Graph != nil {
				forEachNestedInput(a.Graph, read)
			}
			for _, sg := range a.Graphs {
				if sg != nil {
					forEachNestedInput(sg, read)
				}
			}
		}
	}
	readers := slices.Clone(readBy.count)
	isOutput := make([]bool, len(x.names))
	for _, o := range g.Outputs {
		if id := x.lookup(o.Name); id >= 0 {
			readers[id]++
			isOutput[id] = true
		}
	}

	views := make([]bool, len(g.Nodes))
	if opts.AliasViews {
		for i, n := range g.Nodes {
			views[i] = isView(n, vals)
		}
	}
	var regions []*actRegion
	if opts.FuseActivations {
		regions = decomposedActivations(g, x, static, readBy, isOutput, views)
	}

	recs := make([]*dtensor, len(x.names))
	var fused []fusion // dropped tensors and what was written instead, in turn
	order := make([]*dtensor, 0, len(g.Inputs)+len(x.out))
	groupOut := make([]*dtensor, len(g.Nodes)) // head node → its group's stored output
	add := func(t *dtensor) {
		if old := recs[t.id]; old != nil {
			old.last = max(old.last, t.first)
		}
		recs[t.id] = t
		order = append(order, t)
	}
	for _, in := range g.Inputs {
		if id := x.lookup(in.Name); id >= 0 && !static.has(id) {
			add(&dtensor{id: id, producer: -1, head: -1})
		}
	}

	bodyPeak := map[int]int64{}
	bodyArena := map[int]int64{}
	hasBody := make([]bool, len(g.Nodes))
	st := &deployState{g: g, x: x, recs: recs, readers: readers, isOutput: isOutput, static: static,
		hasBody: hasBody, views: views, groupOut: groupOut, add: add, fused: &fused}
	st.slab = make([]dtensor, 0, len(x.out))
	var outs []int32
	for i, n := range g.Nodes {
		outs, hasBody[i] = planStep(plan, inf, x, static, n, i, depth, bodyPeak, bodyArena,
			func(id int32) {
				if recs[id] != nil {
					recs[id].last = int32(i)
				}
			},
			func(body *model.Graph, bv *Values) *MemoryPlan {
				return planDeployedGraph(inf, body, bv, opts, buffers, depth+1)
			}, outs[:0])
		first := x.outs(i)
		sole := len(outs) == 1 && len(first) > 0 && outs[0] == first[0]
		if regions != nil {
			if r := regions[i]; r != nil && sole && st.region(r, i, outs[0]) {
				continue
			}
		}
		if sole && storedOutputs(n) == 1 && st.rewrite(i, n, outs[0], opts) {
			continue
		}
		for _, id := range outs {
			t := st.newTensor(dtensor{id: id, first: int32(i), last: int32(i), producer: int32(i), head: int32(i)})
			add(t)
			groupOut[i] = t
		}
	}
	for _, o := range g.Outputs {
		if id := x.lookup(o.Name); id >= 0 && recs[id] != nil {
			recs[id].last = int32(lastStep)
		}
	}

	// Gather each buffer's lifetime over the tensors sharing it.
	nRoots := 0
	for _, t := range order {
		if !t.dropped && t.root() == t {
			nRoots++
		}
	}
	roots := make([]*dtensor, 0, nRoots)
	bufs := make([]bufInfo, 0, nRoots) // by root, in turn
	for _, t := range order {
		if t.dropped {
			continue
		}
		r := t.root()
		if r == t {
			roots = append(roots, t)
			size, reason := tensorBytes(x.vals[t.id])
			bufs = append(bufs, bufInfo{size: size, reason: reason})
			t.buf = int32(len(bufs))
			continue
		}
		r.first, r.last = min(r.first, t.first), max(r.last, t.last)
	}
	for _, t := range order {
		if !t.dropped && isOutput[t.id] {
			t.root().last = int32(lastStep)
			t.root().isOut = true
		}
	}

	// Each buffer's segments, its own lifetime at first, are listed only
	// once a buffer takes over another (in-place depthwise): until then
	// the segments live are the buffers, and one list serves both.
	segsMade := false
	makeSegs := func() {
		if segsMade {
			return
		}
		segsMade = true
		segs := make([]Lifetime, len(roots))
		for k, r := range roots {
			segs[k] = Lifetime{Name: x.names[r.id], Size: bufs[k].size, First: int(r.first), Last: int(r.last)}
			bufs[k].segs = segs[k : k+1 : k+1]
		}
	}
	// infoOf is the number of t's bufInfo, a zero one made for a buffer
	// not gathered above (one that was dropped).
	infoOf := func(t *dtensor) int {
		if t.buf == 0 {
			bufs = append(bufs, bufInfo{})
			t.buf = int32(len(bufs))
		}
		return int(t.buf - 1)
	}

	if opts.InPlaceDepthwise {
		for i, n := range g.Nodes {
			y := groupOut[i]
			var xt *dtensor
			if ins := x.ins(i); len(ins) > 0 && ins[0] >= 0 {
				xt = recs[ins[0]]
			}
			if n.Op != "Conv" || storedOutputs(n) != 1 || y == nil || xt == nil || !isDepthwise(n, vals) {
				continue
			}
			rx, ry := xt.root(), y.root()
			kx, ky := infoOf(rx), infoOf(ry)
			bx, by := &bufs[kx], &bufs[ky]
			if rx == ry || int(rx.last) != i || int(ry.first) != i || bx.reason != "" || by.reason != "" || rx.isOut || by.size > bx.size {
				continue
			}
			// The output takes over the input's buffer: at step i the
			// buffer counts once, at the input's size; after it, at the
			// output's. In the arena it stays one block of the input's
			// size until the output dies.
			makeSegs()
			for _, sg := range by.segs {
				if sg.First == i {
					sg.First = i + 1
				}
				if sg.First <= sg.Last {
					bx.segs = append(bx.segs, sg)
				}
			}
			ry.parent, by.segs = rx, nil
			rx.last = max(rx.last, ry.last)
		}
	}

	lts := make([]Lifetime, 0, len(roots))
	var live []Lifetime
	if segsMade {
		live = make([]Lifetime, 0, len(roots))
	}
	for _, r := range roots {
		if r.parent != nil {
			continue // merged in place into another buffer
		}
		name := x.names[r.id]
		b := &bufs[r.buf-1]
		if b.reason != "" {
			u := Unresolved{Node: name, Reason: fmt.Sprintf("memory unknown: %s (tensor %q)", b.reason, name)}
			if r.producer >= 0 {
				n := g.Nodes[r.producer]
				u.Node, u.Op = nodeLabel(n, int(r.producer)), n.Op
			}
			plan.Unresolved = append(plan.Unresolved, u)
			continue
		}
		lts = append(lts, Lifetime{Name: name, Size: b.size, First: int(r.first), Last: int(r.last)})
		if segsMade {
			live = append(live, b.segs...)
		}
	}
	// Tensors computed from constants at load time and held for the whole
	// run (static.go), as in the graph view.
	held, unres := heldConstants(inf, g, vals, steps)
	lts = append(lts, held...)
	if segsMade {
		live = append(live, held...)
	} else {
		live = lts
	}
	plan.Unresolved = append(plan.Unresolved, unres...)
	// Where each tensor's values end up: a view or in-place output in its
	// root's buffer, a fused-away tensor in the buffer of what replaced it.
	if buffers {
		plan.BufferOf = bufferOf(x, order, fused, recs)
	}
	plan.finish(g, steps, live, lts, bodyPeak, bodyArena, buffers && depth == 0)
	return plan
}

// bufferOf maps each tensor of the graph numbered x that shares another's
// buffer to the name of that buffer's placement (MemoryPlan.BufferOf), nil
// when none does.
func bufferOf(x *graphIndex, order []*dtensor, fused []fusion, recs []*dtensor) map[string]string {
	bufferOf := map[string]string{}
	for _, t := range order {
		if r := t.root(); r != t && !t.dropped {
			bufferOf[x.names[t.id]] = x.names[r.id]
		}
	}
	if len(fused) > 0 {
		into := make(map[int32]int32, len(fused))
		for _, f := range fused {
			into[f.from] = f.to
		}
		for _, f := range fused {
			to := f.from
			for k := 0; k < len(into); k++ {
				next, ok := into[to]
				if !ok {
					break
				}
				to = next
			}
			if r := recs[to]; r != nil && !r.dropped {
				bufferOf[x.names[f.from]] = x.names[r.root().id]
			}
		}
	}
	if len(bufferOf) == 0 {
		return nil
	}
	return bufferOf
}

// fusion is a tensor the deployed view dropped (from) and the tensor
// written instead (to).
type fusion struct{ from, to int32 }

// deployState is what the deployed view's rewrites read and change while
// planDeployedGraph walks the nodes.
type deployState struct {
	g        *model.Graph
	x        *graphIndex
	recs     []*dtensor
	readers  []int32
	isOutput []bool
	static   *staticSet
	hasBody  []bool
	views    []bool // views[i]: node i's output aliases its input
	groupOut []*dtensor
	add      func(*dtensor)
	fused    *[]fusion
	// slab holds the records of node outputs, taken one after another
	// (newTensor): one allocation each was most of this pass's on a large
	// graph. Sized for every output; were it ever to grow, the records
	// already taken stay where they are, as nothing reads them through it.
	slab []dtensor
}

// newTensor is a record of the graph's tensors holding t.
func (st *deployState) newTensor(t dtensor) *dtensor {
	st.slab = append(st.slab, t)
	return &st.slab[len(st.slab)-1]
}

// fusable returns the buffer a node reading x can be fused into: x itself,
// or the tensor under a chain of views down to x that nothing else reads,
// with the tensors of the chain. The buffer must be a node's only stored
// output, read by nothing else (but the reading node through the chain;
// with shared, x may have other readers, which the caller vouches for) and
// no graph output, made by a node that is no view and holds no subgraph.
func (st *deployState) fusable(x *dtensor, shared bool) (*dtensor, []*dtensor, bool) {
	var chain []*dtensor
	t := x
	for t.parent != nil {
		if (t != x || !shared) && (st.readers[t.id] != 1 || st.isOutput[t.id]) {
			return nil, nil, false
		}
		if t.dropped || t.producer < 0 || !st.views[t.producer] {
			return nil, nil, false
		}
		chain = append(chain, t)
		t = t.parent
	}
	if t.dropped || t.producer < 0 || st.isOutput[t.id] || ((t != x || !shared) && st.readers[t.id] != 1) {
		return nil, nil, false
	}
	if p := st.g.Nodes[t.producer]; st.views[t.producer] || viewOps[p.Op] || st.hasBody[t.producer] || storedOutputs(p) != 1 {
		return nil, nil, false
	}
	return t, chain, true
}

// fuseInto drops root and the views over it and records out, made by node
// i, as written at root's step in root's group instead.
func (st *deployState) fuseInto(root *dtensor, chain []*dtensor, out int32, i int) {
	root.dropped = true
	*st.fused = append(*st.fused, fusion{root.id, out})
	for _, c := range chain {
		c.dropped = true
		*st.fused = append(*st.fused, fusion{c.id, out})
	}
	t := st.newTensor(dtensor{id: out, first: root.first, last: root.first, producer: int32(i), head: root.head})
	st.add(t)
	st.groupOut[root.head] = t
}

// rewrite applies the deployed view's rewrites to node n (step i), whose one
// stored output is out. It reports whether it handled the output.
func (st *deployState) rewrite(i int, n *model.Node, out int32, opts DeployOptions) bool {
	ins := st.x.ins(i)
	if len(ins) == 0 || ins[0] < 0 {
		return false
	}
	x := st.recs[ins[0]]
	if x == nil || x.dropped {
		return false
	}
	othersStatic := true
	for _, id := range ins[1:] {
		if id >= 0 && !st.static.has(id) {
			othersStatic = false
		}
	}
	alias := func() bool {
		st.add(st.newTensor(dtensor{id: out, first: int32(i), last: int32(i), producer: int32(i), head: int32(i), parent: x}))
		return true
	}
	// fuse writes out at x's step instead of x, when nothing else reads x.
	fuse := func() bool {
		if !othersStatic {
			return false
		}
		root, chain, ok := st.fusable(x, false)
		if !ok {
			return false
		}
		st.fuseInto(root, chain, out, i)
		return true
	}
	switch {
	case opts.FoldBN && n.Op == "BatchNormalization":
		if root, _, ok := st.fusable(x, false); ok && root.producer == root.head {
			if op := st.g.Nodes[root.producer].Op; op == "Conv" || op == "ConvTranspose" {
				return fuse()
			}
		}
	case opts.FuseActivations && fusableActivations[n.Op]:
		return fuse()
	case opts.FoldQDQ && n.Op == "QuantizeLinear":
		return fuse()
	case opts.FoldQDQ && n.Op == "DequantizeLinear" && othersStatic:
		return alias()
	case opts.AliasViews && st.views[i]:
		return alias()
	}
	return false
}

// region handles node i, a member of a decomposed activation r, whose one
// stored output is out. At the group's first member it decides whether the
// group fuses into the producer of its input; when it does, the members'
// outputs are never stored and the last one's is written at the
// producer's step. It reports whether it handled the output.
func (st *deployState) region(r *actRegion, i int, out int32) bool {
	if r.state == 0 {
		r.state = -1
		if x := st.recs[r.x]; x != nil {
			if root, chain, ok := st.fusable(x, true); ok {
				r.state, r.root, r.chain = 1, root, chain
			}
		}
	}
	if r.state < 0 {
		return false
	}
	if i == r.last {
		st.fuseInto(r.root, r.chain, out, i)
	}
	return true
}

// actRegion is a decomposed activation: the nodes members, which compute
// the one tensor made by node last from x and constants alone.
type actRegion struct {
	x     int32
	last  int
	state int8 // 0 undecided, 1 fused, -1 left alone
	root  *dtensor
	chain []*dtensor
}

// regionOps may make up a decomposed activation: elementwise arithmetic and
// the nonlinearities exporters decompose activations into.
var regionOps = map[string]bool{
	"Add": true, "Sub": true, "Mul": true, "Div": true, "Pow": true, "Neg": true, "Min": true, "Max": true, "Sqrt": true,
	"Sigmoid": true, "HardSigmoid": true, "Clip": true, "Relu": true, "Tanh": true, "Erf": true, "Softplus": true, "Exp": true,
}

// regionNonlinear are the regionOps at least one of which a decomposed
// activation holds; without one a group of nodes is arithmetic, which the
// deployed view does not fuse.
var regionNonlinear = map[string]bool{
	"Sigmoid": true, "HardSigmoid": true, "Clip": true, "Relu": true, "Tanh": true, "Erf": true, "Softplus": true,
	"Min": true, "Max": true,
}

// Bounds of the search for decomposed activations: nodes in a group, and
// nodes looked at after the producer.
const (
	maxRegionNodes = 16
	maxRegionScan  = 64
)

// decomposedActivations finds the decomposed activations of g (see the
// definition at the top of this file): out[i] is the group node i is a
// member of, nil for none. readBy lists, per value, the nodes reading it
// (nested subgraphs included, at the control-flow node).
func decomposedActivations(g *model.Graph, x *graphIndex, static *staticSet, readBy *readerLists, isOutput []bool, views []bool) []*actRegion {
	out := make([]*actRegion, len(g.Nodes))
	var buf []int // one candidate's members at a time, the storage reused
	for p, n := range g.Nodes {
		if out[p] != nil || storedOutputs(n) != 1 || len(n.Outputs) == 0 || views[p] {
			continue
		}
		xid := x.outs(p)[0]
		if xid < 0 || static.has(xid) || isOutput[xid] {
			continue
		}
		xv := x.vals[xid]
		if xv == nil || !xv.shapeKnown() {
			continue
		}
		members, last, ok := growRegion(g, p, xid, xv, x, static, readBy, isOutput, buf)
		if cap(members) > cap(buf) {
			buf = members[:0]
		}
		if !ok {
			continue
		}
		r := &actRegion{x: xid, last: last}
		for _, j := range members {
			if out[j] != nil {
				r = nil
				break
			}
		}
		if r == nil {
			continue
		}
		for _, j := range members {
			out[j] = r
		}
	}
	return out
}

// growRegion collects the nodes after node p that compute from x (node p's
// output) and constants alone, and checks that they form a decomposed
// activation: at least two members, one a nonlinearity, every tensor of
// the group of x's shape and dtype, x and every intermediate tensor read by
// members only, and exactly one result, made by the last member. The
// members are appended to buf, whose storage they may share.
func growRegion(g *model.Graph, p int, xid int32, xv *Value, x *graphIndex, static *staticSet,
	readBy *readerLists, isOutput []bool, buf []int) (members []int, last int, ok bool) {
	members = buf[:0]
	// A group holds at most maxRegionNodes + 1 values: short lists, kept
	// on the stack (this runs once for most nodes of a graph).
	var inBuf, escBuf, readBuf [maxRegionNodes + 2]int32
	inRegion := append(inBuf[:0], xid)
	pending := int(readBy.count[xid])
	escapes := escBuf[:0]
	nonlinear := false
	reads := readBuf[:0]
	for j := p + 1; j < len(g.Nodes) && j <= p+maxRegionScan && pending > 0; j++ {
		n := g.Nodes[j]
		reads = reads[:0]
		for _, v := range inRegion {
			if readBy.reads(v, j) {
				reads = append(reads, v)
			}
		}
		if len(reads) == 0 {
			continue
		}
		pending -= len(reads)
		member := regionOps[n.Op] && storedOutputs(n) == 1 && len(n.Outputs) == 1 && n.Outputs[0] != "" && !hasSubgraph(n)
		for _, in := range x.ins(j) {
			if in >= 0 && !slices.Contains(inRegion, in) && !static.has(in) {
				member = false
			}
		}
		if member {
			o := x.outs(j)[0]
			ov := x.vals[o]
			if ov == nil || !ov.shapeKnown() || ov.Type.DType != xv.Type.DType || !ov.Type.Shape.Equal(xv.Type.Shape) {
				member = false
			} else {
				members = append(members, j)
				if !slices.Contains(inRegion, o) {
					inRegion = append(inRegion, o)
				}
				pending += int(readBy.count[o])
				nonlinear = nonlinear || regionNonlinear[n.Op]
				if isOutput[o] && !slices.Contains(escapes, o) {
					escapes = append(escapes, o)
				}
				if len(members) > maxRegionNodes {
					return nil, 0, false
				}
			}
		}
		if !member {
			for _, v := range reads {
				if !slices.Contains(escapes, v) {
					escapes = append(escapes, v)
				}
			}
		}
	}
	if pending > 0 || len(members) < 2 || !nonlinear || slices.Contains(escapes, xid) || len(escapes) != 1 {
		return nil, 0, false
	}
	last = members[len(members)-1]
	if !slices.Contains(escapes, x.outs(last)[0]) {
		return nil, 0, false
	}
	return members, last, true
}

// hasSubgraph reports whether a node holds a subgraph.
func hasSubgraph(n *model.Node) bool {
	for _, a := range n.Attrs {
		if a.Graph != nil || len(a.Graphs) > 0 {
			return true
		}
	}
	return false
}

// storedOutputs counts a node's non-empty outputs.
func storedOutputs(n *model.Node) int {
	c := 0
	for _, o := range n.Outputs {
		if o != "" {
			c++
		}
	}
	return c
}

// isDepthwise reports whether a Conv is depthwise with multiplier 1: group
// greater than 1 and equal to its input's and its output's channels.
func isDepthwise(n *model.Node, vals *Values) bool {
	a := n.Attr("group")
	if a == nil || a.Int <= 1 {
		return false
	}
	in, out := vals.Get(n.Input(0)), vals.Get(n.Outputs[0])
	if !in.shapeKnown() || !out.shapeKnown() || len(in.Type.Shape) < 3 || len(out.Type.Shape) < 3 {
		return false
	}
	c, oc := in.Type.Shape[1], out.Type.Shape[1]
	return c.IsKnown() && oc.IsKnown() && c.Value == a.Int && oc.Value == a.Int
}
