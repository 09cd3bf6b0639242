package tflite

import (
	"bytes"
	"encoding/binary"
	"errors"
	"os"
	"reflect"
	"runtime"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
)

// tiny is a small model exercising what the decoder maps: a per-channel
// quantized CONV_2D whose filter is int4 (two a byte), a variable tensor,
// a shape_signature, a custom operator, an IF with two branch subgraphs,
// an operator code newer than the old byte field holds, metadata and a
// signature.
func tiny() *Model {
	q := &Quantization{Scale: []float32{0.5, 0.25}, ZeroPoint: []int64{0, 0}, QuantizedDimension: 0}
	branch := func(name string) Subgraph {
		return Subgraph{Name: name,
			Tensors: []Tensor{
				{Shape: []int32{1, 4}, Type: 0, Name: "x"},
				{Shape: []int32{1, 4}, Type: 0, Name: "y"},
			},
			Inputs: []int32{0}, Outputs: []int32{1},
			Operators: []Operator{{OpcodeIndex: 3, Inputs: []int32{0}, Outputs: []int32{1}}},
		}
	}
	offline := make([]byte, 0, 64)
	for _, v := range []int32{1, 1, 7, -1, -1, -1, 0, -1, -1, -1} {
		offline = binary.LittleEndian.AppendUint32(offline, uint32(v))
	}
	return &Model{
		Version: 3,
		OperatorCodes: []OperatorCode{
			{DeprecatedBuiltinCode: 3, BuiltinCode: 3, Version: 1},     // CONV_2D
			{DeprecatedBuiltinCode: 32, CustomCode: "Frobnicate"},      // custom
			{DeprecatedBuiltinCode: 0, BuiltinCode: 118, Version: 1},   // IF, in the new field only
			{DeprecatedBuiltinCode: 19, BuiltinCode: 0, Version: 1},    // RELU, in the old field only
			{DeprecatedBuiltinCode: 127, BuiltinCode: 150, Version: 1}, // GELU, above the old field's range
		},
		Subgraphs: []Subgraph{{
			Name: "main",
			Tensors: []Tensor{
				{Shape: []int32{1, 4, 4, 3}, ShapeSignature: []int32{-1, 4, 4, 3}, Type: 9, Name: "image"},
				{Shape: []int32{2, 3, 3, 3}, Type: 17, Buffer: 1, Name: "filter", Quantization: q},
				{Shape: []int32{2}, Type: 2, Buffer: 2, Name: "bias"},
				{Shape: []int32{1, 2, 2, 2}, ShapeSignature: []int32{-1, 2, 2, 2}, Type: 9, Name: "conv"},
				{Shape: []int32{1, 4}, Type: 0, Name: "state", IsVariable: true},
				{Shape: []int32{1, 4}, Type: 0, Name: "custom_out"},
				{Shape: []int32{}, Type: 6, Buffer: 3, Name: "cond"},
				{Shape: []int32{1, 4}, Type: 0, Name: "y"},
				{Shape: []int32{1, 4}, Type: 0, Name: "y"}, // a repeated name
			},
			Inputs:  []int32{0},
			Outputs: []int32{3, 8},
			Operators: []Operator{
				{OpcodeIndex: 0, Inputs: []int32{0, 1, 2}, Outputs: []int32{3}, OptionsType: 1, Options: []Option{
					{Name: "padding", Kind: OptEnum, Enum: "VALID"}, {Name: "stride_w", Kind: OptInt, Int: 1}, {Name: "stride_h", Kind: OptInt, Int: 1},
					{Name: "fused_activation_function", Kind: OptEnum, Enum: "RELU6"}}},
				{OpcodeIndex: 1, Inputs: []int32{4, -1}, Outputs: []int32{5}, CustomOptions: []byte{1, 2, 3}},
				{OpcodeIndex: 2, Inputs: []int32{6, 5}, Outputs: []int32{7}, OptionsType: 92, Options: []Option{
					{Name: "then_subgraph_index", Kind: OptInt, Int: 1}, {Name: "else_subgraph_index", Kind: OptInt, Int: 2}}},
				{OpcodeIndex: 4, Inputs: []int32{7}, Outputs: []int32{8}},
			},
		}, branch("then"), branch("else")},
		Description: "hand-made",
		Buffers: []Buffer{{}, {Data: bytes.Repeat([]byte{0x21}, 27)}, // 54 int4 values in 27 bytes
			{Data: make([]byte, 8)}, {Data: []byte{1}}, {Data: []byte("2.3.0\x00")}, {Data: offline}},
		Metadata:      []Metadata{{Name: MetaMinRuntimeVersion, Buffer: 4}, {Name: MetaOfflinePlan, Buffer: 5}},
		SignatureDefs: []SignatureDef{{Inputs: []TensorMap{{"image", 0}}, Outputs: []TensorMap{{"conv", 3}}, SignatureKey: "serving_default"}},
	}
}

