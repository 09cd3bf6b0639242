package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// Activation memory, deployed view. Definition (DESIGN.md "Metric
// conventions", README "Conventions", `loadline measure --help`): what an
// embedded runtime allocates, the graph view (memory.go) after these
// rewrites, each switchable in DeployOptions:
//
//   - FoldBN: a BatchNormalization whose input is a Conv's (or
//     ConvTranspose's) output read by nothing else is folded into that
//     convolution: the convolution's own output is never stored.
//   - FuseActivations: Relu, Clip, Sigmoid, HardSwish, LeakyRelu,
//     HardSigmoid and Tanh are fused into the node producing their input
//     when they are its only consumer (and that node is no view or
//     control-flow node): the producer writes the activated values.
//   - AliasViews: Reshape, Flatten, Squeeze, Unsqueeze and Identity alias
//     their input: one buffer, live from the first of them to the last use
//     of any.
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
	readers := map[string]int{}
	isOutput := map[string]bool{}
	for _, n := range g.Nodes {
		seen := map[string]bool{}
		read := func(name string) {
			if name != "" && !seen[name] {
				seen[name] = true
				readers[name]++
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

	recs := map[string]*dtensor{}
	var order []*dtensor
	groupOut := map[int]*dtensor{} // head node → its group's stored output
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
	hasBody := map[int]bool{}
	for i, n := range g.Nodes {
		for _, name := range n.Inputs {
			if r := recs[name]; r != nil && name != "" {
				r.last = i
			}
		}
		hasBody[i] = plan.bodies(n, i, depth, subs, bodyPeak, bodyArena,
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
		if len(outs) == 1 && storedOutputs(n) == 1 && outs[0] == n.Outputs[0] && rewrite(g, i, n, outs[0], opts, recs, readers, isOutput, isStatic, hasBody, groupOut, add) {
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

	for _, r := range roots {
		r.segs = []Lifetime{{Name: r.name, Size: r.size, First: r.first, Last: r.last}}
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
	plan.finish(g, steps, live, lts, bodyPeak, bodyArena)
	return plan
}

// rewrite applies the deployed view's rewrites to node n (step i), whose one
// stored output is out. It reports whether it handled the output.
func rewrite(g *model.Graph, i int, n *model.Node, out string, opts DeployOptions, recs map[string]*dtensor,
	readers map[string]int, isOutput map[string]bool, isStatic func(string) bool, hasBody map[int]bool,
	groupOut map[int]*dtensor, add func(*dtensor)) bool {
	x := recs[n.Input(0)]
	if x == nil || x.dropped {
		return false
	}
	othersStatic := true
	for j, name := range n.Inputs {
		if j > 0 && name != "" && !isStatic(name) {
			othersStatic = false
		}
	}
	alias := func() bool {
		add(&dtensor{name: out, first: i, last: i, producer: i, head: i, parent: x})
		return true
	}
	// fuse writes out at x's step instead of x, when nothing else reads x.
	fuse := func() bool {
		if !othersStatic || x.producer < 0 || x.parent != nil || readers[x.name] != 1 || isOutput[x.name] {
			return false
		}
		p := g.Nodes[x.producer]
		if viewOps[p.Op] || hasBody[x.producer] || storedOutputs(p) != 1 {
			return false
		}
		x.dropped = true
		t := &dtensor{name: out, first: x.first, last: x.first, producer: i, head: x.head}
		add(t)
		groupOut[x.head] = t
		return true
	}
	switch {
	case opts.FoldBN && n.Op == "BatchNormalization":
		if x.producer >= 0 && x.producer == x.head {
			if op := g.Nodes[x.producer].Op; op == "Conv" || op == "ConvTranspose" {
				return fuse()
			}
		}
	case opts.FuseActivations && fusableActivations[n.Op]:
		return fuse()
	case opts.FoldQDQ && n.Op == "QuantizeLinear":
		return fuse()
	case opts.FoldQDQ && n.Op == "DequantizeLinear" && othersStatic:
		return alias()
	case opts.AliasViews && viewOps[n.Op]:
		return alias()
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
