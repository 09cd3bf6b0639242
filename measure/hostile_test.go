package measure

import (
	"fmt"
	"os"
	"runtime"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/onnx"
)

func graphModel(g *model.Graph) *model.Model {
	return &model.Model{Format: "onnx", IRVersion: 8, Opsets: map[string]int64{"": 13}, Graph: g}
}

func node(op string, ins, outs []string, attrs ...*model.Attr) *model.Node {
	return &model.Node{Op: op, Name: op + "_" + outs[0], Inputs: ins, Outputs: outs, Attrs: attrs}
}

func input(name string, dt model.DType, dims ...model.Dim) *model.ValueInfo {
	return &model.ValueInfo{Name: name, Type: model.TensorType(dt, model.Shape(dims))}
}

// allocDuring reports the bytes allocated while f runs.
func allocDuring(f func()) uint64 {
	var a, b runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&a)
	f()
	runtime.ReadMemStats(&b)
	return b.TotalAlloc - a.TotalAlloc
}

// inferAllocs infers g and reports the bytes allocated meanwhile.
func inferAllocs(g *model.Graph) (res *Inference, alloc uint64, err error) {
	alloc = allocDuring(func() { res, err = Infer(graphModel(g), InferOptions{}) })
	return res, alloc, err
}

func TestHostileCycle(t *testing.T) {
	// Two nodes that read each other's outputs: not a DAG.
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(4))},
		Nodes: []*model.Node{
			node("Add", []string{"x", "b"}, []string{"a"}),
			node("Relu", []string{"a"}, []string{"b"}),
		},
		Outputs: []*model.ValueInfo{{Name: "b"}},
	}
	_, err := Infer(graphModel(g), InferOptions{})
	if err == nil || !strings.Contains(err.Error(), "cycle") || !strings.Contains(err.Error(), `"b"`) {
		t.Fatalf("want an error naming the cycle and the value, got %v", err)
	}
}

func TestHostileHugeDims(t *testing.T) {
	// A dim of 2^62 and products that overflow int64 flow through shape
	// rules without folding anything and without allocating.
	big := model.Known(1 << 62)
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("x", model.Float32, big, big, model.Known(4))},
		Initializers: []*model.Tensor{
			{Name: "shape", DType: model.Int64, Dims: []int64{1}, Data: rawInt64s(-1)},
			{Name: "reps", DType: model.Int64, Dims: []int64{3}, Data: rawInt64s(1<<62, 4, 1)},
		},
		Nodes: []*model.Node{
			node("Reshape", []string{"x", "shape"}, []string{"flat"}),
			node("Tile", []string{"x", "reps"}, []string{"tiled"}),
			node("Shape", []string{"tiled"}, []string{"s"}),
			node("ConstantOfShape", []string{"s"}, []string{"zeros"}),
			node("Relu", []string{"zeros"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}, {Name: "flat"}},
	}
	res, n, err := inferAllocs(g)
	if n > 16<<20 {
		t.Errorf("inference of a graph with 2^62 dims allocated %d bytes", n)
	}
	if err != nil {
		t.Fatalf("Infer: %v", err)
	}
	// Reshape to [-1] of 2^62·2^62·4 elements overflows: the node is
	// unresolved with a reason, not a wrong number.
	if v := res.Values.Get("flat"); v.Type.RankKnown && v.Type.Shape.AllKnown() {
		t.Errorf("flat: got known shape %v for an overflowing element count", v.Type.Shape)
	}
	if v := res.Values.Get("y"); !v.Type.RankKnown || len(v.Type.Shape) != 3 {
		t.Errorf("y: want rank 3, got %v", v.Type)
	}
}

func rawInt64s(v ...int64) model.TensorData {
	b := make([]byte, 8*len(v))
	for i, x := range v {
		for k := 0; k < 8; k++ {
			b[8*i+k] = byte(uint64(x) >> (8 * k))
		}
	}
	return model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{b}}
}

