package measure

import (
	"cmp"
	"fmt"
	"math"
	"math/bits"
	"slices"
	"sort"

	"github.com/loadline/loadline/model"
)

// Activation memory, graph view. Definition (README "Conventions",
// `loadline measure --help`):
//
//   - The schedule is the file's node order: step i is node i.
//   - Every non-constant tensor is counted: graph inputs and node outputs,
//     not initializers and not tensors whose values are known statically
//     (Value.Const() != nil or Value.Weight, and the outputs of a node whose
//     every input is itself known statically, such as the DequantizeLinear
//     of an int8 weight: a runtime folds it once, at load time). Of those,
//     the tensors computed at load time and held for the whole run that are
//     not weights (static.go) are counted as constant memory, live at every
//     step.
//   - A tensor is live from its producer's step (graph inputs: step 0)
//     through its last consumer's step (graph outputs: the last step),
//     inclusive. A tensor nobody consumes and that is no graph output is
//     live at its producer's step only. A value a subgraph reads from the
//     enclosing graph counts as consumed by the control-flow node.
//   - A tensor's size is its elements × its dtype's storage bytes. A tensor
//     whose size is not static (symbolic or unknown shape, strings,
//     sequences) is left out and listed as unresolved, so that an
//     incomplete figure says so rather than counting it as zero.
//   - Subgraph bodies (If, Loop, Scan): the body's own graph-view peak is
//     added at the control-flow node's step (for If, the branch it runs
//     when its condition is known, else the larger branch's),
//     and in the arena the body is one block of its own arena size live at
//     that step. Loop iterations reuse one body's memory.
//
// peak_live_bytes is the largest sum of live bytes at one step: the lower
// bound for any allocator running this schedule. arena_bytes is the size of
// the arena that greedy-by-size offset planning (Pisarchyk & Lee 2020,
// "Efficient Memory Management for Deep Neural Net Inference") lays out; it
// is at least the peak, since the tensors live at the peak step occupy
// disjoint bytes of it.

// MemoryFigures are a model's activation memory figures as the JSON
// contract names them: the graph view, the deployed view (what an
// embedded runtime allocates after its rewrites), and for TFLite models
// the runtime view (the arena the microcontroller runtime plans,
// runtime.go) with the persistent bytes of variable tensors.
type MemoryFigures struct {
	Graph    MemoryView   `json:"graph"`
	Deployed MemoryView   `json:"deployed"`
	Runtime  *RuntimeView `json:"runtime,omitempty"`
	// PersistentBytes are the bytes of state kept from one invocation to
	// the next (TFLite variable tensors, runtime.go); 0 for ONNX.
	PersistentBytes int64 `json:"persistent_bytes"`
}

// MemoryView is one view's peak_live_bytes and arena_bytes.
type MemoryView struct {
	PeakLiveBytes int64 `json:"peak_live_bytes"`
	ArenaBytes    int64 `json:"arena_bytes"`
}

// Lifetime is a tensor's size in bytes and the steps through which it is
// live, First through Last inclusive.
type Lifetime struct {
	Name        string
	Size        int64
	First, Last int
}

// Placement is a tensor's place in the planned arena: bytes Offset through
// Offset+Size-1, for steps First through Last.
type Placement struct {
	Name         string
	Size, Offset int64
	First, Last  int
}

// MemoryPlan is the graph view of a graph's activation memory.
type MemoryPlan struct {
	// PeakLiveBytes is the largest sum of live bytes at one step.
	PeakLiveBytes int64
	// ArenaBytes is the size of the greedy-by-size arena.
	ArenaBytes int64
	// PeakStep is the first step at which PeakLiveBytes is reached.
	PeakStep int
	// LiveAtPeak names the tensors live at PeakStep, in the order they
	// become live (a subgraph body appears as "node (subgraph)").
	LiveAtPeak []string
	// Placements gives every counted tensor's offset in the arena, graph
	// inputs first, then node outputs in step order, then one block per
	// node with subgraphs ("node (subgraph)"). In the deployed view a
	// placement is a buffer, named by the first tensor it holds. Only
	// the placements live at PeakStep are kept when the plan was made
	// without the per-layer view (Options.Layers).
	Placements []Placement
	// LiveBytesByStep is the sum of live bytes at each step.
	LiveBytesByStep []int64
	// BufferOf maps each tensor that shares another's buffer (deployed
	// view: fused, aliased or written in place) to the name of that
	// buffer's placement; a tensor not in it is its own buffer.
	BufferOf map[string]string
	// Unresolved lists the tensors left out because their size is not
	// static; when it is not empty the figures are lower bounds.
	Unresolved []Unresolved
}

