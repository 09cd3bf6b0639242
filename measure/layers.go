package measure

import (
	"slices"

	"github.com/loadline/loadline/model"
)

// Layer is one node of the main graph in the per-layer view: what it
// computes, what its first output costs in memory, how much is live at its
// step (the schedule is the file's node order) and where the graph-view
// arena places its output.
type Layer struct {
	Step int    `json:"step"`
	Node string `json:"node"`
	Op   string `json:"op"`
	// Domain is the operator's domain: "" for the default ONNX domain,
	// "tflite" for a TFLite builtin operator.
	Domain string `json:"domain,omitempty"`
	Output string `json:"output"`
	Shape  string `json:"shape"`
	MACs   int64  `json:"macs"`
	FLOPs  int64  `json:"flops"`
	// Bytes is the size of the node's outputs that the planner counts
	// (0 for statically known outputs).
	Bytes int64 `json:"bytes"`
	// LiveBytes is the graph view's live bytes at this step.
	LiveBytes int64 `json:"live_bytes"`
	// Offset is the graph-view arena offset of the first output; -1 when
	// the output is not in the arena.
	Offset int64 `json:"offset"`

	// What the node moves and computes on, for device cost models. Counts
	// whose shapes are not known are 0.
	//
	// DType is the element type the node computes on: that of its first
	// input that is not a weight (of its first output when every input is
	// a weight).
	DType string `json:"dtype,omitempty"`
	// Depthwise marks a depthwise convolution: Conv, ConvInteger or
	// QLinearConv with more than one group and group equal to its input's
	// and its output's channels (deployed.go's isDepthwise).
	Depthwise bool `json:"depthwise,omitempty"`
	// InElements is the element count of input 0; OutElements that of
	// every output together.
	InElements  int64 `json:"in_elements"`
	OutElements int64 `json:"out_elements"`
	// WeightBytes is the size of the node's constant inputs, at any
	// position: stored (initializers, Constant nodes) or known before the
	// run (computed from constants: a folded Shape, a Transpose of a
	// weight). ActivationBytes is the size of its outputs and of its
	// run-time inputs at data positions, indices read element by element
	// among them (Gather's, GatherElements', ScatterND's, …: indexOperands,
	// params.go); a run-time value read as a shape, axis or count, or as
	// statistics or quantization metadata (shapeOperands), is not data
	// and counts in neither. Each input counts once per node. Defined in
	// traffic.
	WeightBytes     int64 `json:"weight_bytes"`
	ActivationBytes int64 `json:"activation_bytes"`

	// Views gives the node's memory in each view by name: "graph" (the
	// fields above), "deployed" (the view ram is judged on) and, where a
	// runtime's own plan is known, that runtime's.
	Views map[string]LayerView `json:"views,omitempty"`
}

// LayerView is one node's memory in one view.
type LayerView struct {
	// LiveBytes is the view's live bytes at the node's step.
	LiveBytes int64 `json:"live_bytes"`
	// Bytes is the size of the buffers the view writes at this step: the
	// node's own outputs, or in the deployed view the output of the group
	// the node heads (0 when the node is fused into another or a view).
	Bytes int64 `json:"bytes"`
	// Offset is the arena offset of the buffer holding the node's first
	// output; -1 when it is in no buffer (static, or never stored).
	Offset int64 `json:"offset"`
}

// Names of the memory views in Layer.Views and MemoryDetail.Views.
const (
	ViewGraph    = "graph"
	ViewDeployed = "deployed"
)

// ViewDetail is where and what one view's peak is.
type ViewDetail struct {
	PeakStep      int   `json:"peak_step"`
	PeakLiveBytes int64 `json:"peak_live_bytes"`
	// LiveAtPeak are the buffers live at the peak step, in the order they
	// become live, with their bytes and arena offsets.
	LiveAtPeak []LiveTensor `json:"live_at_peak"`
	// LiveBytesByStep is the view's live bytes at each step (with the
	// per-layer view only).
	LiveBytesByStep []int64 `json:"live_bytes_by_step,omitempty"`
}

// LiveTensor is a buffer live at a peak: named by the first tensor it
// holds (a subgraph body as "node (subgraph)").
type LiveTensor struct {
	Name   string `json:"name"`
	Bytes  int64  `json:"bytes"`
	Offset int64  `json:"offset"`
}

