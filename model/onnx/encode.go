package onnx

import (
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"strconv"

	"github.com/loadline/loadline/model"
	"google.golang.org/protobuf/encoding/protowire"
)

// Encode writes m as an ONNX ModelProto, for tests and the demo;
// Decode(Encode(m)) reproduces m (see the package doc for the mapping). Tensors
// declared without values (model.EncodingNone) cannot be written inline:
// Encode refuses them with an error naming the tensor; use
// EncodeWithExternal to write them as external-data references instead.
func Encode(m *model.Model) ([]byte, error) {
	e := &encoder{}
	return e.model(m)
}

// EncodeWithExternal is Encode, except that a tensor declared without values
// (model.EncodingNone) is written as an external-data reference: place
// returns the location (relative to the model's folder) and byte offset at
// which the caller promises its StorageBytes bytes; the length is written
// too. No bytes are written anywhere for it.
func EncodeWithExternal(m *model.Model, place func(t *model.Tensor) (location string, offset int64)) ([]byte, error) {
	e := &encoder{place: place}
	return e.model(m)
}

// EncodeTensor writes t as a standalone TensorProto, like the input_N.pb
// files of ONNX's backend test suite.
func EncodeTensor(t *model.Tensor) ([]byte, error) {
	e := &encoder{}
	b, err := e.tensor(nil, t)
	if err != nil {
		return nil, fmt.Errorf("onnx: encode tensor %q: %w", t.Name, err)
	}
	return b, nil
}

type encoder struct {
	place func(t *model.Tensor) (string, int64)
}

// encodeError names where in the model an encoding failure happened.
type encodeError struct {
	field string
	err   error
}

func (e *encodeError) Error() string { return "onnx: encode " + e.field + ": " + e.err.Error() }
func (e *encodeError) Unwrap() error { return e.err }

func at(err error, component string) error {
	if err == nil {
		return nil
	}
	var ee *encodeError
	if errors.As(err, &ee) {
		ee.field = component + "." + ee.field
		return err
	}
	return &encodeError{field: component, err: err}
}

// begin starts an embedded message field; end finishes it. A one-byte
// length is reserved and the body moved when it turns out longer.
func begin(b []byte, num protowire.Number) ([]byte, int) {
	b = protowire.AppendTag(b, num, protowire.BytesType)
	b = append(b, 0)
	return b, len(b)
}

func end(b []byte, start int) []byte {
	n := len(b) - start
	if n < 0x80 {
		b[start-1] = byte(n)
		return b
	}
	extra := protowire.SizeVarint(uint64(n)) - 1
	for range extra {
		b = append(b, 0)
	}
	copy(b[start+extra:], b[start:start+n])
	protowire.AppendVarint(b[start-1:start-1], uint64(n))
	return b
}

func appendString(b []byte, num protowire.Number, s string) []byte {
	b = protowire.AppendTag(b, num, protowire.BytesType)
	return protowire.AppendString(b, s)
}

func appendOptString(b []byte, num protowire.Number, s string) []byte {
	if s == "" {
		return b
	}
	return appendString(b, num, s)
}

func appendVarint(b []byte, num protowire.Number, v uint64) []byte {
	b = protowire.AppendTag(b, num, protowire.VarintType)
	return protowire.AppendVarint(b, v)
}

func appendOptInt(b []byte, num protowire.Number, v int64) []byte {
	if v == 0 {
		return b
	}
	return appendVarint(b, num, uint64(v))
}

func appendPackedInts(b []byte, num protowire.Number, vs []int64) []byte {
	if len(vs) == 0 {
		return b
	}
	n := 0
	for _, v := range vs {
		n += protowire.SizeVarint(uint64(v))
	}
	b = protowire.AppendTag(b, num, protowire.BytesType)
	b = protowire.AppendVarint(b, uint64(n))
	for _, v := range vs {
		b = protowire.AppendVarint(b, uint64(v))
	}
	return b
}

