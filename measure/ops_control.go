package measure

import (
	"fmt"
	"strings"

	"github.com/loadline/loadline/model"
)

// Control flow, sequences and optionals. Subgraphs are inferred with their
// outer scope visible. A loop whose state is entirely known statically (the
// trip counts computed by exporters' expansions of Range and friends) is
// unrolled, bounded by maxUnroll, so its outputs get exact shapes.

var controlOps = map[string]opRule{}

// The rows are set in init: control-flow rules call back into the engine,
// which reads the table, and Go forbids that cycle in a variable initializer.
func init() {
	for k, r := range map[string]opRule{
		"If":                 {infer: inferIf, rankFree: true},
		"Loop":               {infer: inferLoop, rankFree: true},
		"Scan":               {infer: inferScan, rankFree: true},
		"SequenceEmpty":      {infer: inferSequenceEmpty},
		"SequenceConstruct":  {infer: inferSequenceConstruct},
		"SequenceInsert":     {infer: inferSequenceInsert, rankFree: true},
		"SequenceErase":      {infer: inferSequenceErase, rankFree: true},
		"SequenceAt":         {infer: inferSequenceAt, rankFree: true},
		"SequenceLength":     {infer: inferSequenceLength, rankFree: true},
		"SplitToSequence":    {infer: inferSplitToSequence},
		"ConcatFromSequence": {infer: inferConcatFromSequence, rankFree: true},
		"SequenceMap":        {infer: inferSequenceMap, rankFree: true},
		"Optional":           {infer: inferOptional, rankFree: true},
		"OptionalHasElement": {infer: inferOptionalHasElement, rankFree: true},
		"OptionalGetElement": {infer: inferOptionalGetElement, rankFree: true},
		"StringNormalizer":   {infer: inferStringNormalizer},
		"TfIdfVectorizer":    {infer: inferTfIdf},
	} {
		controlOps[k] = r
	}
}

// maxUnroll bounds the iterations of a statically known loop that inference
// runs; past it the trip count stays symbolic.
const maxUnroll = 4096

func graphAttr(c *ctx, name string) (*model.Graph, error) {
	a := c.attr(name)
	if a == nil || a.Graph == nil {
		return nil, fmt.Errorf("attribute %q holds no graph", name)
	}
	return a.Graph, nil
}

// mergeValues combines what two branches say about one output: equal dims
// stay, different ones become a symbol; different ranks lose the shape.
func mergeValues(a, b *Value, name string) *Value {
	if a == nil {
		return b
	}
	if b == nil {
		return a
	}
	if a.Type.Kind == model.KindSequence || b.Type.Kind == model.KindSequence {
		if a.SeqKnown() && b.SeqKnown() && len(a.Seq()) == len(b.Seq()) {
			seq := &sequence{known: true}
			for i := range a.Seq() {
				seq.items = append(seq.items, mergeValues(a.Seq()[i], b.Seq()[i], fmt.Sprintf("%s_%d", name, i)))
			}
			return &Value{Type: a.Type, seq: seq}
		}
		return &Value{Type: a.Type}
	}
	dt := a.Type.DType
	if dt == model.Undefined {
		dt = b.Type.DType
	}
	if !a.Type.RankKnown || !b.Type.RankKnown || len(a.Type.Shape) != len(b.Type.Shape) {
		return unknownRank(dt)
	}
	s := make(model.Shape, len(a.Type.Shape))
	for i := range s {
		if a.Type.Shape[i] == b.Type.Shape[i] {
			s[i] = a.Type.Shape[i]
		} else {
			s[i] = symbolic(fmt.Sprintf("%s_d%d", name, i))
		}
	}
	v := tensor(dt, s)
	if dataEqual(a.Const(), b.Const()) {
		v.shareContents(a)
	}
	return v
}