// viewDetail summarises a plan's peak; steps adds the live bytes per step.
func viewDetail(plan *MemoryPlan, steps bool) ViewDetail {
	d := ViewDetail{PeakStep: plan.PeakStep, PeakLiveBytes: plan.PeakLiveBytes, LiveAtPeak: []LiveTensor{}}
	at := map[string]Placement{}
	for _, p := range plan.Placements {
		if p.First <= plan.PeakStep && plan.PeakStep <= p.Last {
			at[p.Name] = p
		}
	}
	for _, name := range plan.LiveAtPeak {
		lt := LiveTensor{Name: name, Offset: -1}
		if p, ok := at[name]; ok {
			lt.Bytes, lt.Offset = p.Size, p.Offset
		}
		d.LiveAtPeak = append(d.LiveAtPeak, lt)
	}
	if steps {
		d.LiveBytesByStep = plan.LiveBytesByStep
	}
	return d
}

// addLayerView records plan as view name of each layer of graph g.
func addLayerView(layers []Layer, g *model.Graph, name string, plan *MemoryPlan) {
	byName := make(map[string]Placement, len(plan.Placements))
	inputs := map[string]bool{}
	for _, in := range g.Inputs {
		inputs[in.Name] = true
	}
	written := map[int]int64{} // step → bytes of the buffers first written there
	for _, p := range plan.Placements {
		byName[p.Name] = p
		if !inputs[p.Name] && !isBodyBlock(p.Name) {
			written[p.First] += p.Size
		}
	}
	for i := range layers {
		l := &layers[i]
		if l.Views == nil {
			l.Views = make(map[string]LayerView, 3) // graph, deployed and a runtime's
		}
		v := LayerView{Offset: -1}
		if l.Step < len(plan.LiveBytesByStep) {
			v.LiveBytes = plan.LiveBytesByStep[l.Step]
		}
		if l.Step < len(g.Nodes) {
			for _, o := range g.Nodes[l.Step].Outputs {
				buf := o
				if b, ok := plan.BufferOf[o]; ok {
					buf = b
				}
				p, ok := byName[buf]
				if !ok {
					continue
				}
				if o == l.Output && v.Offset < 0 {
					v.Offset = p.Offset
				}
			}
		}
		v.Bytes = written[l.Step]
		l.Views[name] = v
	}
}

func isBodyBlock(name string) bool { return len(name) > 11 && name[len(name)-11:] == " (subgraph)" }

// MemoryDetail is where and what the graph-view peak is.
type MemoryDetail struct {
	PeakStep   int      `json:"peak_step"`
	LiveAtPeak []string `json:"live_at_peak"`
	// ArenaRatio is arena_bytes / peak_live_bytes of the graph view: the
	// planner's overhead over the lower bound.
	ArenaRatio float64 `json:"arena_ratio"`
	// DeployedRatio is the same for the deployed view.
	DeployedRatio float64 `json:"deployed_arena_ratio"`
	// LiveBytesByStep is the graph view's live bytes at each step (with
	// the per-layer view only).
	LiveBytesByStep []int64 `json:"live_bytes_by_step,omitempty"`
	// Views gives each memory view's peak by name ("graph", "deployed",
	// and a runtime's where known); Judged names the one ram is judged on.
	Views  map[string]ViewDetail `json:"views,omitempty"`
	Judged string                `json:"judged_view,omitempty"`
}

// layersOf joins costs and the graph-view plan per node.
func layersOf(inf *Inference, costs *Costs, plan *MemoryPlan) []Layer {
	g := inf.Model.Graph
	offsets := make(map[string]Placement, len(plan.Placements))
	for _, p := range plan.Placements {
		offsets[p.Name] = p
	}
	out := make([]Layer, 0, len(g.Nodes))
	for i, n := range g.Nodes {
		l := Layer{Step: i, Node: nodeName(n, i), Op: n.Op, Offset: -1}
		if len(n.Outputs) > 0 {
			l.Output = n.Outputs[0]
			if v := inf.Values.Get(l.Output); v != nil {
				l.Shape = v.Type.String()
			}
			if p, ok := offsets[l.Output]; ok {
				l.Offset = p.Offset
			}
		}
		for _, o := range n.Outputs {
			if p, ok := offsets[o]; ok && p.First == i {
				l.Bytes += p.Size
			}
		}
		// costs.Nodes[i] is node i (CountCosts keeps the node order); by
		// name it would not do, since node names need not be unique.
		if i < len(costs.Nodes) {
			l.MACs, l.FLOPs = costs.Nodes[i].MACs, costs.Nodes[i].FLOPs
		}
		if i < len(plan.LiveBytesByStep) {
			l.LiveBytes = plan.LiveBytesByStep[i]
		}
		l.Domain = n.Domain
		traffic(&l, n, inf.Values)
		out = append(out, l)
	}
	return out
}

