package measure

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"

	"github.com/loadline/loadline/model"
)

// Inference work. Definition (README "Conventions", `loadline measure
// --help`): inference is charged in units of work, one for every node it
// evaluates — each node of the main graph, of a subgraph every time the
// subgraph is inferred (both branches of an If, every unrolled iteration of
// a Loop, every item of a SequenceMap, a Scan body), and of a model-local
// function's body every time it is instantiated — plus one unit for every
// workElemsPerUnit dims, held elements (folded, or stored and read by a
// rule) and sequence items that a node reads or produces. A function called
// again with the same signature (the same function, attributes, operator
// sets and inputs) reuses the result of the first call and costs only its
// signature. A model whose inference needs more than its budget —
// maxInferWork units plus workPerStoredNode for every node stored in the
// file (main graph, subgraphs and function bodies, each counted once) — is
// refused with an error that names the node where the budget ran out:
// nested calls, loops and branches multiply work, so that a file of a few
// kilobytes could otherwise keep a check busy for hours, while the work of
// a large graph inferred once grows only with the file.
const (
	// maxInferWork is the budget of any file: 2^19 units, about half a
	// million node evaluations. The most any model of ONNX's backend test
	// suite needs is 118 units (measured); a loop unrolled to its limit
	// (maxUnroll = 4,096 iterations) of a 100-node body is 409,600. Spent
	// in full by a hostile file, the budget costs a few seconds and about
	// 400 MB (work_test.go, TestWorkBoundDistinctCalls).
	maxInferWork = 1 << 19
	// workPerStoredNode is the budget added for every node the file
	// stores: a graph inferred once needs one unit a node and a few more
	// for its dims (measured: 1.3 units a node on the 100,000-node
	// benchmark model, benchmodel.BuildNodes), so a file of any size
	// can be inferred once over, while what a small file can make nested
	// work multiply to stays near maxInferWork.
	workPerStoredNode = 8
	// workElemsPerUnit is how many dims, held elements or sequence items
	// cost one unit on top of a node's own unit.
	workElemsPerUnit = 16
	// keyBytesPerUnit is how many bytes of a call signature cost one unit.
	keyBytesPerUnit = 128
)

// workBudget is the inference work budget of m: maxInferWork plus
// workPerStoredNode for every node m stores, in every graph and function
// body, each graph counted once however often it is referenced.
func workBudget(m *model.Model) int64 {
	seen := map[*model.Graph]bool{}
	var nodes int64
	var stack []*model.Graph
	push := func(g *model.Graph) {
		if g != nil && !seen[g] {
			seen[g] = true
			stack = append(stack, g)
		}
	}
	pushAttrs := func(ns []*model.Node) {
		for _, n := range ns {
			for _, a := range n.Attrs {
				push(a.Graph)
				for _, sg := range a.Graphs {
					push(sg)
				}
			}
		}
	}
	push(m.Graph)
	for _, f := range m.Functions {
		nodes += int64(len(f.Nodes))
		pushAttrs(f.Nodes)
	}
	for len(stack) > 0 {
		g := stack[len(stack)-1]
		stack = stack[:len(stack)-1]
		nodes += int64(len(g.Nodes))
		pushAttrs(g.Nodes)
	}
	return maxInferWork + workPerStoredNode*nodes
}

// errWork is wrapped by the error that stops inference when the work
// budget is spent.
var errWork = errors.New("inference work limit reached")

// WorkLimitError is the error of a model whose inference needs more than
// the work budget; it wraps errWork.
type WorkLimitError struct {
	// Where is the node at which the budget ran out
	// ("graph.node[0].function(F24).node[1]…").
	Where string
	// Op is that node's operator.
	Op string
	// Limit is the budget, in units.
	Limit int64
}

func (e *WorkLimitError) Error() string {
	return fmt.Sprintf("%s (%s): shape inference stopped after %d units of work (the limit: one unit per node evaluated, "+
		"counting every call of a model-local function, every unrolled loop iteration and every inferred subgraph, plus one per %d dims or folded elements); "+
		"nested function calls, loops or branches multiply the work of this model past what any deployable model needs, so it is refused rather than left to stall the check",
		e.Where, e.Op, e.Limit, workElemsPerUnit)
}