func TestHostileDeepNesting(t *testing.T) {
	// If nodes nested 10,000 deep, built in memory (the decoder refuses such
	// files earlier; this checks the engine's own bound).
	cond := &model.Tensor{Name: "c", DType: model.Bool, Dims: []int64{}, Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{{1}}}}
	inner := &model.Graph{Name: "leaf", Nodes: []*model.Node{node("Identity", []string{"x"}, []string{"y0"})}, Outputs: []*model.ValueInfo{{Name: "y0"}}}
	for i := 0; i < 10000; i++ {
		n := node("If", []string{"c"}, []string{"y0"},
			&model.Attr{Name: "then_branch", Kind: model.AttrGraph, Graph: inner},
			&model.Attr{Name: "else_branch", Kind: model.AttrGraph, Graph: inner})
		inner = &model.Graph{Name: "g", Nodes: []*model.Node{n}, Outputs: []*model.ValueInfo{{Name: "y0"}}}
	}
	g := &model.Graph{
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(2))},
		Initializers: []*model.Tensor{cond},
		Nodes:        inner.Nodes,
		Outputs:      []*model.ValueInfo{{Name: "y0"}},
	}
	var err error
	n := allocDuring(func() { _, err = Infer(graphModel(g), InferOptions{}) })
	if err == nil || !strings.Contains(err.Error(), "nest too deep") {
		t.Fatalf("want a nesting error, got %v", err)
	}
	if n > 64<<20 {
		t.Errorf("deep nesting allocated %d bytes", n)
	}
}

func TestHostileRunawayLoop(t *testing.T) {
	// A loop whose trip count is 2^62 and whose state is constant must not be
	// unrolled: its scan output gets the trip count as a dim.
	body := &model.Graph{
		Name:    "body",
		Inputs:  []*model.ValueInfo{input("i", model.Int64), input("cin", model.Bool)},
		Nodes:   []*model.Node{node("Identity", []string{"cin"}, []string{"cout"}), node("Identity", []string{"i"}, []string{"scan"})},
		Outputs: []*model.ValueInfo{{Name: "cout"}, {Name: "scan"}},
	}
	g := &model.Graph{
		Initializers: []*model.Tensor{
			{Name: "M", DType: model.Int64, Dims: []int64{}, Data: rawInt64s(1 << 62)},
			{Name: "c", DType: model.Bool, Dims: []int64{}, Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{{1}}}},
		},
		Nodes:   []*model.Node{node("Loop", []string{"M", "c"}, []string{"out"}, &model.Attr{Name: "body", Kind: model.AttrGraph, Graph: body})},
		Outputs: []*model.ValueInfo{{Name: "out"}},
	}
	res, err := Infer(graphModel(g), InferOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if got := res.Values.Get("out").Type.Shape; !got.Equal(model.KnownShape(1 << 62)) {
		t.Errorf("out: got %v, want [%d]", got, int64(1)<<62)
	}
}

