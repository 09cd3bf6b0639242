package onnx

import (
	"encoding/binary"
	"math"
	"os"
	"path/filepath"
	"testing"

	"github.com/loadline/loadline/model"
	"google.golang.org/protobuf/encoding/protowire"
)

// Tensor constructors for hand-built models, one per stored form.

func rawTensor(name string, dt model.DType, dims []int64, raw []byte) *model.Tensor {
	return &model.Tensor{Name: name, DType: dt, Dims: dims, Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{raw}}}
}

func float32Raw(name string, dims []int64, vals ...float32) *model.Tensor {
	b := make([]byte, 4*len(vals))
	for i, v := range vals {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(v))
	}
	return rawTensor(name, model.Float32, dims, b)
}

// varintTensor stores vals in int32_data, int64_data or uint64_data.
func varintTensor(name string, dt model.DType, enc model.Encoding, dims []int64, vals ...int64) *model.Tensor {
	var b []byte
	for _, v := range vals {
		b = protowire.AppendVarint(b, uint64(v))
	}
	return &model.Tensor{Name: name, DType: dt, Dims: dims, Data: model.TensorData{Encoding: enc, Segments: [][]byte{b}}}
}

func fixedTensor(name string, dt model.DType, enc model.Encoding, dims []int64, bits ...uint64) *model.Tensor {
	var b []byte
	for _, v := range bits {
		if enc == model.EncodingFloat32s {
			b = binary.LittleEndian.AppendUint32(b, uint32(v))
		} else {
			b = binary.LittleEndian.AppendUint64(b, v)
		}
	}
	return &model.Tensor{Name: name, DType: dt, Dims: dims, Data: model.TensorData{Encoding: enc, Segments: [][]byte{b}}}
}

func f32bits(vs ...float32) []uint64 {
	out := make([]uint64, len(vs))
	for i, v := range vs {
		out[i] = uint64(math.Float32bits(v))
	}
	return out
}

func tensorValueInfo(name string, dt model.DType, dims ...model.Dim) *model.ValueInfo {
	return &model.ValueInfo{Name: name, Type: model.TensorType(dt, model.Shape(dims))}
}

