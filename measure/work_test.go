package measure

import (
	"errors"
	"fmt"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/onnx"
)

// doublingCalls is the model of a hostile file: model-local functions where
// F0 is MatMul(x, x) and each Fi calls Fi-1 twice, the second time on the
// first call's result; the graph calls F_depth on a 4×4 input. Written out,
// it is 2^depth MatMuls. With distinct set, each Fi also passes its callee a
// folded constant that differs between the two calls (c and c + 2^(i-1)),
// so that no two of the 2^depth calls of F0 have the same signature.
func doublingCalls(depth int, distinct bool) *model.Model {
	m := &model.Model{Format: "onnx", IRVersion: 8, Opsets: map[string]int64{"": 13, "local": 1}}
	m.Functions = append(m.Functions, &model.Function{Name: "F0", Domain: "local", Inputs: []string{"x", "c"}, Outputs: []string{"y"},
		Nodes: []*model.Node{{Op: "MatMul", Inputs: []string{"x", "x"}, Outputs: []string{"y"}}}, Opsets: map[string]int64{"": 13}})
	for i := 1; i <= depth; i++ {
		prev := fmt.Sprintf("F%d", i-1)
		f := &model.Function{Name: fmt.Sprintf("F%d", i), Domain: "local", Inputs: []string{"x", "c"}, Outputs: []string{"y"},
			Nodes: []*model.Node{
				{Op: prev, Domain: "local", Inputs: []string{"x", "c"}, Outputs: []string{"a"}},
				{Op: prev, Domain: "local", Inputs: []string{"a", "c"}, Outputs: []string{"y"}},
			}, Opsets: map[string]int64{"": 13, "local": 1}}
		if distinct {
			k := &model.Tensor{Name: "kv", DType: model.Int64, Data: rawInt64s(1 << (i - 1))}
			f.Nodes = []*model.Node{
				{Op: "Constant", Outputs: []string{"k"}, Attrs: []*model.Attr{{Name: "value", Kind: model.AttrTensor, Tensor: k}}},
				{Op: "Add", Inputs: []string{"c", "k"}, Outputs: []string{"c2"}},
				f.Nodes[0],
				{Op: prev, Domain: "local", Inputs: []string{"a", "c2"}, Outputs: []string{"y"}},
			}
		}
		m.Functions = append(m.Functions, f)
	}
	m.Graph = &model.Graph{Name: "g",
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(4), model.Known(4))},
		Initializers: []*model.Tensor{{Name: "c0", DType: model.Int64, Data: rawInt64s(0)}},
		Nodes:        []*model.Node{{Op: fmt.Sprintf("F%d", depth), Domain: "local", Inputs: []string{"x", "c0"}, Outputs: []string{"y"}}},
		Outputs:      []*model.ValueInfo{{Name: "y"}}}
	return m
}

// measureAllocs encodes and decodes m (as a file would reach loadline),
// measures it, and reports the bytes allocated while measuring.
func measureAllocs(t *testing.T, m *model.Model) (*Metrics, uint64, error) {
	t.Helper()
	data, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	dm, err := onnx.Decode(data, onnx.Options{Path: "hostile.onnx"})
	if err != nil {
		t.Fatal(err)
	}
	var met *Metrics
	n := allocDuring(func() { met, err = Measure(dm, int64(len(data)), Options{}) })
	return met, n, err
}

// TestWorkBoundNestedFunctionCalls: calls that double at every level of
// nesting are inferred once per signature, so depths 18, 24 and 63 measure
// with little memory and exact figures where they fit in int64.
func TestWorkBoundNestedFunctionCalls(t *testing.T) {
	for _, depth := range []int{18, 24, 63} {
		t.Run(fmt.Sprint(depth), func(t *testing.T) {
			met, alloc, err := measureAllocs(t, doublingCalls(depth, false))
			if err != nil {
				t.Fatalf("Measure: %v", err)
			}
			t.Logf("allocated %d KB", alloc>>10)
			if alloc > 32<<20 {
				t.Errorf("measuring allocated %d MB; the calls share one body per level", alloc>>20)
			}
			if depth == 63 {
				// 2^63 MatMuls of 64 MACs overflow int64: said, not wrapped.
				if !strings.Contains(fmt.Sprint(met.Unresolved), "overflow") {
					t.Errorf("depth 63: want an overflow entry, got %v (MACs %d)", met.Unresolved, met.MACs)
				}
				return
			}
			// Hand-worked: 2^depth MatMuls of [4,4]×[4,4], each 4·4 outputs
			// × K = 4 = 64 MACs.
			if want := int64(1) << depth * 64; met.MACs != want {
				t.Errorf("MACs %d, want 2^%d × 64 = %d", met.MACs, depth, want)
			}
		})
	}
}