// FuzzInfer decodes arbitrary bytes as an ONNX model and, when that
// succeeds, infers shapes: neither may panic. When inference succeeds,
// Measure must too (unless a weight's bytes cannot be read, which it
// reports naming the weight), with no negative figure. Seeded from the
// backend test suite when it is installed.
func FuzzInfer(f *testing.F) {
	if dir := corpus.Dir(); dir != "" {
		for _, name := range []string{"node/test_reshape_reordered_all_dims", "node/test_loop11", "node/test_if", "node/test_conv_with_strides_padding",
			"node/test_range_float_type_positive_delta_expanded", "node/test_sequence_map_identity_1_sequence", "node/test_gather_0", "node/test_slice_neg_steps",
			"pytorch-converted/test_ConvTranspose2d", "node/test_scan9_sum", "node/test_split_variable_parts_1d", "node/test_einsum_batch_matmul"} {
			if b, err := os.ReadFile(dir + "/" + name + "/model.onnx"); err == nil {
				f.Add(b)
			}
		}
	}
	f.Add([]byte{})
	// Tensors computed at load time (static.go): a ConstantOfShape weight,
	// an expanded mask, ConstantOfShape indices.
	for _, g := range loadTimeSeeds() {
		if b, err := onnx.Encode(graphModel(g)); err == nil {
			f.Add(b)
		}
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := onnx.Decode(data, onnx.Options{Path: "fuzz.onnx", ReadFile: func(string) ([]byte, error) { return nil, os.ErrNotExist }})
		if err != nil {
			return
		}
		if _, err := Infer(m, InferOptions{}); err != nil {
			return
		}
		got, err := Measure(m, int64(len(data)), Options{})
		if err != nil {
			if !strings.HasPrefix(err.Error(), "weight \"") {
				t.Fatalf("inference succeeded but Measure failed: %v", err)
			}
			return
		}
		for _, f := range []struct {
			name string
			v    int64
		}{
			{"file_bytes", got.FileBytes}, {"external_bytes", got.ExternalBytes}, {"params", got.Params}, {"param_bytes", got.ParamBytes},
			{"macs", got.MACs}, {"flops", got.FLOPs},
			{"memory.graph.peak_live_bytes", got.Memory.Graph.PeakLiveBytes}, {"memory.graph.arena_bytes", got.Memory.Graph.ArenaBytes},
			{"memory.deployed.peak_live_bytes", got.Memory.Deployed.PeakLiveBytes}, {"memory.deployed.arena_bytes", got.Memory.Deployed.ArenaBytes},
		} {
			if f.v < 0 {
				t.Errorf("%s is %d", f.name, f.v)
			}
		}
		if got.Sparsity != -1 && (got.Sparsity < 0 || got.Sparsity > 1) {
			t.Errorf("sparsity is %g", got.Sparsity)
		}
		if got.GeneratedParamBytes < 0 || got.GeneratedParamBytes > got.ParamBytes {
			t.Errorf("generated_param_bytes %d outside 0..param_bytes %d", got.GeneratedParamBytes, got.ParamBytes)
		}
	})
}

// loadTimeSeeds are small graphs whose tensors are computed at load time.
func loadTimeSeeds() []*model.Graph {
	zero := &model.Attr{Name: "value", Kind: model.AttrTensor, Tensor: nnI64("value", []int64{0}).tensor()}
	return []*model.Graph{
		{Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(64))},
			Nodes: []*model.Node{constNode(nnI64("shape", []int64{64, 64}).tensor()),
				node("ConstantOfShape", []string{"shape"}, []string{"w"}, fillAttr(0.01)),
				node("MatMul", []string{"x", "w"}, []string{"y"})},
			Outputs: []*model.ValueInfo{{Name: "y"}}},
		{Inputs: []*model.ValueInfo{input("s", model.Float32, model.Known(1), model.Known(1), model.Known(16), model.Known(16))},
			Nodes: []*model.Node{constNode(nnF32("z", []float64{0}, []int64{}...).tensor()), constNode(nnI64("shape", []int64{1, 1, 16, 16}).tensor()),
				node("Expand", []string{"z", "shape"}, []string{"mask"}), node("Add", []string{"s", "mask"}, []string{"y"})},
			Outputs: []*model.ValueInfo{{Name: "y"}}},
		{Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(10), model.Known(8))},
			Nodes: []*model.Node{constNode(nnI64("shape", []int64{100}).tensor()),
				node("ConstantOfShape", []string{"shape"}, []string{"idx"}, zero), node("Gather", []string{"x", "idx"}, []string{"y"})},
			Outputs: []*model.ValueInfo{{Name: "y"}}},
	}
}

func TestHostileSplitToSequenceHugeAxis(t *testing.T) {
	// SplitToSequence of a 2^40-long axis, into items of 1 (no split input,
	// and a scalar split of 1): the sequence is too long to hold item by
	// item, so it must stay of unknown length rather than allocate 2^40
	// items.
	huge := model.Known(1 << 40)
	for _, tc := range []struct {
		name string
		ins  []string
	}{{"no split", []string{"x"}}, {"scalar split", []string{"x", "one"}}} {
		t.Run(tc.name, func(t *testing.T) {
			g := &model.Graph{
				Inputs:       []*model.ValueInfo{input("x", model.Float32, huge, model.Known(2))},
				Initializers: []*model.Tensor{{Name: "one", DType: model.Int64, Dims: []int64{}, Data: rawInt64s(1)}},
				Nodes:        []*model.Node{node("SplitToSequence", tc.ins, []string{"s"})},
				Outputs:      []*model.ValueInfo{{Name: "s"}},
			}
			res, n, err := inferAllocs(g)
			if n > 16<<20 {
				t.Fatalf("SplitToSequence of a 2^40 axis allocated %d bytes", n)
			}
			if err != nil {
				t.Fatal(err)
			}
			if v := res.Values.Get("s"); v == nil || v.Type.Kind != model.KindSequence || v.SeqKnown() {
				t.Errorf("s: want a sequence of unknown length, got %+v", v)
			}
		})
	}
}