// Ratio is ArenaBytes / PeakLiveBytes, the planner's overhead over the
// lower bound; 1 when the peak is zero.
func (p *MemoryPlan) Ratio() float64 {
	if p.PeakLiveBytes == 0 {
		return 1
	}
	return float64(p.ArenaBytes) / float64(p.PeakLiveBytes)
}

// maxTensorBytes bounds a single tensor's size; anything larger is listed
// as unresolved, which keeps sums of sizes far from overflowing int64.
const maxTensorBytes = 1 << 50

// randomOps produce fresh values on every run even from static inputs.
var randomOps = map[string]bool{
	"RandomNormal": true, "RandomNormalLike": true, "RandomUniform": true,
	"RandomUniformLike": true, "Multinomial": true, "Bernoulli": true,
}

// PlanMemory computes the graph view of the activation memory of the
// inferred model's main graph.
func PlanMemory(inf *Inference) *MemoryPlan {
	return planGraph(inf, inf.Model.Graph, inf.Values, 0, true)
}

// tensorRec is what planGraph learns of one tensor while walking the nodes.
type tensorRec struct {
	id          int32
	first, last int32
	producer    int32 // node index, -1 for a graph input
}

// planGraph plans graph g; all keeps every placement (else only those
// live at the peak: MemoryPlan.finish).
func planGraph(inf *Inference, g *model.Graph, vals *Values, depth int, all bool) *MemoryPlan {
	plan := &MemoryPlan{}
	steps := max(1, len(g.Nodes))
	lastStep := steps - 1

	x := inf.index(g, vals)
	static := newStaticSet(g, x)

	// order keeps every tensor; latest[id] is the latest named id, as
	// 1 + its place in order (0 for none: numbers, not pointers, take
	// half the room).
	latest := make([]int32, len(x.names))
	order := make([]tensorRec, 0, len(g.Inputs)+len(x.out))
	rec := func(id int32) *tensorRec {
		if k := latest[id]; k > 0 {
			return &order[k-1]
		}
		return nil
	}
	add := func(id int32, step, producer int) {
		if old := rec(id); old != nil {
			// A name defined twice (not valid ONNX): the later definition
			// wins; the earlier one ends where it was redefined.
			old.last = max(old.last, int32(step))
		}
		order = append(order, tensorRec{id: id, first: int32(step), last: int32(step), producer: int32(producer)})
		latest[id] = int32(len(order))
	}
	for _, in := range g.Inputs {
		if id := x.lookup(in.Name); id >= 0 && !static.has(id) {
			add(id, 0, -1)
		}
	}

	bodyPeak := map[int]int64{}
	bodyArena := map[int]int64{}
	touch := func(i int) func(int32) {
		return func(id int32) {
			if r := rec(id); r != nil {
				r.last = int32(i)
			}
		}
	}
	var outs []int32
	for i, n := range g.Nodes {
		outs, _ = planStep(plan, inf, x, static, n, i, depth, bodyPeak, bodyArena, touch(i),
			func(body *model.Graph, bv *Values) *MemoryPlan {
				return planGraph(inf, body, bv, depth+1, false)
			}, outs[:0])
		for _, id := range outs {
			add(id, i, i)
		}
	}
	for _, o := range g.Outputs {
		if id := x.lookup(o.Name); id >= 0 && rec(id) != nil {
			rec(id).last = int32(lastStep)
		}
	}

	lts := make([]Lifetime, 0, len(order))
	for _, r := range order {
		name := x.names[r.id]
		size, reason := tensorBytes(x.vals[r.id])
		if reason != "" {
			u := Unresolved{Node: name, Reason: fmt.Sprintf("memory unknown: %s (tensor %q)", reason, name)}
			if r.producer >= 0 {
				n := g.Nodes[r.producer]
				u.Node, u.Op = nodeLabel(n, int(r.producer)), n.Op
			}
			plan.Unresolved = append(plan.Unresolved, u)
			continue
		}
		lts = append(lts, Lifetime{Name: name, Size: size, First: int(r.first), Last: int(r.last)})
	}
	// Tensors computed from constants at load time and held for the whole
	// run (static.go).
	held, unres := heldConstants(inf, g, vals, steps)
	lts = append(lts, held...)
	plan.Unresolved = append(plan.Unresolved, unres...)

	plan.finish(g, steps, lts, lts, bodyPeak, bodyArena, all)
	return plan
}