func inferIf(c *ctx) ([]*Value, error) {
	thenG, err := graphAttr(c, "then_branch")
	if err != nil {
		return nil, err
	}
	elseG, err := graphAttr(c, "else_branch")
	if err != nil {
		return nil, err
	}
	// A known condition runs one branch: only that one is inferred, and
	// so costed and planned.
	if cond, ok := c.constInts(0); ok && len(cond) == 1 {
		taken, name := elseG, "else_branch"
		if cond[0] != 0 {
			taken, name = thenG, "then_branch"
		}
		outs, _, err := c.e.inferSubgraph(taken, c.sc, nil, c.path.in("."+name))
		if err != nil {
			return nil, err
		}
		if c.e.quiet == 0 {
			c.e.decided = append(c.e.decided, DecidedIf{Node: c.label(), Branch: name})
		}
		return outs, nil
	}
	deps := c.e.inputsOf(c.node.Input(0))
	start := len(c.e.unresolved)
	mark := start
	thenOut, _, err := c.e.inferSubgraph(thenG, c.sc, nil, c.path.in(".then_branch"))
	if err != nil {
		return nil, err
	}
	thenBad := c.e.unresolved[mark:len(c.e.unresolved):len(c.e.unresolved)]
	mark = len(c.e.unresolved)
	elseOut, _, err := c.e.inferSubgraph(elseG, c.sc, nil, c.path.in(".else_branch"))
	if err != nil {
		return nil, err
	}
	elseBad := c.e.unresolved[mark:len(c.e.unresolved):len(c.e.unresolved)]
	if len(thenOut) != len(elseOut) {
		return nil, fmt.Errorf("then_branch has %d outputs, else_branch %d", len(thenOut), len(elseOut))
	}
	if c.e.quiet == 0 {
		c.e.undecided = append(c.e.undecided, UndecidedIf{Node: c.label(), Inputs: deps})
		// A branch that cannot be inferred for the bound inputs is said
		// to be so, with the binding that would decide the condition,
		// ahead of its nodes' own entries.
		var head []Unresolved
		for _, b := range []struct {
			name string
			bad  []Unresolved
		}{{"then_branch", thenBad}, {"else_branch", elseBad}} {
			if len(b.bad) == 0 {
				continue
			}
			head = append(head, Unresolved{Node: c.label(), Op: "If",
				Reason: fmt.Sprintf("%s cannot be inferred for the bound inputs (%d node(s), first %s: %s); %s",
					b.name, len(b.bad), b.bad[0].Node, b.bad[0].Reason, decideHint(deps))})
		}
		if len(head) > 0 {
			tail := append([]Unresolved{}, c.e.unresolved[start:]...)
			for j := range tail {
				tail[j].Reason += fmt.Sprintf(" (in a branch of If %s; %s)", c.label(), decideHint(deps))
			}
			c.e.unresolved = append(c.e.unresolved[:start:start], append(head, tail...)...)
		}
	}
	outs := make([]*Value, len(thenOut))
	for i := range outs {
		name := fmt.Sprintf("if_%d", i)
		if i < len(c.node.Outputs) {
			name = c.node.Outputs[i]
		}
		outs[i] = mergeValues(thenOut[i], elseOut[i], name)
	}
	return outs, nil
}

// decideHint says which bindings would decide a condition depending on
// the runtime inputs deps.
func decideHint(deps []string) string {
	if len(deps) == 0 {
		return "its condition is computed at run time from no graph input"
	}
	flags := make([]string, len(deps))
	for i, d := range deps {
		flags[i] = "--value " + d + "=V"
	}
	return "its condition depends on input(s) " + strings.Join(deps, ", ") + ": bind " + strings.Join(flags, " ") + " to decide which branch runs"
}

// stack prepends a dim to every element of a per-iteration output.
func stackShape(n model.Dim, el *Value, axis int) *Value {
	if el == nil || !el.Type.RankKnown {
		dt := model.Undefined
		if el != nil {
			dt = el.Type.DType
		}
		return unknownRank(dt)
	}
	s := el.Type.Shape
	if axis < 0 {
		axis += len(s) + 1
	}
	if axis < 0 || axis > len(s) {
		axis = 0
	}
	out := append(append(s[:axis:axis].Clone(), n), s[axis:]...)
	return tensor(el.Type.DType, out)
}

func boolScalar(v bool) *Value {
	return tensorConst(model.Bool, model.Shape{}, intData(b2i(v)))
}