func (e *WorkLimitError) Unwrap() error { return errWork }

// charge adds units of work done at path (node n) and fails once the total
// passes the model's budget (workBudget).
func (e *engine) charge(units int64, path *trail, n *model.Node) error {
	e.work += units
	if e.work <= e.workLimit {
		return nil
	}
	return &WorkLimitError{Where: path.String(), Op: n.Op, Limit: e.workLimit}
}

// valuesSize is the count of dims, folded elements and sequence items of
// vs, in units of work (workElemsPerUnit of them a unit).
func valuesSize(vs []*Value) int64 {
	var n int64
	for _, v := range vs {
		if v == nil {
			continue
		}
		n += int64(len(v.Type.Shape)) + int64(len(v.Seq()))
		if d := v.heldData(); d != nil {
			n += int64(d.Len())
		}
	}
	return n / workElemsPerUnit
}

// callResult is what a function call's inference found: the outputs in the
// function's order and the instantiated body.
type callResult struct {
	outs []*Value
	body *CallBody
}

// outputs returns the results for a call node with n outputs.
func (r *callResult) outputs(n int) []*Value {
	out := make([]*Value, n)
	copy(out, r.outs)
	return out
}

// callKey is the signature of a call of f: the function, the attributes in
// force, the operator sets, whether inference is speculative (unrolling a
// loop, when unresolved nodes are not listed), and everything inference
// knows of the inputs. Two calls with one signature infer alike.
func (e *engine) callKey(f *model.Function, attrs map[string]*model.Attr, ins []*Value) string {
	var b []byte
	b = appendStr(b, f.Domain)
	b = appendStr(b, f.Name)
	b = appendStr(b, e.opsetKey)
	b = append(b, byte(min(e.quiet, 1)))
	names := make([]string, 0, len(attrs))
	for name := range attrs {
		names = append(names, name)
	}
	slices.Sort(names)
	for _, name := range names {
		b = appendStr(b, name)
		b = e.appendAttr(b, attrs[name])
	}
	b = binary.AppendUvarint(b, uint64(len(ins)))
	for _, v := range ins {
		b = appendValue(b, v, 0)
	}
	return string(b)
}

func appendStr(b []byte, s string) []byte {
	b = binary.AppendUvarint(b, uint64(len(s)))
	return append(b, s...)
}

func appendInt(b []byte, v int64) []byte { return binary.AppendVarint(b, v) }

// id numbers a value that signatures name by identity.
func (e *engine) id(p any) int64 {
	if id, ok := e.ids[p]; ok {
		return int64(id)
	}
	e.ids[p] = len(e.ids) + 1
	return int64(len(e.ids))
}

// appendAttr writes an attribute's kind and value; tensors, graphs and
// types by identity.
func (e *engine) appendAttr(b []byte, a *model.Attr) []byte {
	b = append(b, byte(a.Kind))
	b = appendStr(b, a.RefName)
	b = appendInt(b, a.Int)
	b = appendInt(b, int64(math.Float32bits(a.Float)))
	b = appendStr(b, a.String)
	b = appendInt(b, int64(len(a.Ints)))
	for _, x := range a.Ints {
		b = appendInt(b, x)
	}
	b = appendInt(b, int64(len(a.Floats)))
	for _, x := range a.Floats {
		b = appendInt(b, int64(math.Float32bits(x)))
	}
	b = appendInt(b, int64(len(a.Strings)))
	for _, x := range a.Strings {
		b = appendStr(b, x)
	}
	b = appendInt(b, e.ptr(a.Tensor))
	b = appendInt(b, e.ptr(a.Graph))
	b = appendInt(b, e.ptr(a.Sparse))
	b = appendInt(b, e.ptr(a.Type))
	b = appendInt(b, int64(len(a.Tensors)+len(a.Graphs)+len(a.Types)))
	for _, t := range a.Tensors {
		b = appendInt(b, e.ptr(t))
	}
	for _, g := range a.Graphs {
		b = appendInt(b, e.ptr(g))
	}
	for i := range a.Types {
		b = appendInt(b, e.ptr(&a.Types[i]))
	}
	return b
}

