package measure

// Layer is one node of the main graph in the per-layer view: what it
// computes, what its first output costs in memory, how much is live at its
// step (the schedule is the file's node order) and where the graph-view
// arena places its output.
type Layer struct {
	Step   int    `json:"step"`
	Node   string `json:"node"`
	Op     string `json:"op"`
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
}

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
			if v := inf.Values[l.Output]; v != nil {
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
		out = append(out, l)
	}
	return out
}
