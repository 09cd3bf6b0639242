package onnx

import (
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
	"google.golang.org/protobuf/encoding/protowire"
)

// graphModel wraps graph fields in a ModelProto importing opset 13.
func graphModel(graph ...[]byte) []byte {
	return cat(pbVarint(1, 8), pbBytes(7, cat(graph...)), pbBytes(8, cat(pbString(1, ""), pbVarint(2, 13))))
}

func TestWrongWireType(t *testing.T) {
	for _, c := range []struct {
		name string
		data []byte
		want string
	}{
		{"ir_version as bytes", cat(pbString(1, "8"), pbBytes(7, nil)), "ir_version: wire type length-delimited, want varint at byte 0"},
		{"graph as varint", pbVarint(7, 1), "graph: wire type varint, want length-delimited"},
		{"op_type as varint", graphModel(pbBytes(1, pbVarint(4, 3))), "graph.node[0].op_type: wire type varint, want length-delimited"},
		{"attribute f as varint", graphModel(pbBytes(1, cat(pbString(4, "Elu"), pbBytes(5, cat(pbString(1, "alpha"), pbVarint(2, 1)))))), "graph.node[0].attribute[0].f: wire type varint, want fixed32"},
		{"float_data as varint", graphModel(pbBytes(5, cat(packedDims(1), pbVarint(2, 1), pbVarint(4, 1)))), "graph.initializer[0].float_data: wire type varint, want fixed32"},
		{"dim_value as bytes", graphModel(pbBytes(11, cat(pbString(1, "x"), pbBytes(2, pbBytes(1, cat(pbVarint(1, 1), pbBytes(2, pbBytes(1, pbString(1, "7"))))))))), "graph.input[0].type.tensor_type.shape.dim[0].dim_value: wire type length-delimited, want varint"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Decode(c.data, Options{Path: "m.onnx"})
			wantDecodeError(t, err, "m.onnx", c.want)
		})
	}
}

// TestUnknownFieldsSkipped puts fields onnx.proto does not define, of every
// wire type, into each message: they are skipped.
func TestUnknownFieldsSkipped(t *testing.T) {
	unknown := cat(pbVarint(99, 1), pbFixed32(98, 2), protowire.AppendFixed64(protowire.AppendTag(nil, 97, protowire.Fixed64Type), 3),
		pbString(96, "x"), protowire.AppendTag(pbVarint(95<<0, 0)[:0], 94, protowire.StartGroupType), pbVarint(1, 5), protowire.AppendTag(nil, 94, protowire.EndGroupType))
	attr := cat(unknown, pbString(1, "alpha"), pbFixed32(2, math.Float32bits(0.5)), pbVarint(20, 1))
	node := cat(unknown, pbString(4, "Elu"), pbString(1, "x"), pbString(2, "y"), pbBytes(5, attr))
	tensor := cat(unknown, packedDims(1), pbVarint(2, 1), pbString(8, "w"), pbBytes(9, []byte{0, 0, 0x80, 0x3f}))
	typ := pbBytes(1, cat(unknown, pbVarint(1, 1), pbBytes(2, cat(unknown, pbBytes(1, cat(unknown, pbVarint(1, 4)))))))
	vi := cat(unknown, pbString(1, "x"), pbBytes(2, cat(unknown, typ)))
	data := cat(unknown, pbVarint(1, 8), pbBytes(7, cat(unknown, pbBytes(1, node), pbBytes(5, tensor), pbBytes(11, vi))))
	m, err := Decode(data, Options{Path: "m.onnx"})
	if err != nil {
		t.Fatal(err)
	}
	g := m.Graph
	if m.IRVersion != 8 || len(g.Nodes) != 1 || g.Nodes[0].Op != "Elu" || g.Nodes[0].Attrs[0].Float != 0.5 ||
		len(g.Initializers) != 1 || g.Inputs[0].Type.String() != "float32[4]" {
		t.Errorf("decoded %+v", g)
	}
	if v, _ := g.Initializers[0].Float64s(-1); len(v) != 1 || v[0] != 1 {
		t.Errorf("initializer %v", v)
	}
}

