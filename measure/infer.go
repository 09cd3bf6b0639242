package measure

import (
	"errors"
	"fmt"
	"slices"
	"sort"
	"strings"
	"sync"

	"github.com/loadline/loadline/model"
)

// InferOptions steers shape inference.
type InferOptions struct {
	// Dims gives values for symbolic dimensions of the graph inputs, by name
	// ("batch": 1). Unbound symbols stay symbols.
	Dims map[string]int64
	// Shapes gives graph inputs their whole shape, by input name; the
	// symbols on their axes are bound for every input that uses them.
	Shapes map[string][]int64
	// Values gives small graph inputs their contents, by input name, used
	// by constant folding as an initializer's are (bind.go).
	Values map[string][]float64
	// Lenient collects the bindings that do not fit the model in
	// Inference.BindingIssues instead of failing, and ignores them.
	Lenient bool
	// IgnoreDeclared makes inference ignore the value_info and output types
	// the file declares, so that every shape is derived (used when scoring
	// inference against ground truth).
	IgnoreDeclared bool
}

// Unresolved is a node whose output shapes could not be inferred.
type Unresolved struct {
	Node   string `json:"node"`
	Op     string `json:"op"`
	Reason string `json:"reason"`
}

// Inference is the result of shape inference on a model's main graph.
type Inference struct {
	Model *model.Model
	// Values holds what is known of each value of the main graph, by name
	// (Values.Get).
	Values *Values
	// Inputs and Outputs are the main graph's runtime inputs (initializers
	// excluded) and outputs, in file order.
	Inputs, Outputs []NamedValue
	// Unresolved lists nodes, main graph and subgraphs, whose outputs stay
	// unknown, in the order they were met.
	Unresolved []Unresolved
	// Subgraphs maps a control-flow node's name to what inference learned of
	// each of its subgraphs' values, for cost counting of their bodies.
	Subgraphs map[*model.Graph]*Values
	// Calls maps each call of a model-local function to the function's body
	// as instantiated for it, with the values inference found there, for
	// cost counting.
	Calls map[*model.Node]*CallBody
	// BindingIssues are the bindings that did not fit the model, with
	// InferOptions.Lenient (they were ignored).
	BindingIssues []BindingIssue
	// Has lists the runtime inputs and the names that bind them, for
	// messages.
	Has string
	// Dims are the dim bindings in force: InferOptions.Dims and those the
	// shape bindings imply.
	Dims map[string]int64
	// Decided lists the If nodes whose condition was known, so that only
	// one branch was inferred, in the order met.
	Decided []DecidedIf
	// Undecided lists the If nodes whose condition was not known, with
	// the graph inputs it depends on, in the order met.
	Undecided []UndecidedIf
	// indexes holds each graph's numbered values (index.go): the main
	// graph's, made before inference, which keeps its values by number;
	// a subgraph's, made when a pass first asks and shared by the passes
	// after it. mu guards the map, as Measure may run passes side by side.
	mu      sync.Mutex
	indexes map[*model.Graph]*graphIndex
}

// index is the numbered values of g, a graph of the model whose inferred
// values are vals, made on the first call.
func (inf *Inference) index(g *model.Graph, vals *Values) *graphIndex {
	inf.mu.Lock()
	defer inf.mu.Unlock()
	if x := inf.indexes[g]; x != nil {
		return x
	}
	if inf.indexes == nil {
		inf.indexes = map[*model.Graph]*graphIndex{}
	}
	x := newGraphIndex(g, vals)
	inf.indexes[g] = x
	return x
}

// DecidedIf is an If node whose condition inference knew: only Branch
// ("then_branch" or "else_branch") was inferred, costed and planned.
type DecidedIf struct {
	Node   string `json:"node"`
	Branch string `json:"branch"`
}

// UndecidedIf is an If node whose condition inference did not know, with
// the runtime inputs of the main graph its condition depends on.
type UndecidedIf struct {
	Node   string   `json:"node"`
	Inputs []string `json:"inputs"`
}

// CallBody is a model-local function's body instantiated for one call
// (attribute references replaced by the caller's attributes) and what
// inference knows of its values.
type CallBody struct {
	Graph  *model.Graph
	Values *Values
}

// NamedValue is a graph input or output with what is known of it.
type NamedValue struct {
	Name  string
	Value *Value
}

// maxGraphDepth bounds the nesting of subgraphs and function calls.
const maxGraphDepth = 64