// TestWorkBoundDistinctCalls: when no two calls share a signature, the
// work budget stops inference with an error that names the bound, in
// bounded memory.
func TestWorkBoundDistinctCalls(t *testing.T) {
	_, alloc, err := measureAllocs(t, doublingCalls(24, true))
	var wl *WorkLimitError
	if !errors.As(err, &wl) || !errors.Is(err, errWork) {
		t.Fatalf("want a WorkLimitError, got %v", err)
	}
	if wl.Limit != workBudget(doublingCalls(24, true)) || !strings.Contains(err.Error(), "function(F24)") || !strings.Contains(err.Error(), "units of work") {
		t.Errorf("the error should name the limit and where it ran out: %v", err)
	}
	// Measured: about 380 MB allocated in all for the whole budget; 1 GB
	// leaves room without letting 2^24 calls pass.
	t.Logf("allocated %d MB", alloc>>20)
	if alloc > 1<<30 {
		t.Errorf("allocated %d MB before stopping", alloc>>20)
	}
}

// nestedLoops is n Loops nested, each of 4,096 iterations whose control is
// constant, so that inference unrolls each of them.
func nestedLoops(n int) *model.Model {
	body := &model.Graph{Name: "b0", Inputs: []*model.ValueInfo{input("i0", model.Int64), input("c0", model.Bool)},
		Nodes:   []*model.Node{node("Identity", []string{"c0"}, []string{"co0"}), node("Identity", []string{"i0"}, []string{"s0"})},
		Outputs: []*model.ValueInfo{{Name: "co0"}, {Name: "s0"}}}
	for d := 1; d <= n; d++ {
		sfx := fmt.Sprint(d)
		body = &model.Graph{Name: "b" + sfx, Inputs: []*model.ValueInfo{input("i"+sfx, model.Int64), input("c"+sfx, model.Bool)},
			Nodes: []*model.Node{
				node("Identity", []string{"c" + sfx}, []string{"co" + sfx}),
				node("Loop", []string{"M", "T"}, []string{"s" + sfx}, &model.Attr{Name: "body", Kind: model.AttrGraph, Graph: body}),
			},
			Outputs: []*model.ValueInfo{{Name: "co" + sfx}, {Name: "s" + sfx}}}
	}
	g := &model.Graph{Name: "g", Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(4))},
		Initializers: []*model.Tensor{
			{Name: "M", DType: model.Int64, Data: rawInt64s(4096)},
			{Name: "T", DType: model.Bool, Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{{1}}}},
		},
		Nodes:   []*model.Node{node("Loop", []string{"M", "T"}, []string{"y"}, &model.Attr{Name: "body", Kind: model.AttrGraph, Graph: body})},
		Outputs: []*model.ValueInfo{{Name: "y"}}}
	return graphModel(g)
}

// TestWorkBoundNestedLoops: three Loops of 4,096 iterations nested are
// 2^36 body evaluations if unrolled; the budget stops them with an error.
// One level unrolls in full and keeps its exact shape.
func TestWorkBoundNestedLoops(t *testing.T) {
	_, alloc, err := measureAllocs(t, nestedLoops(3))
	var wl *WorkLimitError
	if !errors.As(err, &wl) || !strings.Contains(wl.Where, ".body") {
		t.Fatalf("want a WorkLimitError inside the loop bodies, got %v", err)
	}
	t.Logf("allocated %d MB", alloc>>20)
	if alloc > 1<<30 {
		t.Errorf("allocated %d MB before stopping", alloc>>20)
	}
	met, _, err := measureAllocs(t, nestedLoops(0))
	if err != nil {
		t.Fatal(err)
	}
	// Hand-worked: the scan output stacks 4,096 scalar iteration numbers.
	if got := met.Outputs[0].Shape; len(got) != 1 || got[0] != int64(4096) {
		t.Errorf("one loop: output shape %v, want [4096]", got)
	}
}

// TestWorkBoundWhileTrueLoop: a loop with no trip count whose condition
// stays true is not unrolled at all (it could only run into maxUnroll).
// ONNX's expanded SequenceMap tests are such loops; unrolling one spent a
// million units of work on a sequence growing by one item an iteration.
func TestWorkBoundWhileTrueLoop(t *testing.T) {
	body := &model.Graph{Name: "body", Inputs: []*model.ValueInfo{input("i", model.Int64), input("cin", model.Bool)},
		Nodes:   []*model.Node{node("Identity", []string{"cin"}, []string{"cout"}), node("Identity", []string{"i"}, []string{"scan"})},
		Outputs: []*model.ValueInfo{{Name: "cout"}, {Name: "scan"}}}
	g := &model.Graph{
		Initializers: []*model.Tensor{{Name: "c", DType: model.Bool, Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{{1}}}}},
		Nodes:        []*model.Node{node("Loop", []string{"", "c"}, []string{"out"}, &model.Attr{Name: "body", Kind: model.AttrGraph, Graph: body})},
		Outputs:      []*model.ValueInfo{{Name: "out"}},
	}
	e := newEngine(graphModel(g), InferOptions{})
	sc := &scope{vals: &Values{byName: map[string]*Value{"c": boolScalar(true)}}}
	if err := e.inferNodes(g, sc, &trail{seg: "graph", node: -1}); err != nil {
		t.Fatal(err)
	}
	// One unit for the Loop node and two for its body, inferred once.
	if e.work != 3 {
		t.Errorf("work %d units, want 3 (the loop was unrolled)", e.work)
	}
	if s := sc.vals.Get("out").Type.Shape; len(s) != 1 || s[0].IsKnown() {
		t.Errorf("out: shape %v, want one symbolic dim", s)
	}
}