// TestAttributeTypeInferred: models of IR version 1 have no
// AttributeProto.type; the kind comes from the field that is set.
func TestAttributeTypeInferred(t *testing.T) {
	tensor := cat(packedDims(1), pbVarint(2, 7), pbBytes(7, []byte{5}))
	graph := cat(pbString(2, "body"))
	packedFloats := pbBytes(7, cat(protowire.AppendFixed32(nil, math.Float32bits(1.5)), protowire.AppendFixed32(nil, math.Float32bits(-2))))
	attrs := [][]byte{
		cat(pbString(1, "f"), pbFixed32(2, math.Float32bits(0.25))),
		cat(pbString(1, "i"), pbVarint(3, 7)),
		cat(pbString(1, "s"), pbString(4, "abc")),
		cat(pbString(1, "t"), pbBytes(5, tensor)),
		cat(pbString(1, "g"), pbBytes(6, graph)),
		cat(pbString(1, "floats"), pbFixed32(7, math.Float32bits(1.5)), pbFixed32(7, math.Float32bits(-2))), // unpacked
		cat(pbString(1, "packed_floats"), packedFloats),
		cat(pbString(1, "ints"), pbVarint(8, 1), pbVarint(8, 2)), // unpacked
		cat(pbString(1, "packed_ints"), pbBytes(8, []byte{1, 2})),
		cat(pbString(1, "strings"), pbString(9, "a"), pbString(9, "b")),
		cat(pbString(1, "none")),
	}
	node := cat(pbString(4, "Custom"))
	for _, a := range attrs {
		node = cat(node, pbBytes(5, a))
	}
	m, err := Decode(graphModel(pbBytes(1, node)), Options{})
	if err != nil {
		t.Fatal(err)
	}
	n := m.Graph.Nodes[0]
	want := map[string]model.AttrKind{"f": model.AttrFloat, "i": model.AttrInt, "s": model.AttrString, "t": model.AttrTensor,
		"g": model.AttrGraph, "floats": model.AttrFloats, "packed_floats": model.AttrFloats, "ints": model.AttrInts,
		"packed_ints": model.AttrInts, "strings": model.AttrStrings, "none": model.AttrUndefined}
	for name, kind := range want {
		if a := n.Attr(name); a == nil || a.Kind != kind {
			t.Errorf("attribute %s: %+v, want kind %s", name, a, kind)
		}
	}
	if a := n.Attr("f"); a.Float != 0.25 {
		t.Errorf("f = %v", a.Float)
	}
	if a := n.Attr("i"); a.Int != 7 {
		t.Errorf("i = %v", a.Int)
	}
	for _, name := range []string{"floats", "packed_floats"} {
		if a := n.Attr(name); len(a.Floats) != 2 || a.Floats[0] != 1.5 || a.Floats[1] != -2 {
			t.Errorf("%s = %v", name, a.Floats)
		}
	}
	for _, name := range []string{"ints", "packed_ints"} {
		if a := n.Attr(name); len(a.Ints) != 2 || a.Ints[0] != 1 || a.Ints[1] != 2 {
			t.Errorf("%s = %v", name, a.Ints)
		}
	}
	if a := n.Attr("g"); a.Graph == nil || a.Graph.Name != "body" {
		t.Errorf("g = %+v", a.Graph)
	}
	if v, err := n.Attr("t").Tensor.Int64s(-1); err != nil || len(v) != 1 || v[0] != 5 {
		t.Errorf("t = %v, %v", v, err)
	}
	// An explicit type wins, and only its field is kept.
	m, err = Decode(graphModel(pbBytes(1, cat(pbString(4, "X"), pbBytes(5, cat(pbString(1, "a"), pbVarint(3, 7), pbFixed32(2, 1), pbVarint(20, 2)))))), Options{})
	if err != nil {
		t.Fatal(err)
	}
	if a := m.Graph.Nodes[0].Attrs[0]; a.Kind != model.AttrInt || a.Int != 7 || a.Float != 0 {
		t.Errorf("typed attribute %+v", a)
	}
	_, err = Decode(graphModel(pbBytes(1, cat(pbString(4, "X"), pbBytes(5, cat(pbString(1, "a"), pbVarint(20, 99)))))), Options{Path: "m.onnx"})
	wantDecodeError(t, err, "m.onnx", "graph.node[0].attribute[0].type: unknown attribute type 99")
}

