package onnx

import (
	"crypto/sha256"
	"encoding/base64"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"

	"github.com/loadline/loadline/model"
)

// The canonical text of a decoded model, line for line the text that
// testdata/onnx_dump.py's canonical() writes from ONNX's own Python reader:
// every graph (and subgraph, indented under its attribute) with its inputs,
// outputs, value_info, initializers and sparse initializers, every node with
// its name, domain, op type, input and output names and every attribute's
// value, tensors by a digest of all their values, then the model-local
// functions. TestAgainstPythonONNX compares the two.

// wholeSHA256 hashes every value of t as onnx_dump.py's whole() does:
// little-endian bytes at t's dtype; for strings each string's length as 8
// bytes then its bytes; "nodata" for a tensor that stores no values.
func wholeSHA256(t *model.Tensor) string {
	h := sha256.New()
	if t.DType == model.String {
		var n [8]byte
		for _, s := range t.Data.Segments {
			binary.LittleEndian.PutUint64(n[:], uint64(len(s)))
			h.Write(n[:])
			h.Write(s)
		}
		return hex.EncodeToString(h.Sum(nil))
	}
	if !t.HasData() {
		if t.Elements() > 0 {
			return "nodata"
		}
		return hex.EncodeToString(h.Sum(nil))
	}
	b, err := t.RawBytes()
	if err != nil {
		return "error " + err.Error()
	}
	h.Write(b)
	return hex.EncodeToString(h.Sum(nil))
}

func joinInts(xs []int64) string {
	s := make([]string, len(xs))
	for i, x := range xs {
		s[i] = strconv.FormatInt(x, 10)
	}
	return strings.Join(s, ",")
}

func tensorDigest(t *model.Tensor) string {
	return fmt.Sprintf("%s %d [%s] %s", t.Name, int32(t.DType), joinInts(t.Dims), wholeSHA256(t))
}

func sparseDigest(s *model.SparseTensor) string {
	return fmt.Sprintf("values %s indices %s dims [%s]", tensorDigest(s.Values), tensorDigest(s.Indices), joinInts(s.Dims))
}

func typeText(t *model.Type) string {
	kind := kindNames[t.Kind]
	if t.Kind != model.KindTensor && t.Kind != model.KindSparseTensor {
		return kind
	}
	if !t.RankKnown {
		return fmt.Sprintf("%s %d norank", kind, int32(t.DType))
	}
	dims := make([]string, len(t.Shape))
	for i, d := range t.Shape {
		switch {
		case d.IsKnown():
			dims[i] = strconv.FormatInt(d.Value, 10)
		case strings.HasPrefix(d.Symbol, "?"): // a dim the file leaves unknown
			dims[i] = "?"
		default:
			dims[i] = d.Symbol
		}
	}
	return fmt.Sprintf("%s %d [%s]", kind, int32(t.DType), strings.Join(dims, ","))
}

func f32Bits(x float32) string { return fmt.Sprintf("%08x", math.Float32bits(x)) }