func appendOpsets(b []byte, num protowire.Number, opsets map[string]int64) []byte {
	for _, k := range slices.Sorted(maps.Keys(opsets)) {
		var s int
		b, s = begin(b, num)
		b = appendOptString(b, 1, k)
		b = appendVarint(b, 2, uint64(opsets[k]))
		b = end(b, s)
	}
	return b
}

// ModelProto
func (e *encoder) model(m *model.Model) ([]byte, error) {
	if m.Graph == nil {
		return nil, errors.New("onnx: encode: model has no graph")
	}
	var b []byte
	b = appendOptInt(b, 1, m.IRVersion)
	b = appendOptString(b, 2, m.ProducerName)
	b = appendOptString(b, 3, m.ProducerVersion)
	b = appendOptString(b, 4, m.Domain)
	b = appendOptInt(b, 5, m.ModelVersion)
	b = appendOptString(b, 6, m.DocString)
	var s int
	var err error
	b, s = begin(b, 7)
	if b, err = e.graph(b, m.Graph, 0); err != nil {
		return nil, at(err, "graph")
	}
	b = end(b, s)
	b = appendOpsets(b, 8, m.Opsets)
	for _, k := range slices.Sorted(maps.Keys(m.Metadata)) {
		b, s = begin(b, 14)
		b = appendString(b, 1, k)
		b = appendString(b, 2, m.Metadata[k])
		b = end(b, s)
	}
	for i, fn := range m.Functions {
		b, s = begin(b, 25)
		if b, err = e.function(b, fn); err != nil {
			return nil, at(err, indexed("functions", i))
		}
		b = end(b, s)
	}
	return b, nil
}

// GraphProto
func (e *encoder) graph(b []byte, g *model.Graph, depth int) ([]byte, error) {
	if depth > DefaultMaxDepth {
		return nil, fmt.Errorf("subgraphs nested more than %d deep", DefaultMaxDepth)
	}
	var s int
	var err error
	for i, n := range g.Nodes {
		b, s = begin(b, 1)
		if b, err = e.node(b, n, depth); err != nil {
			return nil, at(err, indexed("node", i))
		}
		b = end(b, s)
	}
	b = appendOptString(b, 2, g.Name)
	for i, t := range g.Initializers {
		b, s = begin(b, 5)
		if b, err = e.tensor(b, t); err != nil {
			return nil, at(err, fmt.Sprintf("initializer[%d] %q", i, t.Name))
		}
		b = end(b, s)
	}
	for _, list := range []struct {
		num  protowire.Number
		vis  []*model.ValueInfo
		name string
	}{{11, g.Inputs, "input"}, {12, g.Outputs, "output"}, {13, g.ValueInfo, "value_info"}} {
		for i, vi := range list.vis {
			b, s = begin(b, list.num)
			if b, err = e.valueInfo(b, vi); err != nil {
				return nil, at(err, indexed(list.name, i))
			}
			b = end(b, s)
		}
	}
	for i, sp := range g.Sparse {
		b, s = begin(b, 15)
		if b, err = e.sparse(b, sp); err != nil {
			return nil, at(err, indexed("sparse_initializer", i))
		}
		b = end(b, s)
	}
	return b, nil
}

// ValueInfoProto. A type of KindUnknown is left out.
func (e *encoder) valueInfo(b []byte, vi *model.ValueInfo) ([]byte, error) {
	b = appendOptString(b, 1, vi.Name)
	if vi.Type.Kind == model.KindUnknown {
		return b, nil
	}
	b, s := begin(b, 2)
	b, err := e.typeProto(b, &vi.Type, 0)
	if err != nil {
		return nil, at(err, "type")
	}
	return end(b, s), nil
}

