package measure

import (
	"encoding/binary"
	"math"
	"testing"

	"github.com/loadline/loadline/model"
)

// constNode is a Constant node holding t, its output named after t.
func constNode(t *model.Tensor) *model.Node {
	return &model.Node{Op: "Constant", Name: "const_" + t.Name, Outputs: []string{t.Name},
		Attrs: []*model.Attr{{Name: "value", Kind: model.AttrTensor, Tensor: t}}}
}

// fillAttr is ConstantOfShape's value attribute: a one-element float32
// tensor holding v.
func fillAttr(v float32) *model.Attr {
	b := binary.LittleEndian.AppendUint32(nil, math.Float32bits(v))
	return &model.Attr{Name: "value", Kind: model.AttrTensor, Tensor: &model.Tensor{Name: "value", DType: model.Float32, Dims: []int64{1},
		Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{b}}}}
}

func measureGraph(t *testing.T, g *model.Graph) *Metrics {
	t.Helper()
	m, err := Measure(graphModel(g), 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Unresolved) != 0 {
		t.Fatalf("unresolved: %+v", m.Unresolved)
	}
	return m
}

// TestGeneratedWeightIsAParameter: a weight computed from constants at
// load time, which the file does not store, is a parameter at its own
// elements and dtype, and generated_param_bytes says how much of
// param_bytes it is. W = ConstantOfShape([4096, 4096], 0.01) → MatMul(x, W)
// is a file of about 150 bytes. Hand-worked: 4096 × 4096 = 16,777,216
// elements × 4 B (float32) = 67,108,864 B. Its activation memory stays x
// [1, 4096] and y [1, 4096], 16,384 B each, 32,768 B at the MatMul.
func TestGeneratedWeightIsAParameter(t *testing.T) {
	for _, tc := range []struct {
		name  string
		nodes []*model.Node
	}{
		{"ConstantOfShape", []*model.Node{
			constNode(nnI64("shape", []int64{4096, 4096}).tensor()),
			node("ConstantOfShape", []string{"shape"}, []string{"w"}, fillAttr(0.01)),
		}},
		// Expand of a scalar: the scalar itself is no parameter (one
		// element), the expanded tensor is.
		{"Expand", []*model.Node{
			constNode(nnF32("k", []float64{0.01}, []int64{}...).tensor()),
			constNode(nnI64("shape", []int64{4096, 4096}).tensor()),
			node("Expand", []string{"k", "shape"}, []string{"w"}),
		}},
		// A chain of load-time nodes counts once, as what the run-time
		// node reads (the Mul's output), not also as the ConstantOfShape
		// it was computed from.
		{"ConstantOfShape then Mul", []*model.Node{
			constNode(nnI64("shape", []int64{4096, 4096}).tensor()),
			node("ConstantOfShape", []string{"shape"}, []string{"ones"}, fillAttr(1)),
			constNode(nnF32("k", []float64{0.01}, []int64{}...).tensor()),
			node("Mul", []string{"ones", "k"}, []string{"w"}),
		}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			g := &model.Graph{
				Inputs:  []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(4096))},
				Nodes:   append(tc.nodes, node("MatMul", []string{"x", "w"}, []string{"y"})),
				Outputs: []*model.ValueInfo{{Name: "y"}},
			}
			m := measureGraph(t, g)
			if m.Params != 16_777_216 || m.ParamBytes != 67_108_864 || m.GeneratedParamBytes != 67_108_864 {
				t.Errorf("params %d, param_bytes %d, generated_param_bytes %d; want 16,777,216, 67,108,864 and 67,108,864",
					m.Params, m.ParamBytes, m.GeneratedParamBytes)
			}
			if m.Memory.Graph.PeakLiveBytes != 32_768 || m.Memory.Deployed.PeakLiveBytes != 32_768 {
				t.Errorf("peaks %d (graph), %d (deployed); want 32,768: the weight is not an activation",
					m.Memory.Graph.PeakLiveBytes, m.Memory.Deployed.PeakLiveBytes)
			}
			if m.Sparsity != -1 {
				t.Errorf("sparsity %v, want -1: the weight has no stored values", m.Sparsity)
			}
		})
	}
}