func attrLines(a *model.Attr, depth int) []string {
	head := fmt.Sprintf("%sattr %s %d", strings.Repeat("  ", depth), a.Name, a.Kind)
	if a.RefName != "" {
		return []string{head + " ref " + a.RefName}
	}
	join := func(n int, f func(int) string) string {
		s := make([]string, n)
		for i := range s {
			s[i] = f(i)
		}
		return strings.Join(s, ",")
	}
	switch a.Kind {
	case model.AttrFloat:
		return []string{head + " " + f32Bits(a.Float)}
	case model.AttrInt:
		return []string{head + " " + strconv.FormatInt(a.Int, 10)}
	case model.AttrString:
		return []string{head + " " + base64.StdEncoding.EncodeToString([]byte(a.String))}
	case model.AttrTensor:
		return []string{head + " " + tensorDigest(a.Tensor)}
	case model.AttrSparseTensor:
		return []string{head + " " + sparseDigest(a.Sparse)}
	case model.AttrType:
		return []string{head + " " + typeText(a.Type)}
	case model.AttrFloats:
		return []string{head + " " + join(len(a.Floats), func(i int) string { return f32Bits(a.Floats[i]) })}
	case model.AttrInts:
		return []string{head + " " + joinInts(a.Ints)}
	case model.AttrStrings:
		return []string{head + " " + join(len(a.Strings), func(i int) string { return base64.StdEncoding.EncodeToString([]byte(a.Strings[i])) })}
	case model.AttrTensors:
		s := make([]string, len(a.Tensors))
		for i, t := range a.Tensors {
			s[i] = tensorDigest(t)
		}
		return []string{head + " " + strings.Join(s, " | ")}
	case model.AttrTypes:
		s := make([]string, len(a.Types))
		for i := range a.Types {
			s[i] = typeText(&a.Types[i])
		}
		return []string{head + " " + strings.Join(s, " | ")}
	case model.AttrGraph:
		return append([]string{head}, canonicalGraph(a.Graph, depth+1)...)
	case model.AttrGraphs:
		out := []string{fmt.Sprintf("%s %d", head, len(a.Graphs))}
		for _, g := range a.Graphs {
			out = append(out, canonicalGraph(g, depth+1)...)
		}
		return out
	}
	return []string{head + " ?"}
}

func nodeLines(nodes []*model.Node, depth int) []string {
	var out []string
	for _, n := range nodes {
		out = append(out, fmt.Sprintf("%snode %s|%s|%s|%s|%s", strings.Repeat("  ", depth), n.Name, n.Domain, n.Op,
			strings.Join(n.Inputs, ","), strings.Join(n.Outputs, ",")))
		for _, a := range n.Attrs {
			out = append(out, attrLines(a, depth+1)...)
		}
	}
	return out
}

func canonicalGraph(g *model.Graph, depth int) []string {
	ind := strings.Repeat("  ", depth)
	out := []string{ind + "graph " + g.Name}
	for _, vis := range []struct {
		what string
		vis  []*model.ValueInfo
	}{{"input", g.Inputs}, {"output", g.Outputs}, {"value_info", g.ValueInfo}} {
		for _, v := range vis.vis {
			out = append(out, fmt.Sprintf("%s%s %s %s", ind, vis.what, v.Name, typeText(&v.Type)))
		}
	}
	for _, t := range g.Initializers {
		out = append(out, ind+"initializer "+tensorDigest(t))
	}
	for _, s := range g.Sparse {
		out = append(out, ind+"sparse_initializer "+sparseDigest(s))
	}
	return append(out, nodeLines(g.Nodes, depth)...)
}

// canonicalModel is the canonical text of m: its graph, then its functions.
func canonicalModel(m *model.Model) []string {
	out := canonicalGraph(m.Graph, 0)
	for _, f := range m.Functions {
		var ops []string
		for d, v := range f.Opsets {
			ops = append(ops, fmt.Sprintf("%s:%d", d, v))
		}
		sort.Strings(ops)
		out = append(out, fmt.Sprintf("function %s|%s|%s|%s|%s|%s", f.Domain, f.Name, strings.Join(f.Inputs, ","), strings.Join(f.Outputs, ","),
			strings.Join(f.Attributes, ","), strings.Join(ops, ",")))
		out = append(out, nodeLines(f.Nodes, 1)...)
	}
	return out
}

// compareLines returns the first difference between the Go decode's
// canonical text and python's, or "".
func compareLines(got, want []string) string {
	for i := 0; i < len(got) && i < len(want); i++ {
		if got[i] != want[i] {
			return fmt.Sprintf("line %d:\n  go:     %s\n  python: %s", i+1, got[i], want[i])
		}
	}
	if len(got) != len(want) {
		return fmt.Sprintf("%d lines, python %d", len(got), len(want))
	}
	return ""
}