// bodies plans the subgraphs of node n (step i, its first input cond) with
// planBody, records the largest body peak and arena at step i, and calls
// use with every name the bodies read, so that outer tensors stay live
// through the node. It reports whether n has a subgraph.
func (plan *MemoryPlan) bodies(n *model.Node, i, depth int, cond *Value, subs map[*model.Graph]*Values, bodyPeak, bodyArena map[int]int64,
	use func(string), planBody func(*model.Graph, *Values) *MemoryPlan) bool {
	hasBody := false
	// An If whose condition is known runs one branch; the other was not
	// inferred and takes no memory.
	taken := takenBranch(n, cond)
	if n.Op == "If" && taken == "" {
		// The condition may come from an enclosing graph: the branch
		// inference alone inferred is the one taken.
		th, el := n.Attr("then_branch"), n.Attr("else_branch")
		if th != nil && el != nil && th.Graph != nil && el.Graph != nil {
			_, tOK := subs[th.Graph]
			_, eOK := subs[el.Graph]
			if tOK != eOK {
				taken = map[bool]string{true: "then_branch", false: "else_branch"}[tOK]
			}
		}
	}
	for _, a := range n.Attrs {
		if taken != "" && a.Name != taken {
			continue
		}
		bodies := a.Graphs
		if a.Graph != nil {
			bodies = append([]*model.Graph{a.Graph}, bodies...)
		}
		for _, body := range bodies {
			if body == nil {
				continue
			}
			hasBody = true
			forEachNestedInput(body, use)
			if depth >= maxGraphDepth {
				plan.Unresolved = append(plan.Unresolved, Unresolved{Node: nodeLabel(n, i), Op: n.Op, Reason: "memory unknown: subgraphs nest too deep"})
				continue
			}
			bv := subs[body]
			if bv == nil {
				plan.Unresolved = append(plan.Unresolved, Unresolved{Node: nodeLabel(n, i), Op: n.Op, Reason: fmt.Sprintf("memory unknown: subgraph %q was not inferred", body.Name)})
				continue
			}
			bp := planBody(body, bv)
			bodyPeak[i] = max(bodyPeak[i], bp.PeakLiveBytes)
			bodyArena[i] = max(bodyArena[i], bp.ArenaBytes)
			plan.Unresolved = append(plan.Unresolved, bp.Unresolved...)
		}
	}
	return hasBody
}