// TestTypedFields stores the same values packed and unpacked: the values
// agree and every segment is a sub-slice of the input.
func TestTypedFields(t *testing.T) {
	f := func(v float32) []byte { return protowire.AppendFixed32(nil, math.Float32bits(v)) }
	d := func(v float64) []byte { return protowire.AppendFixed64(nil, math.Float64bits(v)) }
	fixed64 := func(num protowire.Number, b []byte) []byte {
		return cat(protowire.AppendTag(nil, num, protowire.Fixed64Type), b)
	}
	cases := []struct {
		name   string
		tensor []byte
		want   []float64
	}{
		{"float_data packed", cat(packedDims(3), pbVarint(2, 1), pbBytes(4, cat(f(1), f(-2), f(3.5)))), []float64{1, -2, 3.5}},
		{"float_data unpacked", cat(packedDims(3), pbVarint(2, 1), pbFixed32(4, math.Float32bits(1)), pbFixed32(4, math.Float32bits(-2)), pbFixed32(4, math.Float32bits(3.5))), []float64{1, -2, 3.5}},
		{"float_data in two packed runs", cat(packedDims(3), pbVarint(2, 1), pbBytes(4, f(1)), pbBytes(4, cat(f(-2), f(3.5)))), []float64{1, -2, 3.5}},
		{"int64_data unpacked", cat(packedDims(2), pbVarint(2, 7), pbVarint(7, 5), pbVarint(7, uint64(1<<64-3))), []float64{5, -3}},
		{"int32_data int8 unpacked", cat(packedDims(2), pbVarint(2, 3), pbVarint(5, uint64(1<<64-128)), pbVarint(5, 127)), []float64{-128, 127}},
		{"double_data unpacked", cat(packedDims(2), pbVarint(2, 11), fixed64(10, d(math.Pi)), fixed64(10, d(-1))), []float64{math.Pi, -1}},
		{"double_data packed", cat(packedDims(2), pbVarint(2, 11), pbBytes(10, cat(d(math.Pi), d(-1)))), []float64{math.Pi, -1}},
		{"uint64_data uint32", cat(packedDims(1), pbVarint(2, 12), pbBytes(11, protowire.AppendVarint(nil, math.MaxUint32))), []float64{math.MaxUint32}},
		{"empty packed run ignored", cat(packedDims(1), pbVarint(2, 1), pbBytes(4, nil), pbBytes(4, f(2))), []float64{2}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			data := initializerModel(cat(pbString(8, "w"), c.tensor))
			m, err := Decode(data, Options{})
			if err != nil {
				t.Fatal(err)
			}
			w := m.Graph.Initializers[0]
			for _, seg := range w.Data.Segments {
				if !inside(data, seg) {
					t.Error("segment copied")
				}
			}
			got, err := w.Float64s(-1)
			if err != nil {
				t.Fatal(err)
			}
			if len(got) != len(c.want) {
				t.Fatalf("got %v, want %v", got, c.want)
			}
			for i := range got {
				if got[i] != c.want[i] {
					t.Errorf("got %v, want %v", got, c.want)
				}
			}
			checkDecoded(t, m)
		})
	}
}