// errDepth is returned when subgraphs nest deeper than maxGraphDepth.
var errDepth = errors.New("subgraphs nest too deep")

type engine struct {
	m          *model.Model
	opts       InferOptions
	unresolved []Unresolved
	subgraphs  map[*model.Graph]*Values
	calls      map[*model.Node]*CallBody
	work       int64 // units of inference work spent (work.go)
	workLimit  int64 // the model's budget (workBudget)
	depth      int
	quiet      int // >0 while evaluating speculatively (loop unrolling)
	// poisoned maps a value produced by an unresolved node to the name of
	// the first unresolved node upstream, so reasons point at the cause.
	poisoned map[string]string
	// producers maps each value name met to the node making it, and
	// inputs holds the main graph's runtime inputs, so that a condition
	// can be traced to the inputs that decide it.
	producers map[string]*model.Node
	inputs    map[string]bool
	// traceIfs is set when the model holds an If node anywhere: only
	// its rule asks producers, which otherwise need not be recorded.
	traceIfs  bool
	decided   []DecidedIf
	undecided []UndecidedIf
	cur       int // index of the node being inferred in its graph
	// nodeSlots holds, per depth of inferNodes calls (nodeDepth), the
	// trail, rule context and list of inputs of the node being inferred
	// there, reused from node to node: all are done with when the node is
	// (errors format the trail at once, rules copy the inputs they keep),
	// and the nodes of its bodies are one depth deeper. One of each
	// allocated per node was 13 MB on a graph of 100,000 nodes.
	nodeSlots []*nodeSlot
	nodeDepth int
	// memo holds the result of each function call already inferred, by
	// the call's signature (work.go), so that a body called again with the
	// same inputs is not inferred again.
	memo map[string]*callResult
	// shapes shares the storage of equal known shapes (shapes.go).
	shapes shapeCache
	// opsetKey is the signature of the operator sets in force, "" for the
	// model's own.
	opsetKey string
	// opsets holds the operator sets in force in a function's body, by
	// the caller's opsetKey and the function.
	opsets map[string]*mergedOpsets
	// ids numbers the attribute values that call signatures name by
	// identity (tensors, graphs, types).
	ids map[any]int
}

type scope struct {
	parent *scope
	vals   *Values
}

func (s *scope) lookup(name string) *Value {
	for ; s != nil; s = s.parent {
		if v, ok := s.vals.lookup(name); ok {
			return v
		}
	}
	return nil
}

func newEngine(m *model.Model, opts InferOptions) *engine {
	return &engine{m: m, opts: opts, workLimit: workBudget(m), subgraphs: map[*model.Graph]*Values{}, calls: map[*model.Node]*CallBody{}, poisoned: map[string]string{},
		memo: map[string]*callResult{}, ids: map[any]int{}, opsets: map[string]*mergedOpsets{},
		producers: map[string]*model.Node{}, inputs: map[string]bool{}}
}