// ptr is id for a non-nil pointer, 0 for nil.
func (e *engine) ptr(p any) int64 {
	switch q := p.(type) {
	case *model.Tensor:
		if q == nil {
			return 0
		}
	case *model.Graph:
		if q == nil {
			return 0
		}
	case *model.SparseTensor:
		if q == nil {
			return 0
		}
	case *model.Type:
		if q == nil {
			return 0
		}
	}
	return e.id(p)
}

// appendValue writes what inference knows of v.
func appendValue(b []byte, v *Value, depth int) []byte {
	if v == nil {
		return append(b, 0)
	}
	flags := byte(1)
	if v.SeqKnown() {
		flags |= 2
	}
	if v.Weight {
		flags |= 4
	}
	if v.Absent {
		flags |= 8
	}
	b = append(b, flags)
	b = appendType(b, &v.Type, depth)
	if d := v.Const(); d != nil {
		b = append(b, d.kind())
		b = appendInt(b, int64(d.Len()))
		for _, x := range d.Ints {
			b = appendDim(b, x)
		}
		for _, x := range d.Floats {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(x))
		}
		for _, x := range d.Strings {
			b = appendStr(b, x)
		}
	} else {
		b = append(b, 0)
	}
	b = appendInt(b, int64(len(v.Seq())))
	if depth < maxGraphDepth {
		for _, it := range v.Seq() {
			b = appendValue(b, it, depth+1)
		}
	}
	return b
}

func appendType(b []byte, t *model.Type, depth int) []byte {
	b = append(b, byte(t.Kind))
	b = appendInt(b, int64(t.DType))
	if t.RankKnown {
		b = appendInt(b, int64(len(t.Shape)))
		for _, d := range t.Shape {
			b = appendDim(b, d)
		}
	} else {
		b = appendInt(b, -1)
	}
	if t.Elem != nil && depth < maxGraphDepth {
		b = append(b, 1)
		return appendType(b, t.Elem, depth+1)
	}
	return append(b, 0)
}

func appendDim(b []byte, d model.Dim) []byte {
	if d.IsKnown() {
		b = append(b, 0)
		return appendInt(b, d.Value)
	}
	b = append(b, 1)
	return appendStr(b, d.Symbol)
}

// mergedOpsets is the operator sets in force in a function's body and
// their signature.
type mergedOpsets struct {
	opsets map[string]int64
	key    string
}

// opsetSignature is a canonical form of a set of operator set imports.
func opsetSignature(m map[string]int64) string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	var sb strings.Builder
	for _, k := range keys {
		fmt.Fprintf(&sb, "%q=%d;", k, m[k])
	}
	return sb.String()
}

// trail is where inference is, as the path errors print
// ("graph.node[3].body.node[1]"); it is built a link per node and turned
// into text only for a message.
type trail struct {
	up   *trail
	seg  string // text after up's: "graph", ".body", ".function(F)"
	node int    // ≥ 0: the link is ".node[node]"
}

// in is the trail of a subgraph or function body seg of the node at t.
func (t *trail) in(seg string) *trail { return &trail{up: t, seg: seg, node: -1} }

// maxTrailLinks bounds how many links a message prints in full; deeper
// trails keep their first and last links around an ellipsis.
const maxTrailLinks = 24

func (t *trail) String() string {
	if t == nil {
		return ""
	}
	var links []string
	for ; t != nil; t = t.up {
		if t.node >= 0 {
			links = append(links, fmt.Sprintf(".node[%d]", t.node))
		} else {
			links = append(links, t.seg)
		}
	}
	slices.Reverse(links)
	if len(links) > maxTrailLinks {
		keep := maxTrailLinks / 2
		skipped := len(links) - 2*keep
		links = append(append(links[:keep:keep], fmt.Sprintf("…(%d more)…", skipped)), links[len(links)-keep:]...)
	}
	return strings.Join(links, "")
}