// scratchModel is a small model built by hand with the model types: a Conv,
// a Relu, a Reshape fed by a Constant, an If with two subgraphs, and unused
// initializers in every typed encoding that ONNX 1.12 reads.
func scratchModel() *model.Model {
	n := model.Sym("N")
	w := make([]float32, 2*3*3*3)
	for i := range w {
		w[i] = float32(i%7) - 3.5
	}
	branch := func(name, op string) *model.Graph {
		return &model.Graph{
			Name:    name,
			Nodes:   []*model.Node{{Name: name + "_op", Op: op, Inputs: []string{"flat"}, Outputs: []string{name + "_out"}}},
			Outputs: []*model.ValueInfo{tensorValueInfo(name+"_out", model.Float32, n, model.Known(32))},
		}
	}
	return &model.Model{
		Format:          "onnx",
		IRVersion:       8,
		Opsets:          map[string]int64{"": 13},
		ProducerName:    "loadline",
		ProducerVersion: "test",
		DocString:       "built by hand in scratch_test.go",
		Metadata:        map[string]string{"purpose": "encoder test"},
		Graph: &model.Graph{
			Name: "scratch",
			Nodes: []*model.Node{
				{Name: "conv", Op: "Conv", Inputs: []string{"x", "W", "B"}, Outputs: []string{"c"}, Attrs: []*model.Attr{
					{Name: "kernel_shape", Kind: model.AttrInts, Ints: []int64{3, 3}},
					{Name: "pads", Kind: model.AttrInts, Ints: []int64{1, 1, 1, 1}},
				}},
				{Name: "relu", Op: "Relu", Inputs: []string{"c"}, Outputs: []string{"r"}},
				{Name: "shape", Op: "Constant", Outputs: []string{"shape"}, Attrs: []*model.Attr{
					{Name: "value", Kind: model.AttrTensor, Tensor: varintTensor("", model.Int64, model.EncodingInt64s, []int64{2}, 0, -1)},
				}},
				{Name: "reshape", Op: "Reshape", Inputs: []string{"r", "shape"}, Outputs: []string{"flat"}},
				{Name: "if", Op: "If", Inputs: []string{"cond"}, Outputs: []string{"y"}, Attrs: []*model.Attr{
					{Name: "then_branch", Kind: model.AttrGraph, Graph: branch("then", "Identity")},
					{Name: "else_branch", Kind: model.AttrGraph, Graph: branch("else", "Neg")},
				}},
			},
			Inputs: []*model.ValueInfo{
				tensorValueInfo("x", model.Float32, n, model.Known(3), model.Known(4), model.Known(4)),
				tensorValueInfo("cond", model.Bool),
			},
			Outputs: []*model.ValueInfo{tensorValueInfo("y", model.Float32, n, model.Known(32))},
			Initializers: []*model.Tensor{
				float32Raw("W", []int64{2, 3, 3, 3}, w...),
				fixedTensor("B", model.Float32, model.EncodingFloat32s, []int64{2}, f32bits(0.25, -1)...),
				// float16 in int32_data: 1, -2, 65504 (max), +Inf, smallest subnormal.
				varintTensor("f16", model.Float16, model.EncodingInt32s, []int64{5}, 0x3C00, 0xC000, 0x7BFF, 0x7C00, 0x0001),
				rawTensor("f16raw", model.Float16, []int64{2}, []byte{0x00, 0x3C, 0x55, 0x35}),
				// bfloat16 in int32_data: 1, -3, 2^-126.
				varintTensor("bf16", model.BFloat16, model.EncodingInt32s, []int64{3}, 0x3F80, 0xC040, 0x0080),
				varintTensor("i8", model.Int8, model.EncodingInt32s, []int64{2, 2}, -128, -1, 0, 127),
				varintTensor("i16", model.Int16, model.EncodingInt32s, []int64{2}, -32768, 32767),
				varintTensor("u8", model.Uint8, model.EncodingInt32s, []int64{3}, 0, 128, 255),
				rawTensor("u8raw", model.Uint8, []int64{3}, []byte{1, 2, 255}),
				varintTensor("b", model.Bool, model.EncodingInt32s, []int64{3}, 1, 0, 1),
				varintTensor("i32", model.Int32, model.EncodingInt32s, []int64{2}, math.MinInt32, math.MaxInt32),
				varintTensor("i64", model.Int64, model.EncodingInt64s, []int64{2}, math.MinInt64, math.MaxInt64),
				varintTensor("u32", model.Uint32, model.EncodingUint64s, []int64{1}, math.MaxUint32),
				varintTensor("u64", model.Uint64, model.EncodingUint64s, []int64{1}, -1), // 2^64-1
				fixedTensor("f64", model.Float64, model.EncodingFloat64s, []int64{2}, math.Float64bits(math.Pi), math.Float64bits(-0.0)),
				{Name: "s", DType: model.String, Dims: []int64{2}, Data: model.TensorData{Encoding: model.EncodingStrings, Segments: [][]byte{[]byte("hello"), {0xff, 0x00}}}},
				{Name: "empty", DType: model.Float32, Dims: []int64{0, 3}, Data: model.TensorData{Encoding: model.EncodingRaw}},
			},
		},
	}
}

// TestScratchModelPythonChecks encodes a model built by hand and has ONNX's
// own Python package (Debian python3-onnx) load it, run
// onnx.checker.check_model(full_check=True) on it and read it back: its ops,
// inputs, outputs, initializer dtypes, dims and values (numpy_helper.to_array)
// must be what we built.
func TestScratchModelPythonChecks(t *testing.T) {
	requirePython(t)
	m := scratchModel()
	data, err := Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "scratch.onnx")
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	var py pyModel
	line := runDump(t, []string{"check " + path})[0]
	if err := decodeJSON(line, &py); err != nil {
		t.Fatal(err)
	}
	if py.Load != "" {
		t.Fatalf("python rejects our model: %s", py.Load)
	}
	if msg := compareModel(m, &py); msg != "" {
		t.Fatal(msg)
	}
	for i, tn := range m.Graph.Initializers {
		if _, err := compareTensor(tn, py.Initializers[i]); err != nil {
			t.Errorf("initializer %d: %v", i, err)
		}
	}
	for i, c := range constants(m.Graph) {
		if _, err := compareTensor(c, py.Constants[i]); err != nil {
			t.Errorf("Constant %d: %v", i, err)
		}
	}
	// And our own decoder reads back exactly what we built.
	back, err := Decode(data, Options{Path: path})
	if err != nil {
		t.Fatal(err)
	}
	if d := diff(m, back); d != "" {
		t.Errorf("decode(encode(m)) differs at %s", d)
	}
}