// Infer infers the type, shape and, where small and static, the contents of
// every value of the model's main graph and of its subgraphs.
func Infer(m *model.Model, opts InferOptions) (*Inference, error) {
	if m == nil || m.Graph == nil {
		return nil, errors.New("model has no graph")
	}
	if m.Format == "tflite" {
		return inferStored(m, opts)
	}
	e := newEngine(m, opts)
	g := m.Graph
	// The main graph's values are kept by number (Values): the index
	// the passes after inference read is made first.
	x := numberGraph(g)
	sc := &scope{vals: numberedValues(x)}
	if e.traceIfs = holdsIf(m); e.traceIfs {
		e.producers = make(map[string]*model.Node, len(x.out))
	}
	res := &Inference{Model: m, Subgraphs: e.subgraphs, Calls: e.calls, indexes: map[*model.Graph]*graphIndex{g: x}}

	// The initializers' values in one block: a large model has tens of
	// thousands, and an allocation each would cost more than their use.
	inits := make([]Value, len(g.Initializers))
	// The shapes e.shapes does not share, one after another (a shape
	// handed out keeps its storage when the list grows).
	shapes := model.Shape{}
	stored := make([]storedContents, len(g.Initializers))
	for i, t := range g.Initializers {
		shape, ok := e.shapes.fromDims(t.Dims)
		if !ok {
			k := len(shapes)
			for _, d := range t.Dims {
				shapes = append(shapes, model.Known(d))
			}
			shape = shapes[k:len(shapes):len(shapes)]
		}
		stored[i].tensor = t
		inits[i] = Value{Type: model.TensorType(t.DType, shape), contents: &stored[i], Weight: true}
		sc.vals.set(t.Name, &inits[i])
	}
	for _, sp := range g.Sparse {
		if sp.Values != nil {
			sc.vals.set(sp.Values.Name, &Value{Type: model.TensorType(sp.Values.DType, model.KnownShape(sp.Dims...)), Weight: true})
		}
	}
	var ins []*model.ValueInfo
	for _, in := range g.Inputs {
		if _, isInit := sc.vals.lookup(in.Name); isInit {
			continue // IR < 4 lists initializers among the inputs too
		}
		ins = append(ins, in)
	}
	vals, dims, issues, err := boundInputs(g, ins, opts, !opts.Lenient)
	if err != nil {
		return nil, err
	}
	e.opts.Dims = dims
	res.Dims, res.BindingIssues = dims, issues
	res.Has = inputsText(ins, vals)
	for i, in := range ins {
		sc.vals.set(in.Name, vals[i])
		e.inputs[in.Name] = true
		res.Inputs = append(res.Inputs, NamedValue{in.Name, vals[i]})
	}
	if err := e.inferNodes(g, sc, &trail{seg: "graph", node: -1}); err != nil {
		return nil, err
	}
	res.Decided, res.Undecided = e.decided, e.undecided
	e.applyDeclared(g, sc, true)
	res.Values = sc.vals
	for _, out := range g.Outputs {
		v := sc.lookup(out.Name)
		if v == nil {
			return nil, fmt.Errorf("graph output %q is produced by no node, input or initializer", out.Name)
		}
		res.Outputs = append(res.Outputs, NamedValue{out.Name, v})
	}
	res.Unresolved = e.unresolved
	return res, nil
}

// holdsIf reports whether a node of m's graphs or functions is an If.
func holdsIf(m *model.Model) bool {
	var in func(g *model.Graph, depth int) bool
	nodes := func(ns []*model.Node, depth int) bool {
		for _, n := range ns {
			if n.Op == "If" {
				return true
			}
			for _, a := range n.Attrs {
				if in(a.Graph, depth+1) {
					return true
				}
				for _, sg := range a.Graphs {
					if in(sg, depth+1) {
						return true
					}
				}
			}
		}
		return false
	}
	in = func(g *model.Graph, depth int) bool {
		return g != nil && depth <= maxGraphDepth && nodes(g.Nodes, depth)
	}
	for _, f := range m.Functions {
		if nodes(f.Nodes, 0) {
			return true
		}
	}
	return in(m.Graph, 0)
}

// bindDims replaces the symbols named in dims by their values.
func bindDims(t model.Type, dims map[string]int64) model.Type {
	if len(dims) == 0 || !t.RankKnown {
		return t
	}
	t.Shape = t.Shape.Clone()
	for i, d := range t.Shape {
		if v, ok := dims[d.Symbol]; ok && !d.IsKnown() {
			t.Shape[i] = model.Known(v)
		}
	}
	if t.Elem != nil {
		el := bindDims(*t.Elem, dims)
		t.Elem = &el
	}
	return t
}

// declaredTypes returns the types the file declares for intermediate values
// and outputs of g.
func (e *engine) declaredTypes(g *model.Graph) map[string]model.Type {
	if e.opts.IgnoreDeclared {
		return nil
	}
	decl := map[string]model.Type{}
	for _, vi := range g.ValueInfo {
		decl[vi.Name] = bindDims(vi.Type, e.opts.Dims)
	}
	for _, vi := range g.Outputs {
		decl[vi.Name] = bindDims(vi.Type, e.opts.Dims)
	}
	return decl
}

// applyDeclared fills what inference left unknown with what the file
// declares; inferred facts win where both exist.
func (e *engine) applyDeclared(g *model.Graph, sc *scope, _ bool) {
	for name, t := range e.declaredTypes(g) {
		v := sc.vals.Get(name)
		if v == nil || v.Weight {
			continue
		}
		sc.vals.set(name, withDeclared(v, t))
	}
}