func inferLoop(c *ctx) ([]*Value, error) {
	body, err := graphAttr(c, "body")
	if err != nil {
		return nil, err
	}
	nCarried := len(c.in) - 2
	if nCarried < 0 {
		nCarried = 0
	}
	if len(body.Inputs) != nCarried+2 {
		return nil, fmt.Errorf("body has %d inputs, the Loop passes %d", len(body.Inputs), nCarried+2)
	}
	if len(body.Outputs) < nCarried+1 {
		return nil, fmt.Errorf("body has %d outputs, need at least %d", len(body.Outputs), nCarried+1)
	}
	nScan := len(body.Outputs) - 1 - nCarried
	trip := int64(-1)
	if m, ok := c.constInts(0); ok && len(m) == 1 {
		trip = m[0]
	}
	condIn := c.input(1)
	carried := make([]*Value, nCarried)
	for i := range carried {
		carried[i] = c.input(i + 2)
	}
	bound := func(iter int64, cond *Value, state []*Value) []*Value {
		b := []*Value{tensorConst(model.Int64, model.Shape{}, intData(iter)), cond}
		if cond == nil {
			b[1] = boolScalar(true)
		}
		return append(b, state...)
	}
	// First pass: the body as written, for its output types (and recorded
	// for cost counting).
	first, _, err := c.e.inferSubgraph(body, c.sc, bound(0, condIn, carried), c.path.in(".body"))
	if err != nil {
		return nil, err
	}
	// Unroll when the loop's control is known statically.
	iters, state, scans, ok, err := unrollLoop(c, body, trip, condIn, carried, bound)
	if err != nil {
		return nil, err
	}
	outs := make([]*Value, 0, nCarried+nScan)
	if ok {
		outs = append(outs, state...)
		for j := 0; j < nScan; j++ {
			var el *Value
			if len(scans) > 0 {
				el = scans[0][j]
				for _, s := range scans[1:] {
					el = mergeValues(el, s[j], fmt.Sprintf("loop_%d", j))
				}
			} else {
				el = first[1+nCarried+j]
			}
			v := stackShape(model.Known(iters), el, 0)
			outs = append(outs, v)
		}
		return outs, nil
	}
	for i := 0; i < nCarried; i++ {
		name := fmt.Sprintf("loop_%d", i)
		if i < len(c.node.Outputs) {
			name = c.node.Outputs[i]
		}
		outs = append(outs, mergeValues(carried[i], first[1+i], name))
	}
	n := model.Dim{}
	condConst := condIn == nil || isConstTrue(condIn)
	bodyCondTrue := isConstTrue(first[0]) || passesCond(body)
	switch {
	case trip >= 0 && condConst && bodyCondTrue:
		n = model.Known(trip)
	case trip >= 0:
		n = symbolic(fmt.Sprintf("min(%d,loop)", trip))
	default:
		n = symbolic("trip_" + c.outName(0))
	}
	for j := 0; j < nScan; j++ {
		outs = append(outs, stackShape(n, first[1+nCarried+j], 0))
	}
	return outs, nil
}

func isConstTrue(v *Value) bool {
	x, ok := v.Const().KnownInts()
	return ok && len(x) == 1 && x[0] != 0
}

// passesCond reports whether the body's condition output is its condition
// input passed through unchanged.
func passesCond(body *model.Graph) bool {
	if len(body.Inputs) < 2 || len(body.Outputs) < 1 {
		return false
	}
	in, out := body.Inputs[1].Name, body.Outputs[0].Name
	if in == out {
		return true
	}
	for _, n := range body.Nodes {
		if n.Op == "Identity" && len(n.Outputs) == 1 && n.Outputs[0] == out && n.Input(0) == in {
			return true
		}
	}
	return false
}

// unrollLoop runs the body iteration by iteration while everything that
// decides the loop is known. ok is false when the loop cannot be unrolled;
// err is set only when inference must stop (the work budget is spent, or
// subgraphs nest too deep): each iteration's nodes count against the
// budget like any others.
func unrollLoop(c *ctx, body *model.Graph, trip int64, condIn *Value, carried []*Value, bound func(int64, *Value, []*Value) []*Value) (int64, []*Value, [][]*Value, bool, error) {
	no := func() (int64, []*Value, [][]*Value, bool, error) { return 0, nil, nil, false, nil }
	if trip < 0 && condIn == nil {
		return no()
	}
	if condIn != nil && condIn.Const() == nil {
		return no()
	}
	if trip < 0 && isConstTrue(condIn) && passesCond(body) {
		// The condition stays true and nothing else ends the loop: it
		// would run into maxUnroll and be given up, after work that
		// grows with every iteration.
		return no()
	}
	limit := int64(maxUnroll)
	if trip >= 0 && trip < limit {
		limit = trip
	} else if trip > limit {
		return no()
	}
	state := carried
	cond := condIn
	var scans [][]*Value
	c.e.quiet++
	defer func() { c.e.quiet-- }()
	i := int64(0)
	for ; i < limit; i++ {
		if cond != nil {
			x, ok := cond.Const().KnownInts()
			if !ok || len(x) != 1 {
				return no()
			}
			if x[0] == 0 {
				break
			}
		}
		outs, _, err := c.e.inferSubgraph(body, c.sc, bound(i, cond, state), c.path.in(".body"))
		if err != nil {
			if stops(err) {
				return 0, nil, nil, false, err
			}
			return no()
		}
		cond = outs[0]
		if condIn == nil {
			cond = nil
		} else if cond.Const() == nil {
			return no()
		}
		state = outs[1 : 1+len(carried)]
		scans = append(scans, outs[1+len(carried):])
	}
	if i == maxUnroll && trip < 0 {
		return no()
	}
	return i, state, scans, true, nil
}

