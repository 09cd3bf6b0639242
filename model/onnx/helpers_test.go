package onnx

import (
	"bytes"
	"fmt"
	"math"
	"reflect"
	"strings"
	"testing"
	"unsafe"

	"github.com/loadline/loadline/model"
	"google.golang.org/protobuf/encoding/protowire"
)

// diff compares two decoded values structurally and returns the path of the
// first difference, or "". Nil and empty slices and maps are equal; floats
// are compared by their bits (so NaN equals NaN); the values of a tensor are
// compared as the concatenation of its segments (strings: segment by
// segment), so packed and unpacked forms of the same values are equal;
// functions (ExternalData.Load) are ignored.
func diff(a, b any) string {
	return strings.TrimPrefix(diffValue(reflect.ValueOf(a), reflect.ValueOf(b)), ".")
}

var tensorDataType = reflect.TypeOf(model.TensorData{})

// diffValue returns "" or the difference, prefixed by its path below a and
// b; paths are built only for a difference.
func diffValue(a, b reflect.Value) string {
	const path = ""
	if a.Kind() != b.Kind() {
		return fmt.Sprintf("%s: kind %s vs %s", path, a.Kind(), b.Kind())
	}
	switch a.Kind() {
	case reflect.Pointer, reflect.Interface:
		if a.IsNil() || b.IsNil() {
			if a.IsNil() != b.IsNil() {
				return fmt.Sprintf("%s: nil %v vs %v", path, a.IsNil(), b.IsNil())
			}
			return ""
		}
		return diffValue(a.Elem(), b.Elem())
	case reflect.Struct:
		if a.Type() == tensorDataType {
			return diffData(a.Interface().(model.TensorData), b.Interface().(model.TensorData))
		}
		for i := 0; i < a.NumField(); i++ {
			if d := diffValue(a.Field(i), b.Field(i)); d != "" {
				return "." + a.Type().Field(i).Name + d
			}
		}
		return ""
	case reflect.Slice:
		if a.Len() != b.Len() {
			return fmt.Sprintf("%s: length %d vs %d", path, a.Len(), b.Len())
		}
		for i := 0; i < a.Len(); i++ {
			if d := diffValue(a.Index(i), b.Index(i)); d != "" {
				return fmt.Sprintf("[%d]", i) + d
			}
		}
		return ""
	case reflect.Map:
		if a.Len() != b.Len() {
			return fmt.Sprintf("%s: %d entries vs %d", path, a.Len(), b.Len())
		}
		for _, k := range a.MapKeys() {
			bv := b.MapIndex(k)
			if !bv.IsValid() {
				return fmt.Sprintf("%s[%v]: missing", path, k)
			}
			if d := diffValue(a.MapIndex(k), bv); d != "" {
				return fmt.Sprintf("[%v]", k) + d
			}
		}
		return ""
	case reflect.Func:
		return ""
	case reflect.Float32, reflect.Float64:
		if math.Float64bits(a.Float()) != math.Float64bits(b.Float()) && !(math.IsNaN(a.Float()) && math.IsNaN(b.Float())) {
			return fmt.Sprintf("%s: %v vs %v", path, a.Float(), b.Float())
		}
		return ""
	}
	if a.Interface() != b.Interface() {
		return fmt.Sprintf("%s: %v vs %v", path, a.Interface(), b.Interface())
	}
	return ""
}

func diffData(a, b model.TensorData) string {
	const path = ""
	if a.Encoding != b.Encoding {
		return fmt.Sprintf("%s.Encoding: %d vs %d", path, a.Encoding, b.Encoding)
	}
	if a.Encoding == model.EncodingStrings {
		if len(a.Segments) != len(b.Segments) {
			return fmt.Sprintf("%s: %d strings vs %d", path, len(a.Segments), len(b.Segments))
		}
		for i := range a.Segments {
			if !bytes.Equal(a.Segments[i], b.Segments[i]) {
				return fmt.Sprintf("%s.Segments[%d]: %q vs %q", path, i, a.Segments[i], b.Segments[i])
			}
		}
	} else if !bytes.Equal(bytes.Join(a.Segments, nil), bytes.Join(b.Segments, nil)) {
		return fmt.Sprintf("%s: values differ", path)
	}
	if d := diffValue(reflect.ValueOf(a.External), reflect.ValueOf(b.External)); d != "" {
		return ".External" + d
	}
	return ""
}

