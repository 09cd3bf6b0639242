package measure

import (
	"fmt"
	"math"
	"strings"

	"github.com/loadline/loadline/model"
)

// Load-time tensors. Definition (README "Conventions", `loadline measure
// --help`):
//
//   - A tensor is fixed when its values are known before the model runs: an
//     initializer, a Constant's output (both stored in the file), a value
//     inference knows (staticSet: the Shape of a tensor of static shape,
//     a --value binding), and the output of a node a runtime can compute
//     once, at load time (foldsAtLoad: at least one input, every input
//     fixed, no subgraph, not random). State kept between invocations
//     (TFLite variable tensors) is not fixed.
//   - Such a node's output is generated when it holds more than one element
//     and more elements than the values it is computed from: the elements of
//     the fixed inputs at its data positions (not the shape, index,
//     statistics or quantization-metadata positions of shapeOperands),
//     summed back through the load-time nodes that computed them down to
//     stored constants and inferred values. ConstantOfShape, Range, EyeLike,
//     Expand, Tile and a broadcasting Add or Where of constants generate; a
//     Transpose, Cast, Reshape, DequantizeLinear, Gather or Concat of
//     constants does not: its values are those of the constants it re-views,
//     which count once, as themselves (params.go).
//   - A generated tensor read by a node computed at run time (a subgraph's
//     nodes are), or that is a graph output, is held: the file does not
//     store it, so the device computes it into RAM. A generated tensor read
//     only by other load-time nodes is scratch of loading and counts
//     nowhere; what it becomes does.
//   - A held tensor computed from stored constants alone is held for the
//     whole run. Read at a data position of a run-time node (where a stored
//     constant is a parameter), it is a parameter: it counts in params (its
//     elements), param_bytes (elements × dtype size) and
//     generated_param_bytes, which ram counts wherever the device keeps its
//     weights. Read only at shape or index positions, or only a graph
//     output, it is constant memory of the activation views: live at every
//     step of the graph and deployed views.
//   - A held tensor computed from an inferred value (the shape of a run-time
//     tensor, a bound input: ConstantOfShape(Shape(x)), Expand(mask,
//     Shape(scores))) is an activation like any node output: live from its
//     producer's step through its last run-time reader's (a graph output:
//     the last step), in both views. So is a generated tensor of a TFLite
//     model: the microcontroller runtime computes every operator at run
//     time, and its runtime view plans the tensor in the arena.
//
// Inference holds the values of tensors up to maxFoldElements only; the
// rule above does not depend on them, so a 4096×4096 ConstantOfShape counts
// as a 64×64 one does.

// heldTensor is a generated tensor the device holds (static.go's rule).
type heldTensor struct {
	name     string
	producer int  // index of the node computing it
	last     int  // step of its last run-time reader; the last step for a graph output
	stored   bool // computed from stored constants alone
	weight   bool // read at a data position of a run-time node
}

// foldsAtLoad reports whether node n of a graph, whose inputs are numbered
// ins, can be computed once, at load time: it has at least one input,
// every input is fixed, and it runs no subgraph and draws no random
// numbers.
func foldsAtLoad(n *model.Node, ins []int32, fixed func(int32) bool) bool {
	if randomOps[n.Op] {
		return false
	}
	for _, a := range n.Attrs {
		if a.Graph != nil || len(a.Graphs) > 0 {
			return false
		}
	}
	inputs := 0
	for _, id := range ins {
		if id < 0 {
			continue
		}
		if !fixed(id) {
			return false
		}
		inputs++
	}
	return inputs > 0
}

// heldTensors lists the generated tensors of graph g (its own nodes, not
// those of its subgraphs; vals are its inferred values) that the device
// holds, in the order their producers appear. The list is made once per
// graph, kept with its index: the weights and the graph view both read it.
func heldTensors(inf *Inference, g *model.Graph, vals *Values) []heldTensor {
	x := inf.index(g, vals)
	x.heldOnce.Do(func() { x.held = findHeld(x, g) })
	return x.held
}