func withDeclared(v *Value, t model.Type) *Value {
	if t.Kind == model.KindUnknown {
		return v
	}
	nv := *v
	if !v.Type.RankKnown && v.Type.Kind != model.KindSequence {
		dt := v.Type.DType
		nv.Type = t
		if dt != model.Undefined {
			nv.Type.DType = dt
		}
		return &nv
	}
	if nv.Type.DType == model.Undefined {
		nv.Type.DType = t.DType
	}
	if t.RankKnown && v.Type.RankKnown && len(t.Shape) == len(v.Type.Shape) {
		s := v.Type.Shape.Clone()
		for i := range s {
			if !s[i].IsKnown() && t.Shape[i].IsKnown() {
				s[i] = t.Shape[i]
			}
		}
		nv.Type.Shape = s
	}
	return &nv
}

// inferNodes runs the nodes of g in file order within scope sc, charging
// each node's work to the engine's budget (work.go).
func (e *engine) inferNodes(g *model.Graph, sc *scope, path *trail) error {
	if len(e.nodeSlots) <= e.nodeDepth {
		e.nodeSlots = append(e.nodeSlots, &nodeSlot{})
	}
	slot := e.nodeSlots[e.nodeDepth]
	e.nodeDepth++
	defer func() { e.nodeDepth-- }()
	decl := e.declaredTypes(g)
	// The graph whose values sc keeps by number (the main graph): each
	// node's inputs and outputs are read and written by their numbers.
	var x *graphIndex
	if sc.vals.x != nil && sc.vals.x.g == g {
		x = sc.vals.x
	}
	for i, n := range g.Nodes {
		slot.ins = append(slot.ins[:0], make([]*Value, len(n.Inputs))...)
		ins := slot.ins
		for j, name := range n.Inputs {
			if name == "" {
				continue
			}
			var v *Value
			if x != nil {
				v = x.vals[x.ins(i)[j]]
			} else {
				v = sc.lookup(name)
			}
			if v == nil {
				return fmt.Errorf("%s.node[%d] (%s %q) reads %q, which no earlier node, graph input or initializer provides: the graph has a cycle or is not in topological order", path, i, n.Op, n.Name, name)
			}
			ins[j] = v
		}
		if e.traceIfs {
			for _, o := range n.Outputs {
				if o != "" {
					e.producers[o] = n
				}
			}
		}
		e.cur = i
		slot.at = trail{up: path, node: i}
		at := &slot.at
		if err := e.charge(1, at, n); err != nil {
			return err
		}
		outs, err := e.inferNode(n, ins, sc, at, &slot.c)
		if err != nil {
			if stops(err) {
				return err
			}
			root := e.markUnresolved(n, i, err.Error())
			for _, in := range n.Inputs {
				if from := e.poisoned[in]; from != "" {
					root = from
					break
				}
			}
			for _, o := range n.Outputs {
				e.poisoned[o] = root
			}
			outs = nil
		}
		// Charged after the rule: a stored tensor's contents count once
		// a rule has read them (Value.Const), not for being passed on.
		if err := e.charge(valuesSize(ins)+valuesSize(outs), at, n); err != nil {
			return err
		}
		for j, name := range n.Outputs {
			if name == "" {
				continue
			}
			var v *Value
			if j < len(outs) {
				v = outs[j]
			}
			if v == nil {
				v = &Value{Type: model.Type{Kind: model.KindTensor}}
			}
			if t, ok := decl[name]; ok {
				v = withDeclared(v, t)
			}
			if v.Type.RankKnown {
				v.Type.Shape = e.shapes.intern(v.Type.Shape)
			}
			if x != nil {
				x.vals[x.outs(i)[j]] = v
			} else {
				sc.vals.set(name, v)
			}
		}
	}
	return nil
}

// stops reports whether err must end inference rather than mark one node
// unresolved: nesting too deep, the work budget spent, or a fatal error.
func stops(err error) bool {
	return errors.Is(err, errDepth) || errors.Is(err, errWork) || errors.Is(err, errFatal)
}

// errFatal wraps errors that must stop inference rather than mark a node.
var errFatal = errors.New("fatal")

func (e *engine) markUnresolved(n *model.Node, i int, reason string) string {
	name := n.Name
	if name == "" {
		name = fmt.Sprintf("%s#%d", n.Op, i)
	}
	if e.quiet == 0 {
		e.unresolved = append(e.unresolved, Unresolved{Node: name, Op: n.Op, Reason: reason})
	}
	return name
}