func inferScan(c *ctx) ([]*Value, error) {
	body, err := graphAttr(c, "body")
	if err != nil {
		return nil, err
	}
	nScanIn := int(c.attrInt("num_scan_inputs", 0))
	ins := c.in
	batched := c.opset < 9
	if batched {
		ins = ins[1:] // sequence_lens
	}
	nState := len(ins) - nScanIn
	if nState < 0 || nScanIn <= 0 {
		return nil, fmt.Errorf("num_scan_inputs %d does not fit %d inputs", nScanIn, len(ins))
	}
	inAxes, _ := c.attrInts("scan_input_axes")
	outAxes, _ := c.attrInts("scan_output_axes")
	bound := make([]*Value, 0, len(ins))
	for i := 0; i < nState; i++ {
		v := ins[i]
		if batched && v != nil && v.Type.RankKnown && len(v.Type.Shape) > 0 {
			v = tensor(v.Type.DType, v.Type.Shape[1:].Clone())
		}
		bound = append(bound, v)
	}
	var length model.Dim
	var batch model.Dim
	for j := 0; j < nScanIn; j++ {
		v := ins[nState+j]
		if v == nil || !v.Type.RankKnown {
			return nil, fmt.Errorf("scan input %d has unknown shape", j)
		}
		s := v.Type.Shape
		axis := 0
		if batched {
			axis = 1
			batch = s[0]
		} else if j < len(inAxes) {
			if axis, err = normAxis(inAxes[j], len(s)); err != nil {
				return nil, err
			}
		}
		if axis >= len(s) {
			return nil, fmt.Errorf("scan input %d has rank %d", j, len(s))
		}
		length = s[axis]
		el := append(s[:axis:axis].Clone(), s[axis+1:]...)
		if batched {
			el = el[1:]
		}
		bound = append(bound, tensor(v.Type.DType, el))
	}
	outs, _, err := c.e.inferSubgraph(body, c.sc, bound, c.path.in(".body"))
	if err != nil {
		return nil, err
	}
	if len(outs) < nState {
		return nil, fmt.Errorf("body has %d outputs for %d states", len(outs), nState)
	}
	res := make([]*Value, 0, len(outs))
	for i := 0; i < nState; i++ {
		v := outs[i]
		if batched {
			v = stackShape(batch, v, 0)
		}
		res = append(res, v)
	}
	for j, v := range outs[nState:] {
		axis := 0
		if j < len(outAxes) {
			axis = int(outAxes[j])
		}
		if batched {
			res = append(res, stackShape(batch, stackShape(length, v, 0), 0))
			continue
		}
		res = append(res, stackShape(length, v, axis))
	}
	return res, nil
}

// Sequences.

func seqValue(el model.Type, items []*Value, known bool) *Value {
	e := el
	return &Value{Type: model.Type{Kind: model.KindSequence, DType: el.DType, Elem: &e}, seq: &sequence{items, known}}
}

// seqElemType merges the element types of a known sequence.
func seqElemType(items []*Value, fallback model.Type) model.Type {
	if len(items) == 0 {
		return fallback
	}
	m := items[0]
	for _, it := range items[1:] {
		m = mergeValues(m, it, "seq")
	}
	return m.Type
}

func needSeq(c *ctx, i int) (*Value, error) {
	v, err := c.need(i)
	if err != nil {
		return nil, err
	}
	if v.Type.Kind != model.KindSequence {
		return nil, fmt.Errorf("input %d is not a sequence", i)
	}
	return v, nil
}