func TestHostileSequenceMapUnequalLengths(t *testing.T) {
	// SequenceMap over two sequences of 2 and 1 items: the spec requires
	// equal lengths, so the node is an error (or left unresolved), never an
	// index past the shorter sequence.
	body := &model.Graph{
		Name:    "body",
		Inputs:  []*model.ValueInfo{input("a", model.Float32, model.Known(3)), input("b", model.Float32, model.Known(3))},
		Nodes:   []*model.Node{node("Add", []string{"a", "b"}, []string{"c"})},
		Outputs: []*model.ValueInfo{{Name: "c"}},
	}
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(3))},
		Nodes: []*model.Node{
			node("SequenceConstruct", []string{"x"}, []string{"short"}),
			node("SequenceConstruct", []string{"x", "x"}, []string{"long"}),
			node("SequenceMap", []string{"short", "long"}, []string{"out"}, &model.Attr{Name: "body", Kind: model.AttrGraph, Graph: body}),
		},
		Outputs: []*model.ValueInfo{{Name: "out"}},
	}
	res, err := Infer(graphModel(g), InferOptions{})
	if err == nil && (res.Values.Get("out") == nil || res.Values.Get("out").SeqKnown()) {
		t.Errorf("out: want an error or a sequence of unknown length, got %+v", res.Values.Get("out"))
	}
}

func TestHostileGatherFoldBlowup(t *testing.T) {
	// Gather of two small constants, data [1, 4096] and 4096 indices (64
	// KiB of int64 between them), makes a [4096, 4096] output: 16.7 M
	// elements, too many to fold. The shape is inferred; the values are
	// not held (a 65536-wide pair would ask for 4.3 G elements).
	const n = 4096
	data := &model.Tensor{Name: "data", DType: model.Int64, Dims: []int64{1, n}, Data: rawInt64s(make([]int64, n)...)}
	idx := &model.Tensor{Name: "idx", DType: model.Int64, Dims: []int64{n}, Data: rawInt64s(make([]int64, n)...)}
	g := &model.Graph{
		Initializers: []*model.Tensor{data, idx},
		Nodes:        []*model.Node{node("Gather", []string{"data", "idx"}, []string{"y"})},
		Outputs:      []*model.ValueInfo{{Name: "y"}},
	}
	res, alloc, err := inferAllocs(g)
	if err != nil {
		t.Fatal(err)
	}
	if alloc > 16<<20 {
		t.Errorf("Gather folding allocated %d bytes", alloc)
	}
	v := res.Values.Get("y")
	if !v.Type.Shape.Equal(model.KnownShape(n, n)) {
		t.Errorf("y: shape %v, want [%d,%d]", v.Type.Shape, n, n)
	}
	if v.Const() != nil {
		t.Errorf("y: %d elements folded, more than maxFoldElements", v.Const().Len())
	}
}

func TestHostileConcatFoldDoubling(t *testing.T) {
	// Thirty Concats, each of the previous result with itself, starting
	// from 1,024 constant int64s: a file of a few KiB whose last tensor has
	// 1024·2^30 elements. Shapes are inferred; values are folded only up to
	// maxFoldElements, so memory stays small.
	const steps = 30
	nodes := []*model.Node{}
	prev := "c0"
	for i := 1; i <= steps; i++ {
		cur := "c" + string(rune('0'+i/10)) + string(rune('0'+i%10))
		nodes = append(nodes, node("Concat", []string{prev, prev}, []string{cur}, &model.Attr{Name: "axis", Kind: model.AttrInt, Int: 0}))
		prev = cur
	}
	g := &model.Graph{
		Initializers: []*model.Tensor{{Name: "c0", DType: model.Int64, Dims: []int64{1024}, Data: rawInt64s(make([]int64, 1024)...)}},
		Nodes:        nodes,
		Outputs:      []*model.ValueInfo{{Name: prev}},
	}
	res, alloc, err := inferAllocs(g)
	if err != nil {
		t.Fatal(err)
	}
	if alloc > 64<<20 {
		t.Errorf("Concat folding allocated %d bytes", alloc)
	}
	v := res.Values.Get(prev)
	if !v.Type.Shape.Equal(model.KnownShape(1024 << steps)) {
		t.Errorf("%s: shape %v, want [%d]", prev, v.Type.Shape, int64(1024)<<steps)
	}
	if v.Const() != nil {
		t.Errorf("%s: %d elements folded, more than maxFoldElements", prev, v.Const().Len())
	}
}

