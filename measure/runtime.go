package measure

import (
	"cmp"
	"fmt"
	"slices"

	"github.com/loadline/loadline/model"
)

// Activation memory, runtime view: the arena a microcontroller runtime
// (TensorFlow Lite Micro) plans for a TFLite model, by its own rules
// (TensorFlow Lite Micro, micro_allocation_info.cc,
// memory_planner/greedy_memory_planner.cc, micro_arena_constants.h). Only
// models that carry their own tensor table (TFLite) have it.
//
//   - The schedule is the main subgraph's operator order; each operator
//     is one step.
//   - Every tensor of the main subgraph is planned except constants
//     (buffer-backed), variable tensors (counted apart, below) and tensors
//     of zero bytes. A tensor is live from the first operator that writes
//     or reads it (subgraph inputs: operator 0) through the last operator
//     that reads or writes it (subgraph outputs: the last operator); an
//     operator's inputs and outputs are live together. A tensor no
//     operator touches and that is no subgraph input or output is not
//     planned. Reshape is not made in place: its output is a tensor of
//     its own.
//   - Every buffer is rounded up to 16 bytes.
//   - Kernel scratch buffers (scratchRules, the one table of what kernels
//     ask for) live for their operator's step only.
//   - Tensors an offline plan places (OfflineMemoryAllocation metadata)
//     sit at their given offsets; the others are placed greedily: largest
//     first, ties in tensor table order (scratch buffers after the
//     tensors, in operator order), each at the first gap, in offset
//     order, among the placed buffers whose lifetimes overlap its own, or
//     else above the highest of them.
//
// peak_live_bytes is the largest sum of the rounded sizes live at one
// step, scratch included; arena_bytes is the end of the highest placed
// byte; scratch_bytes is the largest sum of scratch one operator asks for.
// persistent_bytes are the bytes of the variable tensors (state kept from
// one invocation to the next, elements × dtype size, not rounded), which
// the runtime allocates apart from the planned arena.

// RuntimeView is the runtime view's figures.
type RuntimeView struct {
	PeakLiveBytes int64 `json:"peak_live_bytes"`
	ArenaBytes    int64 `json:"arena_bytes"`
	ScratchBytes  int64 `json:"scratch_bytes"`
}

// runtimeAlign is the rounding of every buffer the runtime plans
// (TensorFlow Lite Micro, micro_arena_constants.h: 16 bytes).
const runtimeAlign = 16

func alignUp(n int64) int64 { return (n + runtimeAlign - 1) / runtimeAlign * runtimeAlign }

// scratchRules is the one table of the scratch buffers kernels ask for:
// per operator, the byte sizes of the buffers its kernel requests for its
// step. Only kernels listed here are known to ask for scratch; others are
// planned without.
var scratchRules = map[string]func(c *costCtx) ([]int64, error){
	// SVDF (TensorFlow Lite Micro, kernels/svdf_common.cc, from memory of
	// the reference kernel): with an integer input, one buffer of batch ×
	// filters int32s for the feature activations and one of batch × units
	// int32s for the output before requantisation; with a float input,
	// the first only. Checked against the runtime's own figure for
	// keyword_scrambled.tflite (672 bytes, memory_arena_threshold_test.cc).
	"tflite:SVDF": func(c *costCtx) ([]int64, error) {
		x, err := c.inDims(0)
		if err != nil {
			return nil, err
		}
		feat, err := c.inDims(1)
		if err != nil {
			return nil, err
		}
		if len(x) != 2 || len(feat) != 2 {
			return nil, fmt.Errorf("input and feature weights have ranks %d and %d, want 2", len(x), len(feat))
		}
		filters, err := product(x[0], feat[0], 4)
		if err != nil {
			return nil, err
		}
		if c.in(0).Type.DType.IsFloat() {
			return []int64{filters}, nil
		}
		rank := c.attrInt("rank", 1)
		if rank <= 0 {
			return nil, fmt.Errorf("rank %d", rank)
		}
		return []int64{filters, filters / rank}, nil
	},
}

// runtimeBuf is one buffer of the runtime plan.
type runtimeBuf struct {
	name        string
	size        int64
	first, last int
	order       int   // tensor table position; scratch after every tensor
	fixed       int64 // offline offset, -1 when planned at run time
	offset      int64
	placed      bool
}