// findHeld is heldTensors for the numbered values x of g.
func findHeld(x *graphIndex, g *model.Graph) []heldTensor {
	static := newStaticSet(g, x)
	loaded := make([]bool, len(x.names)) // outputs of load-time nodes
	src := make([]int64, len(x.names))   // elements each is computed from
	stored := make([]bool, len(x.names)) // computed from stored constants alone
	fixed := func(id int32) bool {
		if id < 0 {
			return false
		}
		if loaded[id] {
			return true
		}
		v := x.vals[id]
		return static.has(id) && (v == nil || !v.State)
	}
	elements := func(id int32) (int64, bool) {
		v := x.vals[id]
		if v == nil || v.Type.Kind != model.KindTensor || !v.Type.RankKnown {
			return 0, false
		}
		return v.Type.Shape.Elements()
	}
	var generated map[int32]int // id → producer
	var order []int32
	runTime := make([]bool, len(g.Nodes))
	for i, n := range g.Nodes {
		ins := x.ins(i)
		if !foldsAtLoad(n, ins, fixed) {
			runTime[i] = true
			continue
		}
		var from int64
		// The microcontroller runtime computes every TFLite operator at
		// run time, in its arena (runtime.go): no TFLite output is held
		// from load time.
		fromStored := !strings.HasPrefix(n.Domain, "tflite")
		for j, id := range ins {
			if id < 0 {
				continue
			}
			if loaded[id] {
				fromStored = fromStored && stored[id]
			} else if v := x.vals[id]; v == nil || !v.Weight {
				fromStored = false // inferred, not stored
			}
			if isShapeOperand(n, j) || from == math.MaxInt64 {
				continue
			}
			e, ok := src[id], true
			if !loaded[id] {
				e, ok = elements(id)
			}
			if !ok || e < 0 || from > math.MaxInt64-e {
				from = math.MaxInt64 // not known: never taken for generated
				continue
			}
			from += e
		}
		for _, id := range x.outs(i) {
			if id < 0 {
				continue
			}
			loaded[id], src[id], stored[id] = true, from, fromStored
			// Scalars are not counted, as stored ones are not (params.go).
			e, ok := elements(id)
			if (ok && e > from && e > 1) || (!ok && from == 0) {
				if generated == nil {
					generated = map[int32]int{}
				}
				generated[id] = i
				order = append(order, id)
			}
		}
	}
	if len(generated) == 0 {
		return nil
	}

	// Who reads each generated tensor: a run-time node at a data position
	// makes it a weight; any run-time read, or a graph output, makes it held.
	last := map[int32]int{}
	weight := map[int32]bool{}
	read := func(id int32, step int, data bool) {
		if _, ok := generated[id]; ok {
			last[id] = max(last[id], step)
			weight[id] = weight[id] || data
		}
	}
	var readIn func(sg *model.Graph, step, depth int)
	readIn = func(sg *model.Graph, step, depth int) {
		if sg == nil || depth > maxGraphDepth {
			return
		}
		for _, n := range sg.Nodes {
			for j, name := range n.Inputs {
				read(x.lookup(name), step, !isShapeOperand(n, j))
			}
			for _, a := range n.Attrs {
				readIn(a.Graph, step, depth+1)
				for _, b := range a.Graphs {
					readIn(b, step, depth+1)
				}
			}
		}
		for _, o := range sg.Outputs {
			read(x.lookup(o.Name), step, false)
		}
	}
	for i, n := range g.Nodes {
		if !runTime[i] {
			continue
		}
		for j, id := range x.ins(i) {
			read(id, i, !isShapeOperand(n, j))
		}
		// A subgraph body runs at run time: its reads of the enclosing
		// graph's tensors are run-time reads, at the body node's position,
		// at its control-flow node's step.
		for _, a := range n.Attrs {
			readIn(a.Graph, i, 1)
			for _, b := range a.Graphs {
				readIn(b, i, 1)
			}
		}
	}
	for _, o := range g.Outputs {
		read(x.lookup(o.Name), max(1, len(g.Nodes))-1, false)
	}
	var out []heldTensor
	for _, id := range order {
		if l, ok := last[id]; ok {
			out = append(out, heldTensor{name: x.names[id], producer: generated[id], last: l, stored: stored[id], weight: weight[id]})
		}
	}
	return out
}

// heldConstants are the held tensors of g that are not weights, as
// lifetimes for the activation views over g's steps steps: those computed
// from stored constants alone over every step, the others from their
// producer's step through their last reader's. A held tensor whose size is
// not static, weight or not, is listed as unresolved instead: the memory
// figures (and ram, which counts the generated weights) are then lower
// bounds.
func heldConstants(inf *Inference, g *model.Graph, vals *Values, steps int) ([]Lifetime, []Unresolved) {
	var lts []Lifetime
	var unres []Unresolved
	for _, h := range heldTensors(inf, g, vals) {
		size, reason := tensorBytes(vals.Get(h.name))
		if reason != "" {
			n := g.Nodes[h.producer]
			unres = append(unres, Unresolved{Node: nodeLabel(n, h.producer), Op: n.Op,
				Reason: fmt.Sprintf("memory unknown: %s (tensor %q, computed at load time)", reason, h.name)})
			continue
		}
		switch {
		case !h.stored:
			lts = append(lts, Lifetime{Name: h.name, Size: size, First: h.producer, Last: max(h.producer, h.last)})
		case !h.weight:
			lts = append(lts, Lifetime{Name: h.name, Size: size, First: 0, Last: steps - 1})
		}
	}
	return lts, unres
}

// generatedWeights are the held tensors read as weights in the main graph
// of inf and in every subgraph inference reached, as parameters without
// stored values.
func generatedWeights(inf *Inference) []ParamTensor {
	var out []ParamTensor
	var walk func(g *model.Graph, vals *Values, depth int)
	walk = func(g *model.Graph, vals *Values, depth int) {
		if g == nil || vals == nil || depth > maxGraphDepth {
			return
		}
		for _, h := range heldTensors(inf, g, vals) {
			v := vals.Get(h.name)
			if !h.stored || !h.weight || v == nil {
				continue
			}
			e, ok := v.Type.Shape.Elements()
			b := v.Type.DType.StorageBytes(e)
			if !ok || e > maxTensorBytes || b < 0 || b > maxTensorBytes {
				continue // listed as unresolved by heldConstants
			}
			out = append(out, ParamTensor{Name: h.name, DType: v.Type.DType, Elements: e, Bytes: b, Zeros: -1, Generated: true})
		}
		for _, n := range g.Nodes {
			for _, a := range n.Attrs {
				for _, sg := range append([]*model.Graph{a.Graph}, a.Graphs...) {
					if sg != nil {
						walk(sg, inf.Subgraphs[sg], depth+1)
					}
				}
			}
		}
	}
	walk(inf.Model.Graph, inf.Values, 0)
	return out
}