func TestHostileRuntimeShapeLength(t *testing.T) {
	// A shape computed at run time whose own length is declared absurd
	// (2^40 entries) or negative: the output's rank is that length, so it
	// is refused with an error, not allocated or passed to make.
	for _, tc := range []struct {
		op  string
		len int64
	}{{"ConstantOfShape", 1 << 40}, {"ConstantOfShape", -1}, {"Reshape", -1}} {
		t.Run(fmt.Sprintf("%s/%d", tc.op, tc.len), func(t *testing.T) {
			ins := []string{"s"}
			if tc.op == "Reshape" {
				ins = []string{"x", "s"}
			}
			g := &model.Graph{
				Inputs:  []*model.ValueInfo{input("x", model.Float32, model.Known(4)), input("s", model.Int64, model.Known(tc.len))},
				Nodes:   []*model.Node{node(tc.op, ins, []string{"y"})},
				Outputs: []*model.ValueInfo{{Name: "y"}},
			}
			res, alloc, err := inferAllocs(g)
			if alloc > 16<<20 {
				t.Errorf("allocated %d bytes", alloc)
			}
			if err == nil && len(res.Unresolved) == 0 {
				t.Errorf("y: %v, want the node unresolved", res.Values.Get("y").Type)
			}
		})
	}
}

func TestHostileGatherNDNegativeBatchDims(t *testing.T) {
	// batch_dims is a count from the file; a negative one is an error for
	// the node, not a slice bound.
	g := &model.Graph{
		Inputs:  []*model.ValueInfo{input("d", model.Float32, model.Known(8)), input("i", model.Int64, model.Known(2), model.Known(1))},
		Nodes:   []*model.Node{node("GatherND", []string{"d", "i"}, []string{"y"}, &model.Attr{Name: "batch_dims", Kind: model.AttrInt, Int: -3})},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	res, err := Infer(graphModel(g), InferOptions{})
	if err == nil && len(res.Unresolved) == 0 {
		t.Errorf("y: %v, want GatherND unresolved", res.Values.Get("y").Type)
	}
}

func TestHostileNodeWithoutOutputs(t *testing.T) {
	// A node that declares no outputs computes nothing anyone reads; rules
	// that name their results after the first output must not index it.
	for _, op := range []string{"Range", "Reshape", "Compress", "NonZero", "Unique", "ConstantOfShape", "Split"} {
		t.Run(op, func(t *testing.T) {
			g := &model.Graph{
				Inputs: []*model.ValueInfo{input("x", model.Int64, model.Known(4)), input("s", model.Int64, model.Known(1))},
				Nodes: []*model.Node{
					{Op: op, Name: "n", Inputs: []string{"x", "s", "s"}},
					node("Identity", []string{"x"}, []string{"y"}),
				},
				Outputs: []*model.ValueInfo{{Name: "y"}},
			}
			res, err := Infer(graphModel(g), InferOptions{})
			if err != nil {
				t.Fatalf("Infer: %v", err)
			}
			// The node is listed as unresolved with the reason, and the
			// graph around it is still inferred: y is x's copy.
			if len(res.Unresolved) != 1 || res.Unresolved[0].Node != "n" || res.Unresolved[0].Reason != "the node declares no outputs" {
				t.Errorf("unresolved %+v, want node n: the node declares no outputs", res.Unresolved)
			}
			if got := res.Values.Get("y").String(); got != "int64[4]" {
				t.Errorf("y is %s, want int64[4]", got)
			}
		})
	}
}