// finish computes the live bytes per step and the peak from the sized
// lifetimes live over steps steps of g, and the arena from the buffers
// lts (the same list, except where a buffer holds two tensors in turn), with
// the subgraph bodies' peaks and arenas at their nodes' steps. It keeps
// every buffer's placement when all is set (the per-layer view), else only
// those live at the peak step, which the figures read (viewDetail).
func (plan *MemoryPlan) finish(g *model.Graph, steps int, live, lts []Lifetime, bodyPeak, bodyArena map[int]int64, all bool) {
	// Live bytes per step: a difference array over the steps, summed in
	// place into the list.
	diff := make([]int64, steps+1)
	for _, lt := range live {
		diff[lt.First] += lt.Size
		diff[lt.Last+1] -= lt.Size
	}
	plan.LiveBytesByStep = diff[:steps:steps]
	var run int64
	for s := range steps {
		run += diff[s]
		plan.LiveBytesByStep[s] = run + bodyPeak[s]
	}
	for s, b := range plan.LiveBytesByStep {
		if b > plan.PeakLiveBytes {
			plan.PeakLiveBytes, plan.PeakStep = b, s
		}
	}

	// Subgraph bodies enter the arena as one block each.
	var blocks []Lifetime
	for i, n := range g.Nodes {
		if b, ok := bodyArena[i]; ok {
			blocks = append(blocks, Lifetime{Name: nodeLabel(n, i) + " (subgraph)", Size: b, First: i, Last: i})
		}
	}
	buffers := append(lts[:len(lts):len(lts)], blocks...)
	if all {
		plan.Placements, plan.ArenaBytes = PlanArena(buffers)
	} else {
		// The placements the figures read (viewDetail): those live at
		// the peak.
		var offsets []int64
		offsets, plan.ArenaBytes = placeArena(buffers)
		for i, t := range buffers {
			if p := placement(t, offsets[i]); p.First <= plan.PeakStep && plan.PeakStep <= p.Last {
				plan.Placements = append(plan.Placements, p)
			}
		}
	}
	var atPeak []Lifetime
	for _, lt := range append(live[:len(live):len(live)], blocks...) {
		if lt.First <= plan.PeakStep && plan.PeakStep <= lt.Last {
			atPeak = append(atPeak, lt)
		}
	}
	sort.SliceStable(atPeak, func(a, b int) bool { return atPeak[a].First < atPeak[b].First })
	for _, lt := range atPeak {
		plan.LiveAtPeak = append(plan.LiveAtPeak, lt.Name)
	}
}

// forEachNestedInput calls fn with every input name read by a node of g or
// of a subgraph nested in it. Names the body defines itself are included
// too; the caller looks only for names of the enclosing graph, so at worst
// a body that shadows an outer name keeps the outer tensor live a little
// longer.
func forEachNestedInput(g *model.Graph, fn func(string)) {
	for _, n := range g.Nodes {
		for _, name := range n.Inputs {
			if name != "" {
				fn(name)
			}
		}
		for _, a := range n.Attrs {
			if a.Graph != nil {
				forEachNestedInput(a.Graph, fn)
			}
			for _, sg := range a.Graphs {
				if sg != nil {
					forEachNestedInput(sg, fn)
				}
			}
		}
	}
	for _, o := range g.Outputs {
		fn(o.Name) // a body may pass an outer value straight through
	}
}

// nodeLabel names a node in messages: its name, else op#index.
func nodeLabel(n *model.Node, i int) string {
	if n.Name != "" {
		return n.Name
	}
	return fmt.Sprintf("%s#%d", n.Op, i)
}

// tensorBytes is the storage size of a value, or why it cannot be known.
func tensorBytes(v *Value) (int64, string) {
	switch {
	case v == nil:
		return 0, "type unknown"
	case v.Absent:
		return 0, ""
	case v.Type.Kind == model.KindSequence || v.Type.Kind == model.KindMap || v.Type.Kind == model.KindOptional:
		return 0, fmt.Sprintf("a %s has no static size", v.Type.Kind)
	case !v.Type.RankKnown:
		return 0, "shape unknown"
	}
	n, ok := v.Type.Shape.Elements()
	if !ok {
		if !v.Type.Shape.AllKnown() {
			return 0, fmt.Sprintf("shape %s symbolic", v.Type.Shape)
		}
		return 0, fmt.Sprintf("shape %s has a negative dim or overflows", v.Type.Shape)
	}
	if n > maxTensorBytes {
		return 0, fmt.Sprintf("shape %s implausibly large", v.Type.Shape)
	}
	b := v.Type.DType.StorageBytes(n)
	if b < 0 {
		return 0, fmt.Sprintf("dtype %s has no static size", v.Type.DType)
	}
	if b > maxTensorBytes {
		return 0, fmt.Sprintf("shape %s implausibly large", v.Type.Shape)
	}
	return b, ""
}