// TypeProto
func (e *encoder) typeProto(b []byte, t *model.Type, depth int) ([]byte, error) {
	if depth > DefaultMaxDepth {
		return nil, fmt.Errorf("types nested more than %d deep", DefaultMaxDepth)
	}
	var s, s2 int
	var err error
	switch t.Kind {
	case model.KindUnknown:
	case model.KindTensor, model.KindSparseTensor:
		num := protowire.Number(1)
		if t.Kind == model.KindSparseTensor {
			num = 8
		}
		b, s = begin(b, num)
		b = appendOptInt(b, 1, int64(t.DType))
		if t.RankKnown {
			b, s2 = begin(b, 2)
			for _, d := range t.Shape {
				var s3 int
				b, s3 = begin(b, 1)
				if d.Symbol != "" {
					b = appendString(b, 2, d.Symbol)
				} else {
					b = appendVarint(b, 1, uint64(d.Value))
				}
				b = end(b, s3)
			}
			b = end(b, s2)
		}
		b = end(b, s)
	case model.KindSequence, model.KindOptional:
		num := protowire.Number(4)
		if t.Kind == model.KindOptional {
			num = 9
		}
		b, s = begin(b, num)
		elem := t.Elem
		if elem == nil && t.DType != model.Undefined {
			elem = &model.Type{Kind: model.KindTensor, DType: t.DType}
		}
		if elem != nil {
			b, s2 = begin(b, 1)
			if b, err = e.typeProto(b, elem, depth+1); err != nil {
				return nil, at(err, "elem_type")
			}
			b = end(b, s2)
		}
		b = end(b, s)
	case model.KindMap:
		b, s = begin(b, 5)
		b = appendOptInt(b, 1, int64(t.DType))
		if t.Elem != nil {
			b, s2 = begin(b, 2)
			if b, err = e.typeProto(b, t.Elem, depth+1); err != nil {
				return nil, at(err, "value_type")
			}
			b = end(b, s2)
		}
		b = end(b, s)
	default:
		return nil, fmt.Errorf("unknown type kind %d", t.Kind)
	}
	return b, nil
}

// NodeProto
func (e *encoder) node(b []byte, n *model.Node, depth int) ([]byte, error) {
	for _, in := range n.Inputs {
		b = appendString(b, 1, in)
	}
	for _, out := range n.Outputs {
		b = appendString(b, 2, out)
	}
	b = appendOptString(b, 3, n.Name)
	b = appendString(b, 4, n.Op)
	for i, a := range n.Attrs {
		var s int
		var err error
		b, s = begin(b, 5)
		if b, err = e.attr(b, a, depth); err != nil {
			return nil, at(err, fmt.Sprintf("attribute[%d] %q", i, a.Name))
		}
		b = end(b, s)
	}
	b = appendOptString(b, 7, n.Domain)
	return b, nil
}