// nodeSlot is the storage of one depth's node trail and rule context
// (engine.nodeSlots).
type nodeSlot struct {
	at  trail
	c   ctx
	ins []*Value // the node's inputs (rules copy what they keep of them)
}

// inferNode dispatches to the operator's rule, a model-local function, or
// reports the operator as unknown; the rule's context is c, overwritten.
func (e *engine) inferNode(n *model.Node, ins []*Value, sc *scope, path *trail, c *ctx) ([]*Value, error) {
	domain := n.Domain
	if domain == "ai.onnx" {
		domain = ""
	}
	if f := e.m.FindFunction(n.Domain, n.Op); f != nil {
		return e.inferFunction(f, n, ins, sc, path)
	}
	key := n.Op
	if domain != "" {
		key = domain + ":" + n.Op
	}
	rule, ok := opRules()[key]
	if !ok {
		if domain != "" {
			return nil, fmt.Errorf("no shape rule for operator %s of domain %q", n.Op, n.Domain)
		}
		return nil, fmt.Errorf("no shape rule for operator %s", n.Op)
	}
	for j, v := range ins {
		if v != nil && v.Type.Kind == model.KindTensor && !v.Type.RankKnown && !rule.rankFree {
			if from := e.poisoned[n.Inputs[j]]; from != "" {
				return nil, fmt.Errorf("downstream of unresolved node %s", from)
			}
			return nil, fmt.Errorf("input %d (%q) has unknown shape", j, n.Inputs[j])
		}
	}
	if len(n.Outputs) == 0 {
		// Rules name what they make after the first output.
		return nil, fmt.Errorf("the node declares no outputs")
	}
	*c = ctx{e: e, node: n, in: ins, sc: sc, path: path, opset: e.opsetFor(domain), idx: e.cur}
	outs, err := rule.infer(c)
	if err != nil {
		return nil, err
	}
	return outs, nil
}

func (e *engine) opsetFor(domain string) int64 {
	v := e.m.Opset(domain)
	if v == 0 && domain == "" {
		return 21
	}
	return v
}

// inferFunction infers a call of a model-local function by inferring its
// body in a fresh scope, with the caller's attributes substituted. A call
// whose signature (the function, the attributes, the operator sets in
// force and what is known of its inputs) was met before reuses that
// result: a body sees nothing but its inputs and attributes, so the result
// would be the same.
func (e *engine) inferFunction(f *model.Function, call *model.Node, ins []*Value, sc *scope, path *trail) ([]*Value, error) {
	if e.depth >= maxGraphDepth {
		return nil, fmt.Errorf("%s: %w (function %s)", path, errDepth, f.Name)
	}
	var attrs map[string]*model.Attr
	if len(f.AttrProtos)+len(call.Attrs) > 0 {
		attrs = make(map[string]*model.Attr, len(f.AttrProtos)+len(call.Attrs))
		for _, a := range f.AttrProtos {
			attrs[a.Name] = a
		}
		for _, a := range call.Attrs {
			attrs[a.Name] = a
		}
	}
	key := e.callKey(f, attrs, ins)
	if err := e.charge(int64(len(key))/keyBytesPerUnit, path, call); err != nil {
		return nil, err
	}
	if r := e.memo[key]; r != nil {
		if e.quiet == 0 && e.calls != nil {
			e.calls[call] = r.body
		}
		return r.outputs(len(call.Outputs)), nil
	}
	e.depth++
	defer func() { e.depth-- }()
	fs := &scope{vals: namedValues(len(f.Inputs) + len(f.Nodes))}
	for i, name := range f.Inputs {
		if i < len(ins) && ins[i] != nil {
			fs.vals.set(name, ins[i])
		}
	}
	// Each call gets its own copy of the body's nodes: Inference.Calls
	// tells the calls inside it apart by node.
	body := &model.Graph{Name: f.Name, Nodes: make([]*model.Node, len(f.Nodes))}
	copies := make([]model.Node, len(f.Nodes))
	for i, n := range f.Nodes {
		nn := &copies[i]
		*nn = *n
		body.Nodes[i] = nn
		if !slices.ContainsFunc(n.Attrs, func(a *model.Attr) bool { return a.RefName != "" }) {
			continue // no reference to substitute: the attributes are shared
		}
		nn.Attrs = nil
		for _, a := range n.Attrs {
			if a.RefName != "" {
				ref, ok := attrs[a.RefName]
				if !ok {
					continue
				}
				ra := *ref
				ra.Name = a.Name
				nn.Attrs = append(nn.Attrs, &ra)
				continue
			}
			nn.Attrs = append(nn.Attrs, a)
		}
	}
	savedOpsets, savedKey := e.m.Opsets, e.opsetKey
	if len(f.Opsets) > 0 {
		mk := savedKey + "\x00" + f.Domain + "\x00" + f.Name
		m := e.opsets[mk]
		if m == nil {
			merged := map[string]int64{}
			for k, v := range savedOpsets {
				merged[k] = v
			}
			for k, v := range f.Opsets {
				merged[k] = v
			}
			if err := e.charge(int64(len(merged))/workElemsPerUnit, path, call); err != nil {
				return nil, err
			}
			m = &mergedOpsets{merged, opsetSignature(merged)}
			e.opsets[mk] = m
		}
		e.m.Opsets, e.opsetKey = m.opsets, m.key
	}
	err := e.inferNodes(body, fs, path.in(".function("+f.Name+")"))
	e.m.Opsets, e.opsetKey = savedOpsets, savedKey
	if err != nil {
		return nil, err
	}
	r := &callResult{body: &CallBody{Graph: body, Values: fs.vals}}
	for _, name := range f.Outputs {
		r.outs = append(r.outs, fs.vals.Get(name))
	}
	e.memo[key] = r
	if e.quiet == 0 && e.calls != nil {
		e.calls[call] = r.body
	}
	return r.outputs(len(call.Outputs)), nil
}