func TestBadTensors(t *testing.T) {
	f1 := protowire.AppendFixed32(nil, math.Float32bits(1))
	for _, c := range []struct {
		name   string
		tensor []byte
		want   string
	}{
		{"raw and float_data", cat(packedDims(1), pbVarint(2, 1), pbBytes(4, f1), pbBytes(9, f1)), "stores values in both raw_data and float_data"},
		{"float_data and int32_data", cat(packedDims(1), pbVarint(2, 1), pbBytes(4, f1), pbBytes(5, []byte{1})), "stores values in both float_data and int32_data"},
		{"float_data for int64", cat(packedDims(1), pbVarint(2, 7), pbBytes(4, f1)), "int64 values cannot be stored in float_data (onnx.proto says int64_data)"},
		{"too few values", cat(packedDims(2), pbVarint(2, 1), pbBytes(4, f1)), "float_data holds 1 values, but dims [2] of float32 need 2"},
		{"ragged packed floats", cat(packedDims(1), pbVarint(2, 1), pbBytes(4, []byte{1, 2, 3})), "packed float_data of 3 bytes, not a multiple of 4"},
		{"bad packed varint", cat(packedDims(1), pbVarint(2, 7), pbBytes(7, []byte{0x80})), "bad varint in packed field"},
		{"no data_type", cat(packedDims(1), pbBytes(9, f1)), "no data_type"},
		{"unknown data_type", cat(packedDims(1), pbVarint(2, 77), pbBytes(9, f1)), "unsupported data_type 77"},
		{"raw string", cat(packedDims(1), pbVarint(2, 8), pbBytes(9, f1)), "string tensors cannot use raw_data"},
		{"raw too short", cat(packedDims(2), pbVarint(2, 1), pbBytes(9, f1)), "raw_data holds 4 bytes, but dims [2] of float32 need 8 bytes"},
		{"int4 raw size", cat(packedDims(3), pbVarint(2, 22), pbBytes(9, []byte{1})), "raw_data holds 1 bytes, but dims [3] of int4 need 2 bytes"},
		{"bad data_location", cat(packedDims(1), pbVarint(2, 1), pbBytes(9, f1), pbVarint(14, 5)), "unknown data_location 5"},
		{"external and inline", cat(packedDims(1), pbVarint(2, 1), pbBytes(9, f1), pbVarint(14, 1)), "data_location is EXTERNAL but values are also stored inline"},
		{"external without location", cat(packedDims(1), pbVarint(2, 1), pbVarint(14, 1)), "external_data has no location"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Decode(initializerModel(cat(pbString(8, "w"), c.tensor)), Options{Path: "m.onnx"})
			wantDecodeError(t, err, "m.onnx", `graph.initializer[0]`, `tensor "w"`, c.want)
		})
	}
	// A 4-bit tensor's int32_data holds two values per entry.
	m, err := Decode(initializerModel(cat(pbString(8, "w"), packedDims(3), pbVarint(2, 22), pbBytes(5, []byte{0x21, 0x03}))), Options{})
	if err != nil {
		t.Fatal(err)
	}
	if v, err := m.Graph.Initializers[0].Int64s(-1); err != nil || len(v) != 3 || v[0] != 1 || v[1] != 2 || v[2] != 3 {
		t.Errorf("int4 values %v, %v", v, err)
	}
}

func TestNotAModel(t *testing.T) {
	for _, c := range []struct {
		name string
		data []byte
		want string
	}{
		{"empty", nil, "not an ONNX model: no graph"},
		{"text", []byte("hello, world\n"), "m.onnx: "},
		{"bad tag", []byte{0x00}, "bad field tag"},
		{"end group", []byte{0x0c}, "m.onnx: "},
		{"varint overflow", cat([]byte{0x08}, []byte{0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x01}), "bad varint in field 1 (ir_version)"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Decode(c.data, Options{Path: "m.onnx"})
			wantDecodeError(t, err, "m.onnx", c.want)
		})
	}
}

// TestFreshDims: a dim with neither dim_value nor dim_param gets a symbol of
// its own, unique in the model, skipping names the file uses.
func TestFreshDims(t *testing.T) {
	dim := func(fields ...[]byte) []byte { return pbBytes(1, cat(fields...)) }
	vi := func(name string, dims ...[]byte) []byte {
		return pbBytes(11, cat(pbString(1, name), pbBytes(2, pbBytes(1, cat(pbVarint(1, 1), pbBytes(2, cat(dims...)))))))
	}
	noShape := pbBytes(12, cat(pbString(1, "y"), pbBytes(2, pbBytes(1, pbVarint(1, 1)))))
	data := graphModel(
		vi("a", dim(), dim(pbVarint(1, 3)), dim(pbString(2, "?1"))),
		vi("b", dim(pbString(2, "")), dim(pbString(2, "batch")), dim()),
		vi("c", dim(pbVarint(1, 0))),
		vi("d"),
		noShape,
	)
	m, err := Decode(data, Options{})
	if err != nil {
		t.Fatal(err)
	}
	got := []string{}
	for _, v := range m.Graph.Inputs {
		got = append(got, v.Type.String())
	}
	want := "float32[?2,3,?1] float32[?3,batch,?4] float32[0] float32[]"
	if strings.Join(got, " ") != want {
		t.Errorf("got %s, want %s", strings.Join(got, " "), want)
	}
	if y := m.Graph.Outputs[0].Type; y.RankKnown || y.Shape != nil {
		t.Errorf("a tensor type without shape has unknown rank: %+v", y)
	}
	if d := m.Graph.Inputs[3].Type; !d.RankKnown || d.Shape == nil || len(d.Shape) != 0 {
		t.Errorf("an empty shape is a scalar: %+v", d)
	}
	checkDecoded(t, m)
}