// AttributeProto: the type, and the one value field it names.
func (e *encoder) attr(b []byte, a *model.Attr, depth int) ([]byte, error) {
	b = appendString(b, 1, a.Name)
	var s int
	var err error
	msg := func(num protowire.Number, name string, fn func([]byte) ([]byte, error)) {
		if err != nil {
			return
		}
		b, s = begin(b, num)
		if b, err = fn(b); err != nil {
			err = at(err, name)
			return
		}
		b = end(b, s)
	}
	switch a.Kind {
	case model.AttrUndefined:
	case model.AttrFloat:
		b = protowire.AppendTag(b, 2, protowire.Fixed32Type)
		b = protowire.AppendFixed32(b, math.Float32bits(a.Float))
	case model.AttrInt:
		b = appendVarint(b, 3, uint64(a.Int))
	case model.AttrString:
		b = appendString(b, 4, a.String)
	case model.AttrTensor:
		if a.Tensor == nil {
			if a.RefName != "" {
				break // a reference to the caller's attribute: no value
			}
			return nil, errors.New("tensor attribute has no tensor")
		}
		msg(5, "t", func(b []byte) ([]byte, error) { return e.tensor(b, a.Tensor) })
	case model.AttrGraph:
		if a.Graph == nil {
			if a.RefName != "" {
				break // a reference to the caller's attribute: no value
			}
			return nil, errors.New("graph attribute has no graph")
		}
		msg(6, "g", func(b []byte) ([]byte, error) { return e.graph(b, a.Graph, depth+1) })
	case model.AttrFloats:
		if len(a.Floats) > 0 {
			b = protowire.AppendTag(b, 7, protowire.BytesType)
			b = protowire.AppendVarint(b, uint64(4*len(a.Floats)))
			for _, f := range a.Floats {
				b = protowire.AppendFixed32(b, math.Float32bits(f))
			}
		}
	case model.AttrInts:
		b = appendPackedInts(b, 8, a.Ints)
	case model.AttrStrings:
		for _, str := range a.Strings {
			b = appendString(b, 9, str)
		}
	case model.AttrTensors:
		for i, t := range a.Tensors {
			msg(10, indexed("tensors", i), func(b []byte) ([]byte, error) { return e.tensor(b, t) })
		}
	case model.AttrGraphs:
		for i, g := range a.Graphs {
			msg(11, indexed("graphs", i), func(b []byte) ([]byte, error) { return e.graph(b, g, depth+1) })
		}
	case model.AttrType:
		if a.Type == nil {
			if a.RefName != "" {
				break // a reference to the caller's attribute: no value
			}
			return nil, errors.New("type attribute has no type")
		}
		msg(14, "tp", func(b []byte) ([]byte, error) { return e.typeProto(b, a.Type, 0) })
	case model.AttrTypes:
		for i := range a.Types {
			msg(15, indexed("type_protos", i), func(b []byte) ([]byte, error) { return e.typeProto(b, &a.Types[i], 0) })
		}
	case model.AttrSparseTensor:
		if a.Sparse == nil {
			if a.RefName != "" {
				break // a reference to the caller's attribute: no value
			}
			return nil, errors.New("sparse tensor attribute has no sparse tensor")
		}
		msg(22, "sparse_tensor", func(b []byte) ([]byte, error) { return e.sparse(b, a.Sparse) })
	case model.AttrSparseTensors:
		// model.Attr holds no list of sparse tensors; the kind is written alone.
	default:
		return nil, fmt.Errorf("unknown attribute kind %d", a.Kind)
	}
	if err != nil {
		return nil, err
	}
	if a.Kind != model.AttrUndefined {
		b = appendVarint(b, 20, uint64(a.Kind))
	}
	if a.RefName != "" {
		b = appendString(b, 21, a.RefName)
	}
	return b, nil
}

// FunctionProto
func (e *encoder) function(b []byte, fn *model.Function) ([]byte, error) {
	b = appendString(b, 1, fn.Name)
	for _, s := range fn.Inputs {
		b = appendString(b, 4, s)
	}
	for _, s := range fn.Outputs {
		b = appendString(b, 5, s)
	}
	for _, s := range fn.Attributes {
		b = appendString(b, 6, s)
	}
	var s int
	var err error
	for i, n := range fn.Nodes {
		b, s = begin(b, 7)
		if b, err = e.node(b, n, 0); err != nil {
			return nil, at(err, indexed("node", i))
		}
		b = end(b, s)
	}
	b = appendOpsets(b, 9, fn.Opsets)
	b = appendOptString(b, 10, fn.Domain)
	for i, a := range fn.AttrProtos {
		b, s = begin(b, 11)
		if b, err = e.attr(b, a, 0); err != nil {
			return nil, at(err, indexed("attribute_proto", i))
		}
		b = end(b, s)
	}
	return b, nil
}

// SparseTensorProto
func (e *encoder) sparse(b []byte, sp *model.SparseTensor) ([]byte, error) {
	if sp.Values == nil || sp.Indices == nil {
		return nil, errors.New("sparse tensor needs both values and indices")
	}
	var s int
	var err error
	b, s = begin(b, 1)
	if b, err = e.tensor(b, sp.Values); err != nil {
		return nil, at(err, "values")
	}
	b = end(b, s)
	b, s = begin(b, 2)
	if b, err = e.tensor(b, sp.Indices); err != nil {
		return nil, at(err, "indices")
	}
	b = end(b, s)
	b = appendPackedInts(b, 3, sp.Dims)
	return b, nil
}