// inferSubgraph infers a control-flow body. bound gives values for the
// body's formal inputs (nil entries fall back to the declared type).
func (e *engine) inferSubgraph(g *model.Graph, outer *scope, bound []*Value, path *trail) ([]*Value, *scope, error) {
	if e.depth >= maxGraphDepth {
		return nil, nil, fmt.Errorf("%s: %w (limit %d)", path, errDepth, maxGraphDepth)
	}
	e.depth++
	defer func() { e.depth-- }()
	sc := &scope{parent: outer, vals: namedValues(0)}
	for _, t := range g.Initializers {
		sc.vals.set(t.Name, tensorValue(t))
	}
	for i, in := range g.Inputs {
		if i < len(bound) && bound[i] != nil {
			sc.vals.set(in.Name, bound[i])
		} else {
			sc.vals.set(in.Name, &Value{Type: bindDims(in.Type, e.opts.Dims)})
		}
	}
	if err := e.inferNodes(g, sc, path); err != nil {
		return nil, nil, err
	}
	e.applyDeclared(g, sc, false)
	if e.quiet == 0 {
		e.subgraphs[g] = sc.vals
	}
	outs := make([]*Value, len(g.Outputs))
	for i, o := range g.Outputs {
		v := sc.lookup(o.Name)
		if v == nil {
			return nil, nil, fmt.Errorf("%s: subgraph output %q is produced by nothing", path, o.Name)
		}
		outs[i] = v
	}
	return outs, sc, nil
}

// UnresolvedSummary prints unresolved nodes one per line, for messages.
func (r *Inference) UnresolvedSummary() string {
	lines := make([]string, len(r.Unresolved))
	for i, u := range r.Unresolved {
		lines[i] = fmt.Sprintf("%s (%s): %s", u.Node, u.Op, u.Reason)
	}
	sort.Strings(lines)
	return strings.Join(lines, "\n")
}

// inputsOf lists the main graph's runtime inputs that value name depends
// on, through the nodes met so far (and the subgraphs they hold), sorted.
func (e *engine) inputsOf(name string) []string {
	seen := map[string]bool{}
	var out []string
	stack := []string{name}
	for len(stack) > 0 && len(seen) < 1<<16 {
		v := stack[len(stack)-1]
		stack = stack[:len(stack)-1]
		if v == "" || seen[v] {
			continue
		}
		seen[v] = true
		if e.inputs[v] {
			out = append(out, v)
			continue
		}
		n := e.producers[v]
		if n == nil {
			continue
		}
		stack = append(stack, n.Inputs...)
		for _, a := range n.Attrs {
			for _, g := range append([]*model.Graph{a.Graph}, a.Graphs...) {
				if g != nil {
					forEachNestedInput(g, func(s string) { stack = append(stack, s) })
				}
			}
		}
	}
	sort.Strings(out)
	return out
}