func TestOpsets(t *testing.T) {
	data := cat(pbVarint(1, 8), pbBytes(7, nil), pbBytes(8, cat(pbString(1, "ai.onnx"), pbVarint(2, 17))),
		pbBytes(8, cat(pbString(1, "com.microsoft"), pbVarint(2, 1))), pbBytes(14, cat(pbString(1, "k"), pbString(2, "v"))))
	m, err := Decode(data, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if m.Opsets["ai.onnx"] != 17 || m.Opset("") != 17 || m.Opset("com.microsoft") != 1 || len(m.Opsets) != 2 || m.Metadata["k"] != "v" {
		t.Errorf("opsets %v, metadata %v", m.Opsets, m.Metadata)
	}
	checkDecoded(t, m)
}

// TestEveryKindRoundTrips builds attributes and value types of every kind
// the model types hold and checks decode(encode(m)) == m.
func TestEveryKindRoundTrips(t *testing.T) {
	m := scratchModel()
	f32 := model.TensorType(model.Float32, model.Shape{model.Sym("n"), model.Known(2)})
	seq := model.Type{Kind: model.KindSequence, DType: model.Float32, Elem: &f32}
	sparseT := model.Type{Kind: model.KindSparseTensor, DType: model.Float32, Shape: model.KnownShape(10), RankKnown: true}
	mapT := model.Type{Kind: model.KindMap, DType: model.Int64, Elem: &seq}
	opt := model.Type{Kind: model.KindOptional, Elem: &mapT}
	unranked := model.Type{Kind: model.KindTensor, DType: model.Int8}
	sp := &model.SparseTensor{
		Values:  float32Raw("sp", []int64{2}, 1, 2),
		Indices: varintTensor("", model.Int64, model.EncodingInt64s, []int64{2}, 3, 7),
		Dims:    []int64{10},
	}
	m.Graph.Sparse = []*model.SparseTensor{sp}
	m.Graph.ValueInfo = []*model.ValueInfo{{Name: "s", Type: seq}, {Name: "p", Type: sparseT}, {Name: "o", Type: opt}, {Name: "u", Type: unranked}, {Name: "none"}}
	m.Graph.Nodes = append(m.Graph.Nodes, &model.Node{Op: "Everything", Domain: "loadline.test", Inputs: []string{"x", "", "y"}, Attrs: []*model.Attr{
		{Name: "f", Kind: model.AttrFloat, Float: float32(math.NaN())},
		{Name: "i", Kind: model.AttrInt, Int: -1},
		{Name: "s", Kind: model.AttrString, String: "\x00\xff"},
		{Name: "t", Kind: model.AttrTensor, Tensor: float32Raw("c", nil, 3)},
		{Name: "g", Kind: model.AttrGraph, Graph: &model.Graph{Name: "sub"}},
		{Name: "floats", Kind: model.AttrFloats, Floats: []float32{1, float32(math.Inf(-1))}},
		{Name: "ints", Kind: model.AttrInts, Ints: []int64{math.MinInt64, 0, math.MaxInt64}},
		{Name: "strings", Kind: model.AttrStrings, Strings: []string{"", "b"}},
		{Name: "tensors", Kind: model.AttrTensors, Tensors: []*model.Tensor{float32Raw("a", []int64{1}, 1), varintTensor("b", model.Int64, model.EncodingInt64s, []int64{1}, 9)}},
		{Name: "graphs", Kind: model.AttrGraphs, Graphs: []*model.Graph{{Name: "g1"}, {Name: "g2"}}},
		{Name: "sparse", Kind: model.AttrSparseTensor, Sparse: sp},
		{Name: "tp", Kind: model.AttrType, Type: &opt},
		{Name: "tps", Kind: model.AttrTypes, Types: []model.Type{f32, seq, mapT}},
		{Name: "ref", Kind: model.AttrInt, RefName: "caller_attr"},
		{Name: "empty_ints", Kind: model.AttrInts},
		{Name: "undefined"},
	}})
	m.Functions = []*model.Function{{
		Name: "Fn", Domain: "loadline.test", Inputs: []string{"a"}, Outputs: []string{"b"},
		Attributes: []string{"alpha"},
		AttrProtos: []*model.Attr{{Name: "beta", Kind: model.AttrFloat, Float: 0.5}},
		Nodes:      []*model.Node{{Op: "Elu", Inputs: []string{"a"}, Outputs: []string{"b"}, Attrs: []*model.Attr{{Name: "alpha", Kind: model.AttrFloat, RefName: "alpha"}}}},
		Opsets:     map[string]int64{"": 13},
	}}
	data, err := Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	back, err := Decode(data, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if d := diff(m, back); d != "" {
		t.Errorf("round trip differs at %s", d)
	}
	checkDecoded(t, back)
}

// TestEncodeDeclaredOnly: Encode refuses a tensor without values, naming
// it; EncodeWithExternal writes it as an external-data reference.
func TestEncodeDeclaredOnly(t *testing.T) {
	m := scratchModel()
	m.Graph.Initializers[0] = &model.Tensor{Name: "W", DType: model.Float32, Dims: []int64{2, 3, 3, 3}}
	_, err := Encode(m)
	if err == nil || !strings.Contains(err.Error(), `graph.initializer[0] "W"`) || !strings.Contains(err.Error(), "EncodeWithExternal") {
		t.Fatalf("Encode of a declared-only tensor: %v", err)
	}
	data, err := EncodeWithExternal(m, func(t *model.Tensor) (string, int64) { return "weights/" + t.Name + ".bin", 64 })
	if err != nil {
		t.Fatal(err)
	}
	back, err := Decode(data, Options{Path: "dir/m.onnx"})
	if err != nil {
		t.Fatal(err)
	}
	x := back.Graph.Initializers[0].Data.External
	if x == nil || x.Location != "weights/W.bin" || x.Offset != 64 || x.Length != 216 || x.Path != "dir/weights/W.bin" {
		t.Errorf("external reference %+v", x)
	}
	_, err = EncodeTensor(&model.Tensor{Name: "v", DType: model.Int8, Dims: []int64{1}})
	if err == nil || !strings.Contains(err.Error(), `"v"`) {
		t.Errorf("EncodeTensor of a declared-only tensor: %v", err)
	}
}

func TestDecodeErrorUnwraps(t *testing.T) {
	_, err := Decode([]byte{0x3a, 0x05}, Options{Path: "m.onnx"})
	var de *DecodeError
	if !errors.As(err, &de) || de.Offset != 0 || de.Unwrap() == nil {
		t.Fatalf("%#v", err)
	}
	if got := err.Error(); got != "m.onnx: truncated length-delimited field 7 (graph): length 5, 0 bytes left; the file may be truncated at byte 0" {
		t.Errorf("message %q", got)
	}
}

// TestAttributeWithoutValue: an attribute of a message kind without its
// value is refused (callers would meet a nil), unless it is a function
// body's reference to the caller's attribute. Found by FuzzDecode
// (testdata/fuzz/FuzzDecode/434bf828cc75706f).
func TestAttributeWithoutValue(t *testing.T) {
	for kind, field := range map[int]string{4: "t", 5: "g", 11: "sparse_tensor", 13: "tp"} {
		attr := cat(pbString(1, "a"), pbVarint(20, uint64(kind)))
		_, err := Decode(graphModel(pbBytes(1, cat(pbString(4, "X"), pbBytes(5, attr)))), Options{Path: "m.onnx"})
		wantDecodeError(t, err, "m.onnx", "graph.node[0].attribute[0]", "has no "+field+" field")
		ref := cat(attr, pbString(21, "caller"))
		m, err := Decode(graphModel(pbBytes(1, cat(pbString(4, "X"), pbBytes(5, ref)))), Options{Path: "m.onnx"})
		if err != nil {
			t.Errorf("reference of kind %d: %v", kind, err)
			continue
		}
		checkDecoded(t, m)
	}
}

func TestSegmentedTensorRefused(t *testing.T) {
	_, err := Decode(initializerModel(cat(pbString(8, "w"), packedDims(2), pbVarint(2, 1), pbBytes(3, cat(pbVarint(1, 0), pbVarint(2, 1))))), Options{Path: "m.onnx"})
	wantDecodeError(t, err, "m.onnx", `graph.initializer[0].segment: tensor "w": tensors split into segments`)
}