// PlanArena lays tensors out in one arena by greedy-by-size offset planning
// (Pisarchyk & Lee 2020): tensors sorted by size, largest first (ties by
// First, then Name, then Last, then position), each placed in the smallest
// gap between the already placed tensors whose lifetimes overlap its own
// that fits it (the lowest such gap on a tie), or else just above the
// highest of them. placements[i] is tensors[i]'s place; arena is the end of
// the highest placed byte. A negative Size counts as zero; a Lifetime whose
// Last is before its First is live at First only.
//
// The gaps a tensor may take are the holes in the union of the byte ranges
// of the placed tensors that overlap it in time. A segment tree over the
// steps keeps, at each of its nodes, that union for the tensors stored
// there as a sorted list of disjoint byte runs; a tensor's query merges the
// runs of O(log n) nodes. When tensors pack tightly (the usual case, even
// with thousands live at once) each list is a few runs, and planning n
// tensors costs O(n log² n) instead of one look at every overlapping tensor.
// Zero-sized tensors come last; their place depends on where the others
// merely touch, which the runs do not keep, so they are placed by looking
// at each overlapping tensor as the method states it.
func PlanArena(tensors []Lifetime) (placements []Placement, arena int64) {
	offsets, arena := placeArena(tensors)
	placements = make([]Placement, len(tensors))
	for i, t := range tensors {
		placements[i] = placement(t, offsets[i])
	}
	return placements, arena
}

// placement is tensor t placed at offset; a negative size counts as 0 and
// a last step before the first as the first.
func placement(t Lifetime, offset int64) Placement {
	return Placement{Name: t.Name, Size: max(t.Size, 0), Offset: offset, First: t.First, Last: max(t.Last, t.First)}
}

// placeArena is PlanArena's method, giving each tensor's offset alone: the
// planners keep the placements of a few tensors only, unless the per-layer
// view asks for all (MemoryPlan.finish), and on a graph of 100,000
// nodes a full list made twice was 12 MB for nothing.
func placeArena(tensors []Lifetime) (offsets []int64, arena int64) {
	n := len(tensors)
	offsets = make([]int64, n)
	if n == 0 {
		return offsets, 0
	}
	size := func(i int32) int64 { return max(tensors[i].Size, 0) }
	last := func(i int32) int { return max(tensors[i].Last, tensors[i].First) }
	// The trees run over the ranks of the distinct step values, so that
	// steps far apart cost nothing.
	stepVals := make([]int, 0, 2*n)
	for i, t := range tensors {
		stepVals = append(stepVals, t.First, last(int32(i)))
	}
	slices.Sort(stepVals)
	stepVals = slices.Compact(stepVals)
	// Each tensor's first and last step as ranks, found once; the step
	// values are not needed after.
	ranks := make([]int32, 2*n)
	for i, t := range tensors {
		r, _ := slices.BinarySearch(stepVals, t.First)
		ranks[2*i] = int32(r)
		r, _ = slices.BinarySearch(stepVals, last(int32(i)))
		ranks[2*i+1] = int32(r)
	}
	steps := len(stepVals)
	stepVals = nil
	idx := make([]int32, n)
	for i := range idx {
		idx[i] = int32(i)
	}
	slices.SortFunc(idx, func(a, b int32) int {
		x, y := &tensors[a], &tensors[b]
		switch {
		case size(a) != size(b):
			return cmp.Compare(size(b), size(a))
		case x.First != y.First:
			return cmp.Compare(x.First, y.First)
		case x.Name != y.Name:
			return cmp.Compare(x.Name, y.Name)
		case last(a) != last(b):
			return cmp.Compare(last(a), last(b))
		}
		return cmp.Compare(a, b)
	})

	// The tensors of positive size come first in idx; they are placed by
	// the run tree, at 32-bit offsets when every tensor together fits
	// (half the tree's memory), else at 64-bit ones.
	sized := 0
	var total int64
	narrow := true // every offset and end fits an int32
	for _, i := range idx {
		if size(i) == 0 {
			break
		}
		sized++
		if size(i) > math.MaxInt32-total {
			narrow = false
		} else {
			total += size(i)
		}
	}
	if narrow {
		arena = placeSized[int32](tensors, idx[:sized], ranks, steps, offsets)
	} else {
		arena = placeSized[int64](tensors, idx[:sized], ranks, steps, offsets)
	}
	var tree *stepTree // built for the zero-sized tensors only
	var stamp []int32
	var cand []int32
	for q := sized; q < n; q++ {
		i := idx[q]
		a, b := int(ranks[2*i]), int(ranks[2*i+1])
		if tree == nil {
			tree = newStepTree(steps, n-q)
			stamp = make([]int32, n)
			for _, j := range idx[:q] {
				tree.insert(int(ranks[2*j]), int(ranks[2*j+1]), j)
			}
		}
		cand = tree.query(a, b, int32(q+1), stamp, cand[:0])
		offsets[i] = smallestGapAmong(tensors, offsets, cand, 0)
		tree.insert(a, b, i)
		arena = max(arena, offsets[i])
	}
	return offsets, arena
}