// planRuntime computes the runtime view of the inferred model's main
// graph, and the persistent bytes; ok is false for a model without a
// tensor table.
func planRuntime(inf *Inference) (view RuntimeView, persistent int64, unresolved []Unresolved, ok bool) {
	g := inf.Model.Graph
	if len(g.TensorOrder) == 0 {
		return view, 0, nil, false
	}
	vals := inf.Values
	for _, st := range g.State {
		size, reason := tensorBytes(vals.Get(st.Name))
		if reason != "" {
			unresolved = append(unresolved, Unresolved{Node: st.Name, Reason: "persistent memory unknown: " + reason})
			continue
		}
		persistent += size
	}
	static := map[string]bool{}
	for _, t := range g.Initializers {
		static[t.Name] = true
	}
	for _, st := range g.State {
		static[st.Name] = true
	}
	last := max(0, len(g.Nodes)-1)
	first := map[string]int{}
	end := map[string]int{}
	touch := func(name string, step int) {
		if name == "" || static[name] {
			return
		}
		if f, seen := first[name]; !seen || step < f {
			first[name] = step
		}
		end[name] = max(end[name], step)
	}
	for _, in := range g.Inputs {
		touch(in.Name, 0)
	}
	for i, n := range g.Nodes {
		for _, name := range n.Inputs {
			touch(name, i)
		}
		for _, name := range n.Outputs {
			touch(name, i)
		}
		for _, a := range n.Attrs {
			if a.Kind == model.AttrGraph && a.Graph != nil {
				unresolved = append(unresolved, Unresolved{Node: nodeName(n, i), Op: n.Op,
					Reason: "runtime memory: the subgraphs it runs are not planned; the runtime view covers the main subgraph"})
				break
			}
		}
	}
	for _, out := range g.Outputs {
		touch(out.Name, last)
	}
	var bufs []runtimeBuf
	for pos, name := range g.TensorOrder {
		f, used := first[name]
		if !used {
			continue
		}
		size, reason := tensorBytes(vals.Get(name))
		if reason != "" {
			unresolved = append(unresolved, Unresolved{Node: name, Reason: fmt.Sprintf("runtime memory unknown: %s (tensor %q)", reason, name)})
			continue
		}
		if size == 0 {
			continue
		}
		fixed := int64(-1)
		if off, ok := g.PlannedOffsets[name]; ok {
			fixed = off
		}
		bufs = append(bufs, runtimeBuf{name: name, size: alignUp(size), first: f, last: end[name], order: pos, fixed: fixed})
	}
	sc := scopes{vals}
	for i, n := range g.Nodes {
		key := n.Op
		if n.Domain != "" {
			key = n.Domain + ":" + n.Op
		}
		rule, ok := scratchRules[key]
		if !ok {
			continue
		}
		c := newCostCtx(n)
		for j, name := range n.Inputs {
			if name != "" {
				c.ins[j] = sc.lookup(name)
			}
		}
		sizes, err := rule(c)
		if err != nil {
			unresolved = append(unresolved, Unresolved{Node: nodeName(n, i), Op: n.Op, Reason: "scratch memory unknown: " + err.Error()})
			continue
		}
		var sum int64
		for j, s := range sizes {
			s = alignUp(s)
			sum += s
			bufs = append(bufs, runtimeBuf{name: fmt.Sprintf("%s scratch %d", nodeName(n, i), j), size: s, first: i, last: i,
				order: len(g.TensorOrder) + i, fixed: -1})
		}
		view.ScratchBytes = max(view.ScratchBytes, sum)
	}

	// Live bytes per step.
	live := make([]int64, len(g.Nodes)+1)
	for _, b := range bufs {
		live[b.first] += b.size
		live[b.last+1] -= b.size
	}
	var run int64
	for s := 0; s < len(g.Nodes); s++ {
		run += live[s]
		view.PeakLiveBytes = max(view.PeakLiveBytes, run)
	}
	view.ArenaBytes = placeRuntime(bufs)
	return view, persistent, unresolved, true
}

// placeRuntime places the buffers as the runtime's greedy planner does
// (see the definition above) and returns the arena's size.
func placeRuntime(bufs []runtimeBuf) int64 {
	idx := make([]int, len(bufs))
	for i := range idx {
		idx[i] = i
	}
	// Offline-placed buffers first, then largest first, ties in order.
	slices.SortStableFunc(idx, func(a, b int) int {
		x, y := &bufs[a], &bufs[b]
		if (x.fixed >= 0) != (y.fixed >= 0) {
			if x.fixed >= 0 {
				return -1
			}
			return 1
		}
		if c := cmp.Compare(y.size, x.size); c != 0 {
			return c
		}
		return cmp.Compare(x.order, y.order)
	})
	var arena int64
	var placed []int // in offset order
	for _, i := range idx {
		b := &bufs[i]
		if b.fixed >= 0 {
			b.offset = b.fixed
		} else {
			var at int64
			for _, j := range placed {
				o := &bufs[j]
				if o.last < b.first || b.last < o.first {
					continue // not live together
				}
				if o.offset-at >= b.size {
					break // the first gap that fits
				}
				at = max(at, o.offset+o.size)
			}
			b.offset = at
		}
		b.placed = true
		arena = max(arena, b.offset+b.size)
		k, _ := slices.BinarySearchFunc(placed, b.offset, func(j int, off int64) int { return cmp.Compare(bufs[j].offset, off) })
		for k < len(placed) && bufs[placed[k]].offset == b.offset {
			k++
		}
		placed = slices.Insert(placed, k, i)
	}
	return arena
}