func elemOf(v *Value) model.Type {
	if v.Type.Elem != nil {
		return *v.Type.Elem
	}
	return model.Type{Kind: model.KindTensor, DType: v.Type.DType}
}

func inferSequenceEmpty(c *ctx) ([]*Value, error) {
	dt := model.DType(c.attrInt("dtype", int64(model.Float32)))
	return []*Value{seqValue(model.Type{Kind: model.KindTensor, DType: dt}, nil, true)}, nil
}

func inferSequenceConstruct(c *ctx) ([]*Value, error) {
	if len(c.in) == 0 {
		return nil, fmt.Errorf("SequenceConstruct needs inputs")
	}
	for i := range c.in {
		if c.in[i] == nil {
			return nil, fmt.Errorf("input %d is empty; every element of a sequence must be given", i)
		}
	}
	items := append([]*Value{}, c.in...)
	return []*Value{seqValue(seqElemType(items, c.in[0].Type), items, true)}, nil
}

func seqPos(c *ctx, i int, n int, insert bool) (int, bool) {
	if !c.has(i) {
		if insert {
			return n, true
		}
		return n - 1, true
	}
	p, ok := c.constInts(i)
	if !ok || len(p) != 1 {
		return 0, false
	}
	pos := int(p[0])
	if pos < 0 {
		pos += n
	}
	limit := n - 1
	if insert {
		limit = n
	}
	if pos < 0 || pos > limit {
		return 0, false
	}
	return pos, true
}

func inferSequenceInsert(c *ctx) ([]*Value, error) {
	s, err := needSeq(c, 0)
	if err != nil {
		return nil, err
	}
	t, err := c.need(1)
	if err != nil {
		return nil, err
	}
	if s.SeqKnown() {
		if pos, ok := seqPos(c, 2, len(s.Seq()), true); ok {
			items := append(append(append([]*Value{}, s.Seq()[:pos]...), t), s.Seq()[pos:]...)
			el := t.Type
			if len(s.Seq()) > 0 {
				el = mergeValues(&Value{Type: elemOf(s)}, t, "seq").Type
			}
			return []*Value{seqValue(el, items, true)}, nil
		}
	}
	return []*Value{seqValue(mergeValues(&Value{Type: elemOf(s)}, t, "seq").Type, nil, false)}, nil
}

func inferSequenceErase(c *ctx) ([]*Value, error) {
	s, err := needSeq(c, 0)
	if err != nil {
		return nil, err
	}
	if s.SeqKnown() && len(s.Seq()) > 0 {
		if pos, ok := seqPos(c, 1, len(s.Seq()), false); ok {
			items := append(append([]*Value{}, s.Seq()[:pos]...), s.Seq()[pos+1:]...)
			return []*Value{seqValue(seqElemType(items, elemOf(s)), items, true)}, nil
		}
	}
	return []*Value{seqValue(elemOf(s), nil, false)}, nil
}

func inferSequenceAt(c *ctx) ([]*Value, error) {
	s, err := needSeq(c, 0)
	if err != nil {
		return nil, err
	}
	if s.SeqKnown() && len(s.Seq()) > 0 {
		if pos, ok := seqPos(c, 1, len(s.Seq()), false); ok {
			return []*Value{s.Seq()[pos]}, nil
		}
	}
	return []*Value{{Type: elemOf(s)}}, nil
}

func inferSequenceLength(c *ctx) ([]*Value, error) {
	s, err := needSeq(c, 0)
	if err != nil {
		return nil, err
	}
	v := tensor(model.Int64, model.Shape{})
	if s.SeqKnown() {
		v.setHeld(intData(int64(len(s.Seq()))))
	}
	return []*Value{v}, nil
}