func encodeT(t testing.TB, m *Model, o EncodeOptions) []byte {
	t.Helper()
	b, err := EncodeWith(m, o)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestRoundTrip: what the encoder writes, the parser reads back the same,
// buffers inside the FlatBuffer or after it.
func TestRoundTrip(t *testing.T) {
	m := tiny()
	for _, outside := range []bool{false, true} {
		data := encodeT(t, m, EncodeOptions{OutsideBuffers: outside})
		got, err := Parse(data, "tiny.tflite")
		if err != nil {
			t.Fatalf("outside %v: %v", outside, err)
		}
		for i := range got.Buffers {
			b := &got.Buffers[i]
			if outside && len(b.Data) > 0 && (b.Offset <= 1 || b.Size != uint64(len(b.Data))) {
				t.Errorf("buffer %d: offset %d size %d, want it located after the FlatBuffer", i, b.Offset, b.Size)
			}
			b.Offset, b.Size = 0, 0
			if len(b.Data) == 0 {
				b.Data = nil
			}
		}
		want := tiny()
		for i := range want.Subgraphs[0].Operators {
			op := &want.Subgraphs[0].Operators[i]
			if spec, ok := optionTables[op.OptionsType]; ok {
				// The parser lists every field of the table, defaults included.
				op.Options = withDefaults(op.Options, spec)
			}
		}
		if !reflect.DeepEqual(got, want) {
			t.Errorf("outside %v: round trip differs:\n got %+v\nwant %+v", outside, got.Subgraphs[0].Operators, want.Subgraphs[0].Operators)
		}
	}
}

// withDefaults lists every field of spec, taking the value from opts when
// it names the field.
func withDefaults(opts []Option, spec optionTable) []Option {
	var out []Option
	for _, f := range spec.fields {
		o := Option{Name: f.name, Kind: f.kind, Int: f.def}
		if f.kind == OptEnum {
			o.Enum = f.enums[0]
		}
		for _, g := range opts {
			if g.Name == f.name {
				o = g
				if f.kind == OptEnum {
					for i, e := range f.enums {
						if e == g.Enum {
							o.Int = int64(i)
						}
					}
				}
			}
		}
		out = append(out, o)
	}
	return out
}

// TestConvert: the mapping onto model types (package documentation).
func TestConvert(t *testing.T) {
	m, err := Decode(encodeT(t, tiny(), EncodeOptions{}), Options{Path: "tiny.tflite"})
	if err != nil {
		t.Fatal(err)
	}
	g := m.Graph
	if m.Format != "tflite" || g.Name != "main" || len(g.Nodes) != 4 {
		t.Fatalf("format %q graph %q nodes %d", m.Format, g.Name, len(g.Nodes))
	}
	ops := []string{g.Nodes[0].Domain + ":" + g.Nodes[0].Op, g.Nodes[1].Domain + ":" + g.Nodes[1].Op, g.Nodes[2].Op, g.Nodes[3].Op}
	if want := []string{"tflite:CONV_2D", "tflite.custom:Frobnicate", "IF", "GELU"}; !reflect.DeepEqual(ops, want) {
		t.Errorf("ops %v, want %v", ops, want)
	}
	if a := g.Nodes[0].Attr("padding"); a == nil || a.String != "VALID" {
		t.Errorf("padding %+v", a)
	}
	if a := g.Nodes[0].Attr("fused_activation_function"); a == nil || a.String != "RELU6" {
		t.Errorf("activation %+v", a)
	}
	if th, el := g.Nodes[2].Attr("then_branch"), g.Nodes[2].Attr("else_branch"); th == nil || el == nil || th.Graph.Name != "then" || el.Graph.Name != "else" || th.Graph.Nodes[0].Op != "RELU" {
		t.Errorf("IF branches %+v %+v", th, el)
	}
	if !reflect.DeepEqual(g.Nodes[1].Inputs, []string{"state", ""}) {
		t.Errorf("custom inputs %q: want the omitted input empty", g.Nodes[1].Inputs)
	}
	if want := []string{"image", "filter", "bias", "conv", "state", "custom_out", "cond", "y#7", "y#8"}; !reflect.DeepEqual(g.TensorOrder, want) {
		t.Errorf("tensor order %q, want %q", g.TensorOrder, want)
	}
	if len(g.State) != 1 || g.State[0].Name != "state" {
		t.Errorf("state %+v", g.State)
	}
	f := g.Initializer("filter")
	if f == nil || f.DType != model.Int4 || f.StorageBytes() != 27 {
		t.Fatalf("filter %+v: want int4, 54 values in 27 bytes", f)
	}
	if v, err := f.Int64s(2); err != nil || !reflect.DeepEqual(v, []int64{1, 2}) {
		t.Errorf("int4 values %v %v: 0x21 holds 1 then 2 (low nibble first)", v, err)
	}
	if g.Initializer("cond") == nil || g.Initializer("image") != nil {
		t.Errorf("initializers %v", g.Initializers)
	}
	if in := g.Inputs[0]; in.Type.Shape.String() != "[batch,4,4,3]" || m.DimDefaults["batch"] != 1 {
		t.Errorf("input %s, defaults %v: want the -1 of shape_signature as batch, stored size 1", in.Type, m.DimDefaults)
	}
	if m.Metadata[MetaMinRuntimeVersion] != "2.3.0" {
		t.Errorf("min_runtime_version %q", m.Metadata[MetaMinRuntimeVersion])
	}
	// Offline plan [version 1, 1 subgraph, 7 offsets]: tensor 3 at 0.
	if !reflect.DeepEqual(g.PlannedOffsets, map[string]int64{"conv": 0}) {
		t.Errorf("planned offsets %v", g.PlannedOffsets)
	}
}

// TestOpcodeFields: the code is the larger of the old byte field and the
// new one, as TFLite's readers take it.
func TestOpcodeFields(t *testing.T) {
	for _, c := range []struct {
		old  int8
		new  int32
		want string
	}{{9, 9, "FULLY_CONNECTED"}, {9, 0, "FULLY_CONNECTED"}, {0, 118, "IF"}, {127, 150, "GELU"}, {0, 0, "ADD"}, {0, 900, "BUILTIN_900"}} {
		if got := (OperatorCode{DeprecatedBuiltinCode: c.old, BuiltinCode: c.new}).Code().String(); got != c.want {
			t.Errorf("(%d, %d): %s, want %s", c.old, c.new, got, c.want)
		}
	}
}

func wantError(t *testing.T, data []byte, want ...string) {
	t.Helper()
	_, err := Decode(data, Options{Path: "bad.tflite"})
	if err == nil {
		t.Fatalf("no error, want one mentioning %q", want)
	}
	var de *DecodeError
	if !errors.As(err, &de) || !strings.HasPrefix(err.Error(), "bad.tflite: ") {
		t.Errorf("%v: want a *DecodeError naming the file", err)
	}
	for _, w := range want {
		if !strings.Contains(err.Error(), w) {
			t.Errorf("error %q does not mention %q", err, w)
		}
	}
}

// TestSubgraphErrors: a control flow operator naming a subgraph that does
// not exist, or one already running (a cycle), is an error at its option.
func TestSubgraphErrors(t *testing.T) {
	m := tiny()
	m.Subgraphs[0].Operators[2].Options[0].Int = 7
	wantError(t, encodeT(t, m, EncodeOptions{}), "subgraphs[0].operators[2].builtin_options.then_subgraph_index", "subgraph 7 is out of range (3 subgraphs)")

	m = tiny()
	m.Subgraphs[0].Operators[2].Options[1].Int = 0
	wantError(t, encodeT(t, m, EncodeOptions{}), "else_subgraph_index", "cycle")

	// A branch that runs its caller: 1 → 2 → 1.
	m = tiny()
	m.Subgraphs[1].Operators[0] = Operator{OpcodeIndex: 2, Inputs: []int32{0}, Outputs: []int32{1}, OptionsType: 92, Options: []Option{
		{Name: "then_subgraph_index", Kind: OptInt, Int: 2}, {Name: "else_subgraph_index", Kind: OptInt, Int: 2}}}
	m.Subgraphs[2].Operators[0] = Operator{OpcodeIndex: 2, Inputs: []int32{0}, Outputs: []int32{1}, OptionsType: 92, Options: []Option{
		{Name: "then_subgraph_index", Kind: OptInt, Int: 1}, {Name: "else_subgraph_index", Kind: OptInt, Int: 1}}}
	wantError(t, encodeT(t, m, EncodeOptions{}), "subgraphs[2].operators[0]", "cycle")
}

// TestIndexErrors: tensor, buffer and operator code indexes out of range.
func TestIndexErrors(t *testing.T) {
	m := tiny()
	m.Subgraphs[0].Operators[0].Inputs[1] = 99
	wantError(t, encodeT(t, m, EncodeOptions{}), "subgraphs[0].operators[0].inputs[1]", "tensor 99 is out of range (9 tensors)")
	m = tiny()
	m.Subgraphs[0].Tensors[1].Buffer = 40
	wantError(t, encodeT(t, m, EncodeOptions{}), "subgraphs[0].tensors[1].buffer", "buffer 40 is out of range")
	m = tiny()
	m.Subgraphs[0].Operators[3].OpcodeIndex = 5
	wantError(t, encodeT(t, m, EncodeOptions{}), "subgraphs[0].operators[3].opcode_index", "out of range (5 operator codes)")
	m = tiny()
	m.Buffers[1].Data = m.Buffers[1].Data[:26]
	wantError(t, encodeT(t, m, EncodeOptions{}), "subgraphs[0].tensors[1]", "holds 26 bytes", "needs 27")
	m = tiny()
	m.Subgraphs[0].Inputs = []int32{-3}
	wantError(t, encodeT(t, m, EncodeOptions{}), "subgraphs[0].inputs[0]", "tensor -3 is out of range")
}

// findVector returns the position of the count of the int32 vector holding
// exactly vals, and the position of the uoffset that refers to it.
func findVector(t *testing.T, data []byte, vals ...int32) (vec, ref int) {
	t.Helper()
	var pat []byte
	pat = binary.LittleEndian.AppendUint32(pat, uint32(len(vals)))
	for _, v := range vals {
		pat = binary.LittleEndian.AppendUint32(pat, uint32(v))
	}
	vec = bytes.Index(data, pat)
	if vec < 0 || bytes.Index(data[vec+1:], pat) >= 0 {
		t.Fatalf("vector %v not found once", vals)
	}
	for p := 0; p+4 <= vec; p += 4 {
		if p+int(binary.LittleEndian.Uint32(data[p:])) == vec {
			return vec, p
		}
	}
	t.Fatalf("no reference to the vector at %d", vec)
	return 0, 0
}

// TestHostileOffsets: offsets pointing outside the buffer, a vector
// claiming 2^31 elements, an offset that would wrap around to an earlier
// table (the only way to a cycle), and a file whose tables all share one
// large vector: each is an error naming the field and the byte offset.
func TestHostileOffsets(t *testing.T) {
	m := tiny()
	m.Subgraphs[0].Tensors[0].Shape = []int32{1, 41, 43, 3}
	m.Subgraphs[0].Tensors[0].ShapeSignature = nil
	clean := encodeT(t, m, EncodeOptions{})
	vec, at := findVector(t, clean, 1, 41, 43, 3)

	data := bytes.Clone(clean)
	binary.LittleEndian.PutUint32(data[at:], uint32(len(data)+100-at))
	wantError(t, data, "subgraphs[0].tensors[0].shape", "points past the end", "at byte")

	data = bytes.Clone(clean)
	binary.LittleEndian.PutUint32(data[vec:], 1<<31)
	wantError(t, data, "subgraphs[0].tensors[0].shape", "vector of 2147483648 elements")

	data = bytes.Clone(clean)
	root := binary.LittleEndian.Uint32(data)
	binary.LittleEndian.PutUint32(data[at:], uint32(int64(root)-int64(at))) // wraps to the root table
	wantError(t, data, "subgraphs[0].tensors[0].shape", "points past the end")

	data = bytes.Clone(clean)
	binary.LittleEndian.PutUint32(data, uint32(len(data)))
	wantError(t, data, "points past the end")

	// Every tensor of a large table pointing at one big shape vector: the
	// file is small, what it would decode to is not.
	w := &writer{}
	w.b = append(w.b, 0, 0, 0, 0)
	w.b = append(w.b, Identifier...)
	shared := int64(-1)
	top := w.table([]field{ref(2, func() int64 {
		return w.tables(1, func(int) int64 {
			return w.table([]field{ref(0, func() int64 {
				return w.tables(3000, func(int) int64 {
					if shared < 0 {
						shared = w.tensor(&Tensor{Shape: make([]int32, 4000)})
					}
					return shared
				})
			})}, nil)
		})
	})}, nil)
	binary.LittleEndian.PutUint32(w.b, uint32(top))
	if a := allocated(func() { wantError(t, w.b, "subgraphs[0].tensors", "refer to the same data over and over") }); a > 8<<20 {
		t.Errorf("%d bytes allocated decoding a %d-byte file", a, len(w.b))
	}
}

// allocated returns the bytes fn allocated.
func allocated(fn func()) uint64 {
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	fn()
	runtime.ReadMemStats(&after)
	return after.TotalAlloc - before.TotalAlloc
}

// TestSharedHostile: every shared model truncated at 32 points is an
// error; 2,000 random single-byte flips never panic and never allocate
// beyond a bound.
func TestSharedHostile(t *testing.T) {
	const allocLimit = 64 << 20
	for _, p := range corpus.TFLiteModels(t) {
		data, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		for i := 1; i <= 32; i++ {
			n := len(data) * i / 33
			if _, err := Decode(bytes.Clone(data[:n]), Options{Path: p}); err == nil {
				t.Errorf("%s truncated to %d of %d bytes: no error", p, n, len(data))
			}
		}
		seed := uint64(len(data))
		buf := bytes.Clone(data)
		for range 2000 {
			seed = seed*6364136223846793005 + 1442695040888963407
			pos := int(seed>>33) % len(buf)
			old := buf[pos]
			buf[pos] ^= byte(seed>>20) | 1
			if a := allocated(func() { Decode(buf, Options{Path: p}) }); a > allocLimit {
				t.Errorf("%s with byte %d flipped: %d bytes allocated", p, pos, a)
			}
			buf[pos] = old
		}
	}
}

// TestSparseTensor: a sparse constant keeps its dense dims and no values
// (its buffer holds only the stored values), and its sparsity parameters
// read back as written.
func TestSparseTensor(t *testing.T) {
	m := tiny()
	sg := &m.Subgraphs[0]
	m.Buffers = append(m.Buffers, Buffer{Data: make([]byte, 6*4)}) // 6 stored float32 values
	sg.Tensors = append(sg.Tensors, Tensor{Shape: []int32{4, 4}, Type: 0, Buffer: uint32(len(m.Buffers) - 1), Name: "sparse_w",
		Sparsity: &Sparsity{TraversalOrder: []int32{0, 1}, DimMetadata: []DimensionMetadata{
			{Format: 0, DenseSize: 4},
			{Format: 1, SegmentsType: 1, Segments: 5, IndicesType: 3, Indices: 6},
		}}})
	data := encodeT(t, m, EncodeOptions{})
	p, err := Parse(data, "sparse.tflite")
	if err != nil {
		t.Fatal(err)
	}
	got := p.Subgraphs[0].Tensors[len(sg.Tensors)-1].Sparsity
	if got == nil || len(got.DimMetadata) != 2 || got.DimMetadata[1].Segments != 5 || got.DimMetadata[1].Indices != 6 || got.DimMetadata[0].DenseSize != 4 {
		t.Fatalf("sparsity %+v", got)
	}
	g, err := p.Convert("sparse.tflite")
	if err != nil {
		t.Fatal(err)
	}
	w := g.Graph.Initializer("sparse_w")
	if w == nil || w.Elements() != 16 || w.HasData() {
		t.Errorf("sparse initializer %+v: want dense dims [4 4] and no values", w)
	}
}