// typedNumber is the TensorProto field of a typed encoding.
var typedNumber = map[model.Encoding]protowire.Number{
	model.EncodingFloat32s: 4,
	model.EncodingInt32s:   5,
	model.EncodingInt64s:   7,
	model.EncodingFloat64s: 10,
	model.EncodingUint64s:  11,
}

// TensorProto. Raw segments are concatenated into one raw_data; typed
// segments into one packed field (their bytes are already in wire form).
func (e *encoder) tensor(b []byte, t *model.Tensor) ([]byte, error) {
	b = appendPackedInts(b, 1, t.Dims)
	b = appendVarint(b, 2, uint64(t.DType))
	switch enc := t.Data.Encoding; enc {
	case model.EncodingFloat32s, model.EncodingInt32s, model.EncodingInt64s, model.EncodingFloat64s, model.EncodingUint64s:
		n := 0
		for _, seg := range t.Data.Segments {
			n += len(seg)
		}
		if n > 0 {
			b = protowire.AppendTag(b, typedNumber[enc], protowire.BytesType)
			b = protowire.AppendVarint(b, uint64(n))
			for _, seg := range t.Data.Segments {
				b = append(b, seg...)
			}
		}
	case model.EncodingStrings:
		for _, seg := range t.Data.Segments {
			b = protowire.AppendTag(b, 6, protowire.BytesType)
			b = protowire.AppendBytes(b, seg)
		}
	}
	b = appendOptString(b, 8, t.Name)
	switch t.Data.Encoding {
	case model.EncodingRaw:
		if len(t.Data.Segments) > 0 {
			n := 0
			for _, seg := range t.Data.Segments {
				n += len(seg)
			}
			b = protowire.AppendTag(b, 9, protowire.BytesType)
			b = protowire.AppendVarint(b, uint64(n))
			for _, seg := range t.Data.Segments {
				b = append(b, seg...)
			}
		}
	case model.EncodingExternal:
		x := t.Data.External
		if x == nil {
			return nil, fmt.Errorf("tensor %q: external encoding without ExternalData", t.Name)
		}
		b = appendExternal(b, x.Location, x.Offset, x.Length)
	case model.EncodingNone:
		if e.place == nil {
			return nil, fmt.Errorf("tensor %q has no stored values (declared only, EncodingNone); use EncodeWithExternal to write it as an external-data reference", t.Name)
		}
		size := t.StorageBytes()
		if size < 0 {
			return nil, fmt.Errorf("tensor %q: %s values of dims %v have no fixed size to place externally", t.Name, t.DType, t.Dims)
		}
		loc, off := e.place(t)
		b = appendExternal(b, loc, off, size)
	case model.EncodingFloat32s, model.EncodingInt32s, model.EncodingInt64s, model.EncodingFloat64s, model.EncodingUint64s, model.EncodingStrings:
	default:
		return nil, fmt.Errorf("tensor %q: unknown encoding %d", t.Name, t.Data.Encoding)
	}
	return b, nil
}

// appendExternal writes external_data entries and data_location=EXTERNAL.
// A negative length (the rest of the file) is left out.
func appendExternal(b []byte, loc string, off, length int64) []byte {
	entry := func(b []byte, k, v string) []byte {
		b, s := begin(b, 13)
		b = appendString(b, 1, k)
		b = appendString(b, 2, v)
		return end(b, s)
	}
	b = entry(b, "location", loc)
	if off != 0 {
		b = entry(b, "offset", strconv.FormatInt(off, 10))
	}
	if length >= 0 {
		b = entry(b, "length", strconv.FormatInt(length, 10))
	}
	return appendVarint(b, 14, 1)
}