// TestGeneratedMaskIsAParameter: an attention mask expanded from a scalar
// at load time and added to the scores is read where a stored mask would
// be a parameter (Add's data input), so it counts as one. Hand-worked:
// 1 × 1 × 2048 × 2048 = 4,194,304 elements × 4 B = 16,777,216 B, all of
// them generated.
func TestGeneratedMaskIsAParameter(t *testing.T) {
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("scores", model.Float32, model.Known(1), model.Known(1), model.Known(2048), model.Known(2048))},
		Nodes: []*model.Node{
			constNode(nnF32("zero", []float64{0}, []int64{}...).tensor()),
			constNode(nnI64("shape", []int64{1, 1, 2048, 2048}).tensor()),
			node("Expand", []string{"zero", "shape"}, []string{"mask"}),
			node("Add", []string{"scores", "mask"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m := measureGraph(t, g)
	if m.Params != 4_194_304 || m.ParamBytes != 16_777_216 || m.GeneratedParamBytes != 16_777_216 {
		t.Errorf("params %d, param_bytes %d, generated_param_bytes %d; want 4,194,304, 16,777,216 and 16,777,216",
			m.Params, m.ParamBytes, m.GeneratedParamBytes)
	}
}

// TestHeldIndicesInPeak: a tensor computed from constants at load time
// and read only at an index position (Gather's indices) is no parameter
// but constant memory, live at every step. idx = ConstantOfShape([100000])
// of int64 zeros, y = Gather(x [10, 8], idx) [100000, 8]. Hand-worked:
// x 10 × 8 × 4 = 320 B, y 100,000 × 8 × 4 = 3,200,000 B, idx 100,000 ×
// 8 = 800,000 B; at the Gather (step 2) all three are live: 4,000,320 B
// (3,200,320 B when idx was left out).
func TestHeldIndicesInPeak(t *testing.T) {
	zero := &model.Attr{Name: "value", Kind: model.AttrTensor, Tensor: nnI64("value", []int64{0}).tensor()}
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(10), model.Known(8))},
		Nodes: []*model.Node{
			constNode(nnI64("shape", []int64{100_000}).tensor()),
			node("ConstantOfShape", []string{"shape"}, []string{"idx"}, zero),
			node("Gather", []string{"x", "idx"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m := measureGraph(t, g)
	if m.Params != 0 || m.GeneratedParamBytes != 0 {
		t.Errorf("params %d, generated_param_bytes %d; want 0: indices are no weight", m.Params, m.GeneratedParamBytes)
	}
	if m.Memory.Graph.PeakLiveBytes != 4_000_320 || m.Memory.Deployed.PeakLiveBytes != 4_000_320 {
		t.Errorf("peaks %d (graph), %d (deployed); want 4,000,320", m.Memory.Graph.PeakLiveBytes, m.Memory.Deployed.PeakLiveBytes)
	}
	if m.Memory.Graph.ArenaBytes < 4_000_320 {
		t.Errorf("arena %d below the peak", m.Memory.Graph.ArenaBytes)
	}
}

// TestShapeDerivedTensorIsActivation: a tensor computed from the shape of
// a run-time tensor (zeros = ConstantOfShape(Shape(x)), as exporters
// write zeros_like) is no parameter: it is planned like any node output,
// from its producer's step through its last reader's. x [64, 64] float32:
// 16,384 B; zeros 16,384 B (step 1 through 2); y = Add(x, zeros) 16,384 B.
// Hand-worked peak at the Add: 3 × 16,384 = 49,152 B.
func TestShapeDerivedTensorIsActivation(t *testing.T) {
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(64), model.Known(64))},
		Nodes: []*model.Node{
			node("Shape", []string{"x"}, []string{"s"}),
			node("ConstantOfShape", []string{"s"}, []string{"zeros"}, fillAttr(0)),
			node("Add", []string{"x", "zeros"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m := measureGraph(t, g)
	if m.Params != 0 || m.GeneratedParamBytes != 0 {
		t.Errorf("params %d, generated_param_bytes %d; want 0", m.Params, m.GeneratedParamBytes)
	}
	if m.Memory.Graph.PeakLiveBytes != 49_152 {
		t.Errorf("graph peak %d, want 49,152", m.Memory.Graph.PeakLiveBytes)
	}
}

// TestReViewsCountOnce: load-time nodes that only re-view stored
// constants (Concat of two weights, a Transpose of the result) hold no
// more elements than those constants, which are the parameters; nothing
// is generated. Hand-worked: two 32×64 float32 weights, params 2 × 2,048 =
// 4,096, param_bytes 16,384. Shape arithmetic (Shape → Gather → Concat →
// Reshape) adds nothing either.
func TestReViewsCountOnce(t *testing.T) {
	a := nnF32("a", make([]float64, 2048), 32, 64).tensor()
	b := nnF32("b", make([]float64, 2048), 32, 64).tensor()
	g := &model.Graph{
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(2), model.Known(32), model.Known(64))},
		Initializers: []*model.Tensor{a, b, nnI64("i2", []int64{2}).tensor(), nnI64("rest", []int64{-1}).tensor()},
		Nodes: []*model.Node{
			node("Concat", []string{"a", "b"}, []string{"ab"}, atI("axis", 0)),
			node("Transpose", []string{"ab"}, []string{"w"}, atIs("perm", 1, 0)),
			node("Shape", []string{"x"}, []string{"s"}),
			node("Gather", []string{"s", "i2"}, []string{"n"}, atI("axis", 0)),
			node("Concat", []string{"rest", "n"}, []string{"shape"}, atI("axis", 0)),
			node("Reshape", []string{"x", "shape"}, []string{"x2"}),
			node("MatMul", []string{"x2", "w"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m := measureGraph(t, g)
	if m.Params != 4096 || m.ParamBytes != 16_384 || m.GeneratedParamBytes != 0 {
		t.Errorf("params %d, param_bytes %d, generated_param_bytes %d; want 4,096, 16,384 and 0", m.Params, m.ParamBytes, m.GeneratedParamBytes)
	}
}

// TestTiledWeightCountsBoth: a stored weight tiled at load time counts as
// itself (it is in the file) and the tiled tensor counts as a generated
// weight (the device holds it). Hand-worked: w [1, 4096] float32 tiled
// [4096, 1] times: 4,096 stored + 16,777,216 generated = 16,781,312
// params; 16,384 + 67,108,864 = 67,125,248 B, of which 67,108,864
// generated.
func TestTiledWeightCountsBoth(t *testing.T) {
	g := &model.Graph{
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(4096))},
		Initializers: []*model.Tensor{nnF32("w", make([]float64, 4096), 1, 4096).tensor(), nnI64("reps", []int64{4096, 1}).tensor()},
		Nodes: []*model.Node{
			node("Tile", []string{"w", "reps"}, []string{"wt"}),
			node("MatMul", []string{"x", "wt"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m := measureGraph(t, g)
	if m.Params != 16_781_312 || m.ParamBytes != 67_125_248 || m.GeneratedParamBytes != 67_108_864 {
		t.Errorf("params %d, param_bytes %d, generated_param_bytes %d; want 16,781,312, 67,125,248 and 67,108,864",
			m.Params, m.ParamBytes, m.GeneratedParamBytes)
	}
}

// TestHeldRangeInPeak: Range(0, 100000, 1) as Gather's indices is constant
// memory too. Hand-worked: x [100000, 8] and y [100000, 8] float32,
// 3,200,000 B each, the indices 100,000 × 8 B = 800,000 B: 7,200,000 B at
// the Gather.
func TestHeldRangeInPeak(t *testing.T) {
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(100_000), model.Known(8))},
		Nodes: []*model.Node{
			constNode(nnI64("start", []int64{0}, []int64{}...).tensor()),
			constNode(nnI64("limit", []int64{100_000}, []int64{}...).tensor()),
			constNode(nnI64("delta", []int64{1}, []int64{}...).tensor()),
			node("Range", []string{"start", "limit", "delta"}, []string{"idx"}),
			node("Gather", []string{"x", "idx"}, []string{"y"}),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m := measureGraph(t, g)
	if m.Params != 0 || m.Memory.Graph.PeakLiveBytes != 7_200_000 || m.Memory.Deployed.PeakLiveBytes != 7_200_000 {
		t.Errorf("params %d, peaks %d (graph), %d (deployed); want 0 and 7,200,000", m.Params, m.Memory.Graph.PeakLiveBytes, m.Memory.Deployed.PeakLiveBytes)
	}
}

// TestGeneratedWeightReadInBranch: a weight computed at load time in the
// main graph and read by a node of an If branch (which runs at run time)
// is a parameter. Hand-worked: 64 × 64 = 4,096 elements × 4 B = 16,384 B.
func TestGeneratedWeightReadInBranch(t *testing.T) {
	then := &model.Graph{Name: "then", Nodes: []*model.Node{node("MatMul", []string{"x", "w"}, []string{"a"})},
		Outputs: []*model.ValueInfo{{Name: "a"}}}
	els := &model.Graph{Name: "else", Nodes: []*model.Node{node("Identity", []string{"x"}, []string{"b"})},
		Outputs: []*model.ValueInfo{{Name: "b"}}}
	g := &model.Graph{
		Inputs: []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(64)), input("c", model.Bool)},
		Nodes: []*model.Node{
			constNode(nnI64("shape", []int64{64, 64}).tensor()),
			node("ConstantOfShape", []string{"shape"}, []string{"w"}, fillAttr(0.5)),
			node("If", []string{"c"}, []string{"y"}, atG("then_branch", then), atG("else_branch", els)),
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	m := measureGraph(t, g)
	if m.Params != 4096 || m.GeneratedParamBytes != 16_384 {
		t.Errorf("params %d, generated_param_bytes %d; want 4,096 and 16,384", m.Params, m.GeneratedParamBytes)
	}
}

// TestTFLiteGeneratedIsActivation: the microcontroller runtime computes
// every TFLite operator at run time, so a TILE of a stored weight is an
// activation in every view, as in the runtime view's arena, and no
// parameter: params are the stored w alone. Hand-worked: w [1, 64] float32
// tiled to wt [64, 64], 16,384 B; x and y [1, 64], 256 B each; at the
// FULLY_CONNECTED all three are live: 16,896 B (every size a multiple of
// 16, the runtime's rounding changes nothing).
func TestTFLiteGeneratedIsActivation(t *testing.T) {
	g := &model.Graph{
		TensorOrder:  []string{"x", "w", "reps", "wt", "y"},
		Inputs:       []*model.ValueInfo{input("x", model.Float32, model.Known(1), model.Known(64))},
		Initializers: []*model.Tensor{nnF32("w", make([]float64, 64), 1, 64).tensor(), nnInts("reps", model.Int32, []int64{64, 1}).tensor()},
		Nodes: []*model.Node{
			{Op: "TILE", Domain: "tflite", Name: "tile", Inputs: []string{"w", "reps"}, Outputs: []string{"wt"}},
			{Op: "FULLY_CONNECTED", Domain: "tflite", Name: "fc", Inputs: []string{"x", "wt"}, Outputs: []string{"y"}},
		},
		ValueInfo: []*model.ValueInfo{input("wt", model.Float32, model.Known(64), model.Known(64)), input("y", model.Float32, model.Known(1), model.Known(64))},
		Outputs:   []*model.ValueInfo{input("y", model.Float32, model.Known(1), model.Known(64))},
	}
	m, err := Measure(&model.Model{Format: "tflite", Graph: g}, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if m.Params != 64 || m.GeneratedParamBytes != 0 {
		t.Errorf("params %d, generated_param_bytes %d; want 64 and 0", m.Params, m.GeneratedParamBytes)
	}
	if m.Memory.Runtime == nil || m.Memory.Runtime.PeakLiveBytes != 16_896 || m.Memory.Graph.PeakLiveBytes != 16_896 || m.Memory.Deployed.PeakLiveBytes != 16_896 {
		t.Errorf("peaks %+v, runtime %+v; want 16,896 in every view", m.Memory, m.Memory.Runtime)
	}
}