// depthwiseOps are the convolutions a depthwise flag applies to.
var depthwiseOps = map[string]bool{"Conv": true, "ConvInteger": true, "QLinearConv": true}

// traffic fills the layer's dtype, element counts and bytes moved from what
// inference knows of the node's inputs and outputs: the one definition of
// a layer's weight bytes and activation bytes (README "Conventions",
// `loadline --help`), which the device cost model's memory term reads.
func traffic(l *Layer, n *model.Node, vals *Values) {
	var seen map[string]bool
	for i, name := range n.Inputs {
		v := vals.Get(name)
		if name == "" || v == nil || v.Absent {
			continue
		}
		if i == 0 {
			l.InElements = elementsOf(v)
		}
		if countedBefore(n.Inputs, i, &seen) {
			continue // each input counts once per node
		}
		b, _ := tensorBytes(v)
		if v.Weight {
			l.WeightBytes += b
			continue
		}
		if l.DType == "" && v.Type.Kind == model.KindTensor {
			l.DType = v.Type.DType.String()
		}
		switch {
		case v.Const() != nil:
			// Known before the run (computed from constants, or bound):
			// a constant, read as the stored ones are.
			l.WeightBytes += b
		case isShapeOperand(n, i) && !isIndexOperand(n, i):
			// A run-time shape, axis or count, statistics or quantization
			// metadata (params.go's shapeOperands): not data. Indices
			// read element by element (indexOperands) are.
		default:
			l.ActivationBytes += b
		}
	}
	for _, name := range n.Outputs {
		v := vals.Get(name)
		if name == "" || v == nil || v.Absent {
			continue
		}
		l.OutElements += elementsOf(v)
		b, _ := tensorBytes(v)
		l.ActivationBytes += b
		if l.DType == "" && v.Type.Kind == model.KindTensor {
			l.DType = v.Type.DType.String()
		}
	}
	if (n.Domain == "" || n.Domain == "ai.onnx") && depthwiseOps[n.Op] && len(n.Outputs) > 0 {
		l.Depthwise = isDepthwise(n, vals)
	}
}

// countedBefore reports whether ins[i] is among ins[:i]: by a look along
// them for the few inputs most nodes have, by a set (made in *seen on
// the first call that needs it) for a node of many inputs (a Concat or Sum
// of thousands), whose looks along would cost the square of its inputs.
func countedBefore(ins []string, i int, seen *map[string]bool) bool {
	if len(ins) <= 16 {
		return slices.Contains(ins[:i], ins[i])
	}
	if *seen == nil {
		*seen = make(map[string]bool, len(ins))
	}
	if (*seen)[ins[i]] {
		return true
	}
	(*seen)[ins[i]] = true
	return false
}

// elementsOf is a tensor value's element count, 0 when not known.
func elementsOf(v *Value) int64 {
	if v == nil || v.Type.Kind != model.KindTensor || !v.Type.RankKnown {
		return 0
	}
	if e, ok := v.Type.Shape.Elements(); ok {
		return e
	}
	return 0
}

// TopLayers is the positions of the k layers with the largest key, largest
// first, an earlier layer first on a tie (a stable sort's order), picked
// in one pass: sorting a copy of every layer to show five was most of the
// time of a large graph's per-layer report. Reports' "top" lists use it.
func TopLayers(ls []Layer, k int, key func(*Layer) int64) []int {
	if k <= 0 {
		return nil
	}
	best := make([]int, 0, k+1)
	for i := range ls {
		v := key(&ls[i])
		if len(best) == k && v <= key(&ls[best[k-1]]) {
			continue
		}
		// After every kept layer whose key is at least v: on a tie the
		// earlier layer stays ahead.
		at := len(best)
		for at > 0 && key(&ls[best[at-1]]) < v {
			at--
		}
		best = slices.Insert(best, at, i)
		if len(best) > k {
			best = best[:k]
		}
	}
	return best
}