// inside reports whether seg is a sub-slice of data.
func inside(data, seg []byte) bool {
	if len(seg) == 0 {
		return true
	}
	lo := uintptr(unsafe.Pointer(unsafe.SliceData(data)))
	p := uintptr(unsafe.Pointer(unsafe.SliceData(seg)))
	return p >= lo && p+uintptr(len(seg)) <= lo+uintptr(len(data))
}

// forEachTensor calls fn for every tensor of m: initializers, sparse
// initializers and tensors in attributes, in subgraphs and functions too.
func forEachTensor(m *model.Model, fn func(where string, t *model.Tensor)) {
	var graph func(where string, g *model.Graph)
	var nodes func(where string, ns []*model.Node)
	sparse := func(where string, s *model.SparseTensor) {
		fn(where+".values", s.Values)
		fn(where+".indices", s.Indices)
	}
	attrs := func(where string, as []*model.Attr) {
		for i, a := range as {
			w := fmt.Sprintf("%s.attribute[%d]", where, i)
			if a.Tensor != nil {
				fn(w, a.Tensor)
			}
			for _, t := range a.Tensors {
				fn(w, t)
			}
			if a.Sparse != nil {
				sparse(w, a.Sparse)
			}
			if a.Graph != nil {
				graph(w+".g", a.Graph)
			}
			for _, g := range a.Graphs {
				graph(w+".graphs", g)
			}
		}
	}
	nodes = func(where string, ns []*model.Node) {
		for i, n := range ns {
			attrs(fmt.Sprintf("%s.node[%d]", where, i), n.Attrs)
		}
	}
	graph = func(where string, g *model.Graph) {
		for i, t := range g.Initializers {
			fn(fmt.Sprintf("%s.initializer[%d]", where, i), t)
		}
		for i, s := range g.Sparse {
			sparse(fmt.Sprintf("%s.sparse_initializer[%d]", where, i), s)
		}
		nodes(where, g.Nodes)
	}
	graph("graph", m.Graph)
	for i, f := range m.Functions {
		w := fmt.Sprintf("functions[%d]", i)
		nodes(w, f.Nodes)
		attrs(w, f.AttrProtos)
	}
}

// Hand-made protobuf, for inputs no encoder would write.

func pbBytes(num protowire.Number, body []byte) []byte {
	b := protowire.AppendTag(nil, num, protowire.BytesType)
	return protowire.AppendBytes(b, body)
}

func pbString(num protowire.Number, s string) []byte { return pbBytes(num, []byte(s)) }

func pbVarint(num protowire.Number, v uint64) []byte {
	b := protowire.AppendTag(nil, num, protowire.VarintType)
	return protowire.AppendVarint(b, v)
}

func pbFixed32(num protowire.Number, v uint32) []byte {
	b := protowire.AppendTag(nil, num, protowire.Fixed32Type)
	return protowire.AppendFixed32(b, v)
}

func cat(parts ...[]byte) []byte { return bytes.Join(parts, nil) }

// TestDiff checks the comparer the round-trip tests rely on.
func TestDiff(t *testing.T) {
	a, b := scratchModel(), scratchModel()
	if d := diff(a, b); d != "" {
		t.Fatalf("equal models differ at %s", d)
	}
	b.Graph.Nodes[4].Attrs[1].Graph.Outputs[0].Type.Shape[1] = model.Known(33)
	if d := diff(a, b); !strings.HasPrefix(d, "Graph.Nodes[4].Attrs[1].Graph.Outputs[0].Type.Shape[1].Value") {
		t.Errorf("diff %q", d)
	}
	b = scratchModel()
	b.Graph.Initializers[1].Data.Segments[0] = []byte{0, 0, 0, 0, 0, 0, 0, 0}
	if d := diff(a, b); d != "Graph.Initializers[1].Data: values differ" {
		t.Errorf("diff %q", d)
	}
	b = scratchModel()
	b.Metadata["x"] = "y"
	if d := diff(a, b); d == "" {
		t.Error("metadata change not seen")
	}
}
