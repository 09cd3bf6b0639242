package measure

import (
	"fmt"

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
func isView(n *model.Node, vals map[string]*Value) bool {
	return viewOps[n.Op] || noOpView(n, vals)
}

// noOpView reports whether n is a node exporters leave in a graph that
// changes nothing: a Cast or CastLike to the dtype its input already has,
// or a Dropout in inference mode (no training_mode input, or a false one)
// whose mask output nobody asked for.
func noOpView(n *model.Node, vals map[string]*Value) bool {
	if len(n.Inputs) == 0 || len(n.Outputs) == 0 || n.Outputs[0] == "" || storedOutputs(n) != 1 {
		return false
	}
	switch n.Op {
	case "Cast", "CastLike":
		in, out := vals[n.Inputs[0]], vals[n.Outputs[0]]
		return in != nil && out != nil && in.Type.DType != model.Undefined && in.Type.DType == out.Type.DType
	case "Dropout":
		if len(n.Inputs) < 3 || n.Inputs[2] == "" {
			return true
		}
		v := vals[n.Inputs[2]]
		if v == nil {
			return false
		}
		x, ok := v.Const().KnownInts()
		return ok && len(x) == 1 && x[0] == 0
	}
	return false
}

// dtensor is one tensor of the deployed view. A tensor whose parent is set
// shares its root's buffer; a dropped tensor is never stored.
type dtensor struct {
	name        string
	first, last int
	producer    int // node whose output it is; -1 for a graph input
	head        int // node heading its fused group (the step it is written at)
	dropped     bool
	parent      *dtensor
	// Root buffers only, set once lifetimes are gathered.
	size   int64
	reason string
	isOut  bool       // the buffer holds a graph output
	segs   []Lifetime // the tensors the buffer holds, in turn
}

func (t *dtensor) root() *dtensor {
	for t.parent != nil {
		t = t.parent
	}
	return t
}

// PlanDeployed computes the deployed view of the activation memory of the
// inferred model's main graph.
func PlanDeployed(inf *Inference, opts DeployOptions) *MemoryPlan {
	return planDeployedGraph(inf.Model.Graph, inf.Values, inf.Subgraphs, opts, 0)
}

func planDeployedGraph(g *model.Graph, vals map[string]*Value, subs map[*model.Graph]map[string]*Value, opts DeployOptions, depth int) *MemoryPlan {
	plan := &MemoryPlan{}
	steps := max(1, len(g.Nodes))
	lastStep := steps - 1

	static, isStatic := staticValues(g, vals)

	// Readers of each value: the nodes reading it (once per node, nested
	// subgraphs included) and the graph's outputs.
	readers := make(map[string]int, len(g.Nodes))
	readBy := make(map[string][]int, len(g.Nodes))
	isOutput := map[string]bool{}
	for i, n := range g.Nodes {
		read := func(name string) {
			// A node that reads a value twice is one reader: the
			// value's last reader is then this node already.
			if r := readBy[name]; name != "" && (len(r) == 0 || r[len(r)-1] != i) {
				readers[name]++
				readBy[name] = append(r, i)
			}
		}
		for _, name := range n.Inputs {
			read(name)
		}
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
	for _, o := range g.Outputs {
		readers[o.Name]++
		isOutput[o.Name] = true
	}

	views := make([]bool, len(g.Nodes))
	if opts.AliasViews {
		for i, n := range g.Nodes {
			views[i] = isView(n, vals)
		}
	}
	var regions map[int]*actRegion
	if opts.FuseActivations {
		regions = decomposedActivations(g, vals, isStatic, readBy, isOutput, views)
	}

	recs := make(map[string]*dtensor, len(g.Nodes)+len(g.Inputs))
	fusedInto := map[string]string{} // a dropped tensor → the tensor written instead
	var order []*dtensor
	groupOut := make([]*dtensor, len(g.Nodes)) // head node → its group's stored output
	add := func(t *dtensor) {
		if old := recs[t.name]; old != nil {
			old.last = max(old.last, t.first)
		}
		recs[t.name] = t
		order = append(order, t)
	}
	for _, in := range g.Inputs {
		if in.Name == "" || isStatic(in.Name) {
			continue
		}
		add(&dtensor{name: in.Name, producer: -1, head: -1})
	}

	bodyPeak := map[int]int64{}
	bodyArena := map[int]int64{}
	hasBody := make([]bool, len(g.Nodes))
	st := &deployState{g: g, recs: recs, readers: readers, isOutput: isOutput, isStatic: isStatic,
		hasBody: hasBody, views: views, groupOut: groupOut, add: add, fusedInto: fusedInto}
	for i, n := range g.Nodes {
		for _, name := range n.Inputs {
			if r := recs[name]; r != nil && name != "" {
				r.last = i
			}
		}
		hasBody[i] = plan.bodies(n, i, depth, vals, subs, bodyPeak, bodyArena,
			func(name string) {
				if r := recs[name]; r != nil {
					r.last = i
				}
			},
			func(body *model.Graph, bv map[string]*Value) *MemoryPlan {
				return planDeployedGraph(body, bv, subs, opts, depth+1)
			})
		fold := !hasBody[i] && !randomOps[n.Op]
		inputs := 0
		for _, name := range n.Inputs {
			if name == "" {
				continue
			}
			inputs++
			if !isStatic(name) {
				fold = false
			}
		}
		fold = fold && inputs > 0
		var outs []string
		for _, name := range n.Outputs {
			if name == "" {
				continue
			}
			if fold || isStatic(name) {
				static[name] = true
				continue
			}
			outs = append(outs, name)
		}
		if r := regions[i]; r != nil && len(outs) == 1 && outs[0] == n.Outputs[0] && st.region(r, i, outs[0]) {
			continue
		}
		if len(outs) == 1 && storedOutputs(n) == 1 && outs[0] == n.Outputs[0] && st.rewrite(i, n, outs[0], opts) {
			continue
		}
		for _, name := range outs {
			t := &dtensor{name: name, first: i, last: i, producer: i, head: i}
			add(t)
			groupOut[i] = t
		}
	}
	for _, o := range g.Outputs {
		if r := recs[o.Name]; r != nil {
			r.last = lastStep
		}
	}

	// Gather each buffer's lifetime over the tensors sharing it.
	var roots []*dtensor
	for _, t := range order {
		if t.dropped {
			continue
		}
		r := t.root()
		if r == t {
			roots = append(roots, t)
			t.size, t.reason = tensorBytes(vals[t.name])
			continue
		}
		r.first, r.last = min(r.first, t.first), max(r.last, t.last)
	}
	for _, t := range order {
		if !t.dropped && isOutput[t.name] {
			t.root().last = lastStep
			t.root().isOut = true
		}
	}

	segs := make([]Lifetime, len(roots))
	for k, r := range roots {
		segs[k] = Lifetime{Name: r.name, Size: r.size, First: r.first, Last: r.last}
		r.segs = segs[k : k+1 : k+1]
	}

	if opts.InPlaceDepthwise {
		for i, n := range g.Nodes {
			y := groupOut[i]
			x := recs[n.Input(0)]
			if n.Op != "Conv" || storedOutputs(n) != 1 || y == nil || x == nil || !isDepthwise(n, vals) {
				continue
			}
			rx, ry := x.root(), y.root()
			if rx == ry || rx.last != i || ry.first != i || rx.reason != "" || ry.reason != "" || rx.isOut || ry.size > rx.size {
				continue
			}
			// The output takes over the input's buffer: at step i the
			// buffer counts once, at the input's size; after it, at the
			// output's. In the arena it stays one block of the input's
			// size until the output dies.
			for _, sg := range ry.segs {
				if sg.First == i {
					sg.First = i + 1
				}
				if sg.First <= sg.Last {
					rx.segs = append(rx.segs, sg)
				}
			}
			ry.parent, ry.segs = rx, nil
			rx.last = max(rx.last, ry.last)
		}
	}

	var live, lts []Lifetime
	for _, r := range roots {
		if r.parent != nil {
			continue // merged in place into another buffer
		}
		if r.reason != "" {
			u := Unresolved{Node: r.name, Reason: fmt.Sprintf("memory unknown: %s (tensor %q)", r.reason, r.name)}
			if r.producer >= 0 {
				n := g.Nodes[r.producer]
				u.Node, u.Op = nodeLabel(n, r.producer), n.Op
			}
			plan.Unresolved = append(plan.Unresolved, u)
			continue
		}
		lts = append(lts, Lifetime{Name: r.name, Size: r.size, First: r.first, Last: r.last})
		live = append(live, r.segs...)
	}
	// Where each tensor's values end up: a view or in-place output in its
	// root's buffer, a fused-away tensor in the buffer of what replaced it.
	bufferOf := map[string]string{}
	for _, t := range order {
		if r := t.root(); r != t && !t.dropped {
			bufferOf[t.name] = r.name
		}
	}
	for name := range fusedInto {
		to := name
		for k := 0; k < len(fusedInto) && fusedInto[to] != ""; k++ {
			to = fusedInto[to]
		}
		if r := recs[to]; r != nil && !r.dropped {
			bufferOf[name] = r.root().name
		}
	}
	if len(bufferOf) > 0 {
		plan.BufferOf = bufferOf
	}
	plan.finish(g, steps, live, lts, bodyPeak, bodyArena)
	return plan
}

// deployState is what the deployed view's rewrites read and change while
// planDeployedGraph walks the nodes.
type deployState struct {
	g         *model.Graph
	recs      map[string]*dtensor
	readers   map[string]int
	isOutput  map[string]bool
	isStatic  func(string) bool
	hasBody   []bool
	views     []bool // views[i]: node i's output aliases its input
	groupOut  []*dtensor
	add       func(*dtensor)
	fusedInto map[string]string
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
		if (t != x || !shared) && (st.readers[t.name] != 1 || st.isOutput[t.name]) {
			return nil, nil, false
		}
		if t.dropped || t.producer < 0 || !st.views[t.producer] {
			return nil, nil, false
		}
		chain = append(chain, t)
		t = t.parent
	}
	if t.dropped || t.producer < 0 || st.isOutput[t.name] || ((t != x || !shared) && st.readers[t.name] != 1) {
		return nil, nil, false
	}
	if p := st.g.Nodes[t.producer]; st.views[t.producer] || viewOps[p.Op] || st.hasBody[t.producer] || storedOutputs(p) != 1 {
		return nil, nil, false
	}
	return t, chain, true
}

// fuseInto drops root and the views over it and records out, made by node
// i, as written at root's step in root's group instead.
func (st *deployState) fuseInto(root *dtensor, chain []*dtensor, out string, i int) {
	root.dropped = true
	st.fusedInto[root.name] = out
	for _, c := range chain {
		c.dropped = true
		st.fusedInto[c.name] = out
	}
	t := &dtensor{name: out, first: root.first, last: root.first, producer: i, head: root.head}
	st.add(t)
	st.groupOut[root.head] = t
}

// rewrite applies the deployed view's rewrites to node n (step i), whose one
// stored output is out. It reports whether it handled the output.
func (st *deployState) rewrite(i int, n *model.Node, out string, opts DeployOptions) bool {
	x := st.recs[n.Input(0)]
	if x == nil || x.dropped {
		return false
	}
	othersStatic := true
	for j, name := range n.Inputs {
		if j > 0 && name != "" && !st.isStatic(name) {
			othersStatic = false
		}
	}
	alias := func() bool {
		st.add(&dtensor{name: out, first: i, last: i, producer: i, head: i, parent: x})
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
func (st *deployState) region(r *actRegion, i int, out string) bool {
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
	x     string
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
// definition at the top of this file), keyed by the index of each member
// node. readBy lists, per value, the nodes reading it (nested subgraphs
// included, at the control-flow node).
func decomposedActivations(g *model.Graph, vals map[string]*Value, isStatic func(string) bool,
	readBy map[string][]int, isOutput map[string]bool, views []bool) map[int]*actRegion {
	out := map[int]*actRegion{}
	for p, n := range g.Nodes {
		if _, claimed := out[p]; claimed || storedOutputs(n) != 1 || len(n.Outputs) == 0 || views[p] {
			continue
		}
		x := n.Outputs[0]
		if x == "" || isStatic(x) || isOutput[x] {
			continue
		}
		xv := vals[x]
		if xv == nil || !xv.shapeKnown() {
			continue
		}
		members, last, ok := growRegion(g, p, x, xv, vals, isStatic, readBy, isOutput)
		if !ok {
			continue
		}
		r := &actRegion{x: x, last: last}
		for _, j := range members {
			if _, taken := out[j]; taken {
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
// members only, and exactly one result, made by the last member.
func growRegion(g *model.Graph, p int, x string, xv *Value, vals map[string]*Value, isStatic func(string) bool,
	readBy map[string][]int, isOutput map[string]bool) (members []int, last int, ok bool) {
	inRegion := map[string]bool{x: true}
	pending := len(readBy[x])
	escapes := map[string]bool{}
	nonlinear := false
	for j := p + 1; j < len(g.Nodes) && j <= p+maxRegionScan && pending > 0; j++ {
		n := g.Nodes[j]
		var reads []string
		for v := range inRegion {
			if slicesContains(readBy[v], j) {
				reads = append(reads, v)
			}
		}
		if len(reads) == 0 {
			continue
		}
		pending -= len(reads)
		member := regionOps[n.Op] && storedOutputs(n) == 1 && len(n.Outputs) == 1 && n.Outputs[0] != "" && !hasSubgraph(n)
		for _, in := range n.Inputs {
			if in != "" && !inRegion[in] && !isStatic(in) {
				member = false
			}
		}
		if member {
			o := n.Outputs[0]
			ov := vals[o]
			if ov == nil || !ov.shapeKnown() || ov.Type.DType != xv.Type.DType || !ov.Type.Shape.Equal(xv.Type.Shape) {
				member = false
			} else {
				members = append(members, j)
				inRegion[o] = true
				pending += len(readBy[o])
				nonlinear = nonlinear || regionNonlinear[n.Op]
				if isOutput[o] {
					escapes[o] = true
				}
				if len(members) > maxRegionNodes {
					return nil, 0, false
				}
			}
		}
		if !member {
			for _, v := range reads {
				escapes[v] = true
			}
		}
	}
	if pending > 0 || len(members) < 2 || !nonlinear || escapes[x] || len(escapes) != 1 {
		return nil, 0, false
	}
	last = members[len(members)-1]
	if !escapes[g.Nodes[last].Outputs[0]] {
		return nil, 0, false
	}
	return members, last, true
}

func slicesContains(s []int, v int) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
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
func isDepthwise(n *model.Node, vals map[string]*Value) bool {
	a := n.Attr("group")
	if a == nil || a.Int <= 1 {
		return false
	}
	in, out := vals[n.Input(0)], vals[n.Outputs[0]]
	if !in.shapeKnown() || !out.shapeKnown() || len(in.Type.Shape) < 3 || len(out.Type.Shape) < 3 {
		return false
	}
	c, oc := in.Type.Shape[1], out.Type.Shape[1]
	return c.IsKnown() && oc.IsKnown() && c.Value == a.Int && oc.Value == a.Int
}