func inferSplitToSequence(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	axis, err := normAxis(c.attrInt("axis", 0), len(s))
	if err != nil {
		return nil, err
	}
	keep := c.attrInt("keepdims", 1) == 1
	el := func(size model.Dim, drop bool) *Value {
		o := s.Clone()
		if drop {
			o = append(o[:axis:axis], o[axis+1:]...)
		} else {
			o[axis] = size
		}
		return tensor(in.Type.DType, o)
	}
	if !c.has(1) {
		if !s[axis].IsKnown() || s[axis].Value > maxUnroll {
			// Too long to hold item by item (maxUnroll bounds what a
			// SequenceMap over it would run): a sequence of unknown length.
			return []*Value{seqValue(el(model.Known(1), !keep).Type, nil, false)}, nil
		}
		items := make([]*Value, s[axis].Value)
		for i := range items {
			items[i] = el(model.Known(1), !keep)
		}
		return []*Value{seqValue(seqElemType(items, el(model.Known(1), !keep).Type), items, true)}, nil
	}
	sizes, err := c.needInts(1, "split")
	if err != nil {
		return nil, err
	}
	if sv := c.input(1); sv.Type.RankKnown && len(sv.Type.Shape) == 0 {
		if !s[axis].IsKnown() || sizes[0] <= 0 || (s[axis].Value-1)/sizes[0]+1 > maxUnroll {
			return []*Value{seqValue(el(symbolic("split"), false).Type, nil, false)}, nil
		}
		d, k := s[axis].Value, sizes[0]
		var items []*Value
		for rest := d; rest > 0; rest -= k {
			items = append(items, el(model.Known(min(k, rest)), false))
		}
		return []*Value{seqValue(seqElemType(items, el(model.Known(k), false).Type), items, true)}, nil
	}
	items := make([]*Value, len(sizes))
	for i, k := range sizes {
		items[i] = el(model.Known(k), false)
	}
	return []*Value{seqValue(seqElemType(items, in.Type), items, true)}, nil
}

func inferConcatFromSequence(c *ctx) ([]*Value, error) {
	s, err := needSeq(c, 0)
	if err != nil {
		return nil, err
	}
	newAxis := c.attrInt("new_axis", 0) == 1
	if !s.SeqKnown() || len(s.Seq()) == 0 {
		el := elemOf(s)
		if !el.RankKnown {
			return []*Value{unknownRank(el.DType)}, nil
		}
		r := len(el.Shape)
		if newAxis {
			r++
		}
		axis, err := normAxis(c.attrInt("axis", 0), r)
		if err != nil {
			return nil, err
		}
		out := el.Shape.Clone()
		if newAxis {
			out = append(append(out[:axis:axis], symbolic("seq_len")), el.Shape[axis:]...)
		} else {
			out[axis] = symbolic("concat_" + c.outName(0))
		}
		return []*Value{tensor(el.DType, out)}, nil
	}
	first := s.Seq()[0]
	if !first.Type.RankKnown {
		return []*Value{unknownRank(first.Type.DType)}, nil
	}
	r := len(first.Type.Shape)
	if newAxis {
		r++
	}
	axis, err := normAxis(c.attrInt("axis", 0), r)
	if err != nil {
		return nil, err
	}
	if newAxis {
		return []*Value{stackShape(model.Known(int64(len(s.Seq()))), first, axis)}, nil
	}
	out := first.Type.Shape.Clone()
	out[axis] = model.Known(0)
	for _, it := range s.Seq() {
		if !it.Type.RankKnown || len(it.Type.Shape) != len(out) {
			return nil, fmt.Errorf("sequence elements differ in rank")
		}
		out[axis] = dimAdd(out[axis], it.Type.Shape[axis])
	}
	return []*Value{tensor(first.Type.DType, out)}, nil
}

func inferSequenceMap(c *ctx) ([]*Value, error) {
	body, err := graphAttr(c, "body")
	if err != nil {
		return nil, err
	}
	s, err := needSeq(c, 0)
	if err != nil {
		return nil, err
	}
	nOut := len(body.Outputs)
	// Every input that is a sequence is iterated; tensors are passed as is.
	length := -1
	for _, v := range c.in {
		if v != nil && v.Type.Kind == model.KindSequence {
			if !v.SeqKnown() {
				length = -1
				break
			}
			if length >= 0 && len(v.Seq()) != length {
				return nil, fmt.Errorf("input sequences have %d and %d items; SequenceMap needs equal lengths", length, len(v.Seq()))
			}
			length = len(v.Seq())
		}
	}
	if length < 0 {
		bound := make([]*Value, len(c.in))
		for i, v := range c.in {
			if v != nil && v.Type.Kind == model.KindSequence {
				bound[i] = &Value{Type: elemOf(v)}
			} else {
				bound[i] = v
			}
		}
		outs, _, err := c.e.inferSubgraph(body, c.sc, bound, c.path.in(".body"))
		if err != nil {
			return nil, err
		}
		res := make([]*Value, nOut)
		for i, o := range outs {
			res[i] = seqValue(o.Type, nil, false)
		}
		return res, nil
	}
	items := make([][]*Value, nOut)
	for k := 0; k < length; k++ {
		bound := make([]*Value, len(c.in))
		for i, v := range c.in {
			if v != nil && v.Type.Kind == model.KindSequence {
				bound[i] = v.Seq()[k]
			} else {
				bound[i] = v
			}
		}
		outs, _, err := c.e.inferSubgraph(body, c.sc, bound, c.path.in(".body"))
		if err != nil {
			return nil, err
		}
		for i, o := range outs {
			items[i] = append(items[i], o)
		}
	}
	res := make([]*Value, nOut)
	for i := range res {
		res[i] = seqValue(seqElemType(items[i], elemOf(s)), items[i], true)
	}
	return res, nil
}