// offset is the type of the byte offsets a run tree keeps.
type offset interface{ ~int32 | ~int64 }

// placeSized places the tensors idx, all of positive size, in turn at the
// smallest gap among those placed before them that overlap them in time
// (ranks), setting offsets, and returns the arena's end. O must hold the
// sum of their sizes.
func placeSized[O offset](tensors []Lifetime, idx []int32, ranks []int32, steps int, offsets []int64) (arena int64) {
	runs := newRunTree[O](steps)
	var buf []byteRun[O]
	for _, i := range idx {
		a, b := int(ranks[2*i]), int(ranks[2*i+1])
		sz := O(tensors[i].Size)
		buf = runs.query(a, b, buf[:0])
		at := smallestGap(buf, sz)
		runs.insert(a, b, byteRun[O]{at, at + sz})
		offsets[i] = int64(at)
		arena = max(arena, int64(at+sz))
	}
	return arena
}

// smallestGap is where greedy by size puts a tensor of size bytes (size >
// 0) among placed byte ranges whose union is given as runs, in any order:
// the start of the smallest hole of the union that fits it, the lowest on
// a tie, else the union's end. The holes are those the method finds
// between the overlapping tensors taken in offset order: a hole is a gap
// between one tensor's offset and the highest end below it, and gaps of
// zero or less never fit a tensor of size > 0.
func smallestGap[O offset](runs []byteRun[O], size O) O {
	slices.SortFunc(runs, func(x, y byteRun[O]) int { return cmp.Compare(x.lo, y.lo) })
	var prevEnd O
	best, bestGap := O(-1), O(-1)
	for _, r := range runs {
		if gap := r.lo - prevEnd; gap >= size && (bestGap < 0 || gap < bestGap) {
			best, bestGap = prevEnd, gap
		}
		prevEnd = max(prevEnd, r.hi)
	}
	if best < 0 {
		return prevEnd
	}
	return best
}

// smallestGapAmong is the method as stated, over the placed tensors cand:
// in offset order, each gap between a tensor's offset and the highest end
// before it is a candidate.
func smallestGapAmong(tensors []Lifetime, offsets []int64, cand []int32, size int64) int64 {
	slices.SortFunc(cand, func(x, y int32) int {
		if c := cmp.Compare(offsets[x], offsets[y]); c != 0 {
			return c
		}
		return cmp.Compare(x, y)
	})
	var prevEnd int64
	best, bestGap := int64(-1), int64(-1)
	for _, j := range cand {
		if gap := offsets[j] - prevEnd; gap >= size && (bestGap < 0 || gap < bestGap) {
			best, bestGap = prevEnd, gap
		}
		prevEnd = max(prevEnd, offsets[j]+max(tensors[j].Size, 0))
	}
	if best < 0 {
		return prevEnd
	}
	return best
}

// byteRun is the bytes lo through hi-1 of the arena.
type byteRun[O offset] struct{ lo, hi O }

// runTree is a segment tree over steps 0..size-1. A tensor live over steps
// [a, b] is stored at the nodes of the canonical decomposition of [a, b]
// (cover) and at every proper ancestor of them (part); each node keeps the
// union of its tensors' byte ranges as sorted disjoint runs, touching runs
// joined. The tensors that overlap [a, b] in time are those in cover of the
// canonical nodes of [a, b] and of their ancestors, and those in part of
// the canonical nodes.
//
// A node's runs live in chunks shared by all nodes, named by a runList of
// three int32s: a tree over 200,000 steps has a million lists, most of
// them empty, and a slice header each (24 bytes) was most of a large
// graph's planning memory. Chunks are never copied as the tree grows.
type runTree[O offset] struct {
	size        int
	cover, part []runList
	chunks      [][]byteRun[O]
	chunkSize   int // the size of the last regular chunk
}