// TestWorkStoredWeightsPassedOn: a weight that a rule passes on without
// reading its elements costs nothing beyond the node's unit. Hand-worked:
// MatMul of x[1,16] by a stored [16,16] weight is one unit for the node
// plus (2 + 2 + 2 dims read and produced) / 16 = 0; before contents were
// read lazily it also paid 256 elements / 16 = 16 units.
func TestWorkStoredWeightsPassedOn(t *testing.T) {
	w := &model.Tensor{Name: "w", DType: model.Float32, Dims: []int64{16, 16},
		Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{make([]byte, 16*16*4)}}}
	g := &model.Graph{Name: "g", Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(16))},
		Initializers: []*model.Tensor{w},
		Nodes:        []*model.Node{node("MatMul", []string{"x", "w"}, []string{"y"})},
		Outputs:      []*model.ValueInfo{{Name: "y"}}}
	m := graphModel(g)
	e := newEngine(m, InferOptions{})
	sc := &scope{vals: &Values{byName: map[string]*Value{"x": {Type: g.Inputs[0].Type}, "w": tensorValue(w)}}}
	if err := e.inferNodes(g, sc, &trail{seg: "graph", node: -1}); err != nil {
		t.Fatal(err)
	}
	if e.work != 1 {
		t.Errorf("work %d units, want 1", e.work)
	}
	if sc.vals.Get("w").heldData() != nil {
		t.Errorf("MatMul read the weight's elements; only its shape is needed")
	}
}

// reluChain is n Relu nodes in a chain on an input of the given rank.
func reluChain(n, rank int) *model.Model {
	dims := make([]model.Dim, rank)
	for i := range dims {
		dims[i] = model.Known(1)
	}
	g := &model.Graph{Name: "g", Inputs: []*model.ValueInfo{input("x0", model.Float32, dims...)}}
	for i := range n {
		g.Nodes = append(g.Nodes, &model.Node{Op: "Relu", Inputs: []string{fmt.Sprintf("x%d", i)}, Outputs: []string{fmt.Sprintf("x%d", i+1)}})
	}
	g.Outputs = []*model.ValueInfo{{Name: fmt.Sprintf("x%d", n)}}
	return graphModel(g)
}

// TestWorkBudgetGrowsWithTheFile: a large graph inferred once is within
// its budget however large it is, because the budget grows with the nodes
// the file stores. Hand-worked: 60,000 Relu nodes on a rank-64 input each
// cost 1 + (64 + 64) / 16 = 9 units, 540,000 in all: past the 524,288 of
// a small file, within 524,288 + 8 × 60,000 = 1,004,288.
func TestWorkBudgetGrowsWithTheFile(t *testing.T) {
	m := reluChain(60_000, 64)
	if got, want := workBudget(m), int64(maxInferWork+workPerStoredNode*60_000); got != want {
		t.Errorf("budget %d, want %d", got, want)
	}
	inf, err := Infer(m, InferOptions{})
	if err != nil {
		t.Fatalf("Infer: %v", err)
	}
	if len(inf.Unresolved) != 0 {
		t.Errorf("unresolved: %v", inf.Unresolved)
	}
	e := newEngine(m, InferOptions{})
	sc := &scope{vals: &Values{byName: map[string]*Value{"x0": {Type: m.Graph.Inputs[0].Type}}}}
	if err := e.inferNodes(m.Graph, sc, &trail{seg: "graph", node: -1}); err != nil {
		t.Fatal(err)
	}
	if e.work != 540_000 {
		t.Errorf("work %d units, want 540,000", e.work)
	}
}

// TestWorkBudgetCountsEveryStoredGraph: subgraphs and function bodies add
// their nodes to the budget once each, however often a graph is referenced
// (a model built in memory may share one).
func TestWorkBudgetCountsEveryStoredGraph(t *testing.T) {
	body := &model.Graph{Name: "b", Nodes: []*model.Node{node("Identity", []string{"a"}, []string{"b"}), node("Identity", []string{"b"}, []string{"c"})}}
	g := &model.Graph{Name: "g", Nodes: []*model.Node{
		node("If", []string{"c"}, []string{"y"}, &model.Attr{Name: "then_branch", Kind: model.AttrGraph, Graph: body},
			&model.Attr{Name: "else_branch", Kind: model.AttrGraph, Graph: body}),
	}}
	m := graphModel(g)
	m.Functions = []*model.Function{{Name: "F", Nodes: []*model.Node{node("Relu", []string{"x"}, []string{"y"})}}}
	// Hand-worked: 1 main node + 2 body nodes (shared, counted once) + 1
	// function node = 4 stored nodes.
	if got, want := workBudget(m), int64(maxInferWork+4*workPerStoredNode); got != want {
		t.Errorf("budget %d, want %d", got, want)
	}
}