// Optionals: an optional value is represented by its element, or by a value
// marked Absent.

func inferOptional(c *ctx) ([]*Value, error) {
	if c.has(0) {
		v := *c.in[0]
		return []*Value{&v}, nil
	}
	a := c.attr("type")
	if a == nil || a.Type == nil {
		return nil, fmt.Errorf("an empty Optional needs a type attribute")
	}
	return []*Value{{Type: *a.Type, Absent: true}}, nil
}

func inferOptionalHasElement(c *ctx) ([]*Value, error) {
	if !c.has(0) {
		return []*Value{boolScalar(false)}, nil
	}
	v := c.in[0]
	if v.Type.Kind == model.KindOptional && !v.Absent {
		return []*Value{tensor(model.Bool, model.Shape{})}, nil
	}
	return []*Value{boolScalar(!v.Absent)}, nil
}

func inferOptionalGetElement(c *ctx) ([]*Value, error) {
	v, err := c.need(0)
	if err != nil {
		return nil, err
	}
	if v.Type.Kind == model.KindOptional && v.Type.Elem != nil {
		return []*Value{{Type: *v.Type.Elem}}, nil
	}
	nv := *v
	nv.Absent = false
	return []*Value{&nv}, nil
}

// Text operators that exporters of tabular models emit.

func inferStringNormalizer(c *ctx) ([]*Value, error) {
	in, err := c.need(0)
	if err != nil {
		return nil, err
	}
	s := in.Type.Shape
	stop := map[string]bool{}
	if a := c.attr("stopwords"); a != nil {
		for _, w := range a.Strings {
			stop[w] = true
		}
	}
	caseSensitive := c.attrInt("is_case_sensitive", 0) == 1
	kept := model.Dim{}
	if in.Const() != nil && in.Const().Strings != nil {
		n := int64(0)
		for _, w := range in.Const().Strings {
			drop := stop[w]
			if !caseSensitive {
				for sw := range stop {
					if equalFold(sw, w) {
						drop = true
					}
				}
			}
			if !drop {
				n++
			}
		}
		if n == 0 {
			n = 1 // an all-stopword input yields one empty string
		}
		kept = model.Known(n)
	} else if len(stop) == 0 {
		return []*Value{tensor(model.String, s.Clone())}, nil
	} else {
		kept = symbolic("kept_" + c.outName(0))
	}
	out := s.Clone()
	if len(out) == 0 {
		return nil, fmt.Errorf("input must be 1-D or [1, C]")
	}
	out[len(out)-1] = kept
	return []*Value{tensor(model.String, out)}, nil
}

func equalFold(a, b string) bool {
	if len(a) != len(b) {
		return false
	}
	for i := 0; i < len(a); i++ {
		x, y := a[i], b[i]
		if 'A' <= x && x <= 'Z' {
			x += 'a' - 'A'
		}
		if 'A' <= y && y <= 'Z' {
			y += 'a' - 'A'
		}
		if x != y {
			return false
		}
	}
	return true
}

func inferTfIdf(c *ctx) ([]*Value, error) {
	s, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	idx, ok := c.attrInts("ngram_indexes")
	if !ok || len(idx) == 0 {
		return nil, fmt.Errorf("ngram_indexes is missing")
	}
	width := int64(0)
	for _, i := range idx {
		width = max(width, i+1)
	}
	switch len(s) {
	case 1:
		return []*Value{tensor(model.Float32, model.Shape{model.Known(width)})}, nil
	case 2:
		return []*Value{tensor(model.Float32, model.Shape{s[0], model.Known(width)})}, nil
	}
	return nil, fmt.Errorf("input must be 1-D or 2-D, has rank %d", len(s))
}