// runList is the runs chunks[c][at : at+n], with c and at packed in pos
// (c<<13 | at: a regular chunk holds runChunk runs, and a list with a
// chunk of its own starts at 0), so that a list takes 8 bytes. Its room is
// implicit: a list is given roomFor(n) runs when it is placed, and as
// joining runs only shortens it, roomFor of its current length never
// exceeds what it has.
type runList struct{ pos, n int32 }

func (l runList) chunk() int32 { return l.pos >> runChunkBits }
func (l runList) at() int32    { return l.pos & (runChunk - 1) }

// runChunk is the largest size of a chunk of runs; a list with more room
// than that has a chunk of its own.
const (
	runChunkBits = 13
	runChunk     = 1 << runChunkBits
)

// roomFor is the room given to a list of n runs: the next power of two.
// Most lists hold a single run (the tensors under a node pack into one),
// so a list starts with room for one.
func roomFor(n int32) int32 {
	return max(1, int32(1)<<bits.Len32(uint32(n-1)))
}

// newRunTree is an empty tree over size steps. Only a node with children
// holds part lists, and those are numbered below half of treeNodes.
func newRunTree[O offset](size int) *runTree[O] {
	n := treeNodes(size)
	return &runTree[O]{size: size, cover: make([]runList, n), part: make([]runList, n/2)}
}

// treeNodes is the length of the node arrays of a segment tree over size
// steps, numbered from 1 at the root with children 2k and 2k+1: halving
// [0, size-1] reaches single steps after ⌈log2 size⌉ levels, so every
// index is below 2 × the next power of two ≥ size (at most 4 × size, the
// bound usually quoted, and about 2.6 × size on average).
func treeNodes(size int) int {
	return 2 << bits.Len(uint(max(size, 1)-1))
}

func (t *runTree[O]) insert(a, b int, r byteRun[O]) { t.ins(1, 0, t.size-1, a, b, r) }

func (t *runTree[O]) ins(node, l, h, a, b int, r byteRun[O]) {
	if b < l || h < a {
		return
	}
	if a <= l && h <= b {
		t.cover[node] = t.add(t.cover[node], r)
		return
	}
	t.part[node] = t.add(t.part[node], r)
	mid := (l + h) / 2
	t.ins(2*node, l, mid, a, b, r)
	t.ins(2*node+1, mid+1, h, a, b, r)
}

// query appends the runs of every node whose tensors overlap [a, b].
func (t *runTree[O]) query(a, b int, out []byteRun[O]) []byteRun[O] {
	return t.q(1, 0, t.size-1, a, b, out)
}

func (t *runTree[O]) q(node, l, h, a, b int, out []byteRun[O]) []byteRun[O] {
	if b < l || h < a {
		return out
	}
	out = append(out, t.runs(t.cover[node])...)
	if a <= l && h <= b {
		if l == h {
			return out // a single step: no part list
		}
		return append(out, t.runs(t.part[node])...)
	}
	mid := (l + h) / 2
	out = t.q(2*node, l, mid, a, b, out)
	return t.q(2*node+1, mid+1, h, a, b, out)
}

// runs is the runs of list l.
func (t *runTree[O]) runs(l runList) []byteRun[O] {
	if l.n == 0 {
		return nil
	}
	return t.chunks[l.chunk()][l.at() : l.at()+l.n]
}

// place finds room for a list of n runs and returns the list, its runs
// to be written.
func (t *runTree[O]) place(n int32) (runList, []byteRun[O]) {
	room := int(roomFor(n))
	c := len(t.chunks) - 1
	if room > runChunk {
		t.chunks = append(t.chunks, make([]byteRun[O], 0, room))
		c++
	} else if c < 0 || cap(t.chunks[c])-len(t.chunks[c]) < room {
		// Chunks double from a small first one: a small graph's tree,
		// planned twice for each model a check reads, needs a few runs.
		t.chunkSize = min(runChunk, max(64, room, 2*t.chunkSize))
		t.chunks = append(t.chunks, make([]byteRun[O], 0, t.chunkSize))
		c++
	}
	at := len(t.chunks[c])
	t.chunks[c] = t.chunks[c][:at+room]
	return runList{int32(c)<<runChunkBits | int32(at), n}, t.chunks[c][at : at+int(n)]
}

// add adds r to list l, joining the runs it overlaps or touches, and
// returns the list: in place when it has room, else moved to a new place
// with twice the room (what it leaves behind is not reused).
func (t *runTree[O]) add(l runList, r byteRun[O]) runList {
	rs := t.runs(l)
	// The first run that ends at or after r begins, and the first that
	// begins after r ends: those between are joined with r.
	i := sort.Search(len(rs), func(k int) bool { return rs[k].hi >= r.lo })
	j := i
	for j < len(rs) && rs[j].lo <= r.hi {
		r.lo, r.hi = min(r.lo, rs[j].lo), max(r.hi, rs[j].hi)
		j++
	}
	n := l.n - int32(j-i) + 1
	if l.n == 0 || n > roomFor(l.n) {
		moved, to := t.place(n)
		copy(to, rs[:i])
		to[i] = r
		copy(to[i+1:], rs[j:])
		return moved
	}
	rs = t.chunks[l.chunk()][l.at() : l.at()+max(l.n, n)]
	if j != i+1 {
		copy(rs[i+1:], rs[j:l.n])
	}
	rs[i] = r
	return runList{l.pos, n}
}

// stepTree is a segment tree over steps 0..size-1 holding intervals of
// steps. An interval is stored in cover at each node of its canonical
// decomposition and in part at each proper ancestor of those nodes, so that
// the intervals meeting a query are those in cover or part of the query's
// canonical nodes plus those in cover of their ancestors. The lists are
// linked through one slice of entries, so inserting allocates only when
// that slice grows.
type stepTree struct {
	size        int
	cover, part []int32 // per node, the index of its list's first entry, -1 for none
	entries     []treeEntry
}

type treeEntry struct{ id, next int32 }

// newStepTree makes a tree for n intervals, each of which takes about two
// entries a level.
func newStepTree(size, n int) *stepTree {
	t := &stepTree{size: size, cover: make([]int32, treeNodes(size)), part: make([]int32, treeNodes(size)),
		entries: make([]treeEntry, 0, n*(2*bits.Len(uint(size))+2))}
	for i := range t.cover {
		t.cover[i], t.part[i] = -1, -1
	}
	return t
}

func (t *stepTree) push(head []int32, node int, id int32) {
	t.entries = append(t.entries, treeEntry{id, head[node]})
	head[node] = int32(len(t.entries) - 1)
}

func (t *stepTree) insert(a, b int, id int32) { t.ins(1, 0, t.size-1, a, b, id) }

func (t *stepTree) ins(node, l, r, a, b int, id int32) {
	if b < l || r < a {
		return
	}
	if a <= l && r <= b {
		t.push(t.cover, node, id)
		return
	}
	t.push(t.part, node, id)
	mid := (l + r) / 2
	t.ins(2*node, l, mid, a, b, id)
	t.ins(2*node+1, mid+1, r, a, b, id)
}

// query appends to out, once each, the stored intervals that meet [a, b],
// using stamp (stamp[id] == mark: already appended) to drop repeats.
func (t *stepTree) query(a, b int, mark int32, stamp []int32, out []int32) []int32 {
	return t.q(1, 0, t.size-1, a, b, mark, stamp, out)
}

func (t *stepTree) collect(e int32, mark int32, stamp []int32, out []int32) []int32 {
	for ; e >= 0; e = t.entries[e].next {
		if id := t.entries[e].id; stamp[id] != mark {
			stamp[id] = mark
			out = append(out, id)
		}
	}
	return out
}

func (t *stepTree) q(node, l, r, a, b int, mark int32, stamp []int32, out []int32) []int32 {
	if b < l || r < a {
		return out
	}
	out = t.collect(t.cover[node], mark, stamp, out)
	if a <= l && r <= b {
		return t.collect(t.part[node], mark, stamp, out)
	}
	mid := (l + r) / 2
	out = t.q(2*node, l, mid, a, b, mark, stamp, out)
	return t.q(2*node+1, mid+1, r, a, b, mark, stamp, out)
}
