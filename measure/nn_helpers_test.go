package measure

import (
	"encoding/binary"
	"math"
	"slices"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
)

// Helpers for the table-driven tests of the nn operator families
// (ops_conv_test.go and its siblings): one node, its inputs as graph inputs
// or initializers, and the expected output types as Type.String prints
// them ("float32[N,16,112,112]").

// nnIn is one input of the node under test: a runtime graph input of the
// given shape, or, when ints or floats is set, an initializer holding them.
type nnIn struct {
	name   string
	dt     model.DType
	shape  model.Shape
	ints   []int64
	floats []float64
	none   bool // leave the input slot empty ("")
}

// nnRT is a runtime input; dims are ints (known) or strings (symbols).
func nnRT(name string, dt model.DType, dims ...any) nnIn {
	s := model.Shape{}
	for _, d := range dims {
		switch v := d.(type) {
		case int:
			s = append(s, model.Known(int64(v)))
		case string:
			s = append(s, model.Sym(v))
		}
	}
	return nnIn{name: name, dt: dt, shape: s}
}

// nnUnk is a runtime input of unknown rank.
func nnUnk(name string, dt model.DType) nnIn { return nnIn{name: name, dt: dt, shape: nil} }

// nnI64 is an int64 initializer with the given dims (1-D when none).
func nnI64(name string, v []int64, dims ...int64) nnIn {
	if dims == nil {
		dims = []int64{int64(len(v))}
	}
	return nnIn{name: name, dt: model.Int64, shape: model.KnownShape(dims...), ints: v}
}

// nnInts is an integer initializer of type dt (int8 to int64) with the given
// dims (1-D when none; pass []int64{}... for a scalar).
func nnInts(name string, dt model.DType, v []int64, dims ...int64) nnIn {
	x := nnI64(name, v, dims...)
	x.dt = dt
	return x
}

// nnF32 is a float32 initializer with the given dims (1-D when none).
func nnF32(name string, v []float64, dims ...int64) nnIn {
	if dims == nil {
		dims = []int64{int64(len(v))}
	}
	return nnIn{name: name, dt: model.Float32, shape: model.KnownShape(dims...), floats: v}
}

// nnSkip leaves an optional input slot empty.
func nnSkip() nnIn { return nnIn{none: true} }

func (x nnIn) tensor() *model.Tensor {
	dims, _ := x.shape.Ints()
	t := &model.Tensor{Name: x.name, DType: x.dt, Dims: dims}
	var b []byte
	switch {
	case x.ints != nil:
		for _, v := range x.ints {
			switch x.dt.Bits() {
			case 8:
				b = append(b, byte(v))
			case 32:
				b = binary.LittleEndian.AppendUint32(b, uint32(v))
			default:
				b = binary.LittleEndian.AppendUint64(b, uint64(v))
			}
		}
	case x.floats != nil:
		for _, v := range x.floats {
			if x.dt == model.Float64 {
				b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
			} else {
				b = binary.LittleEndian.AppendUint32(b, math.Float32bits(float32(v)))
			}
		}
	}
	t.Data = model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{b}}
	return t
}

// Attribute builders.
func atI(name string, v int64) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrInt, Int: v}
}
func atIs(name string, v ...int64) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrInts, Ints: v}
}
func atF(name string, v float32) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrFloat, Float: v}
}
func atFs(name string, v ...float32) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrFloats, Floats: v}
}
func atS(name, v string) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrString, String: v}
}
func atSs(name string, v ...string) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrStrings, Strings: v}
}

// nnCase is one row of an operator family's table.
type nnCase struct {
	name   string
	op     string
	domain string // "" for the default domain
	opset  int64  // of the node's domain; 0 means 21
	in     []nnIn
	attrs  []*model.Attr
	nOut   int      // outputs the node declares; 0 means len(want), or 1
	absent []int    // output slots left empty (""), as a node that asks only for Y_h
	want   []string // output types, "" for an output not checked
	err    string   // when set: the node must stay unresolved with a reason containing this
}

// nnRun infers a one-node model and returns the node's output values and
// the unresolved list.
func nnRun(t *testing.T, c nnCase) ([]*Value, []Unresolved) {
	t.Helper()
	opset := c.opset
	if opset == 0 {
		opset = 21
	}
	g := &model.Graph{Name: c.name}
	n := &model.Node{Name: "node", Op: c.op, Domain: c.domain, Attrs: c.attrs}
	for _, x := range c.in {
		if x.none {
			n.Inputs = append(n.Inputs, "")
			continue
		}
		n.Inputs = append(n.Inputs, x.name)
		if x.ints != nil || x.floats != nil {
			g.Initializers = append(g.Initializers, x.tensor())
			continue
		}
		ty := model.TensorType(x.dt, x.shape)
		if x.shape == nil {
			ty = model.Type{Kind: model.KindTensor, DType: x.dt}
		}
		g.Inputs = append(g.Inputs, &model.ValueInfo{Name: x.name, Type: ty})
	}
	nOut := c.nOut
	if nOut == 0 {
		nOut = max(len(c.want), 1)
	}
	for i := 0; i < nOut; i++ {
		if slices.Contains(c.absent, i) {
			n.Outputs = append(n.Outputs, "")
			continue
		}
		name := "out" + string(rune('0'+i))
		n.Outputs = append(n.Outputs, name)
		g.Outputs = append(g.Outputs, &model.ValueInfo{Name: name})
	}
	g.Nodes = []*model.Node{n}
	opsets := map[string]int64{"": opset}
	if c.domain != "" {
		opsets[""] = 17
		opsets[c.domain] = opset
	}
	m := &model.Model{Format: "onnx", IRVersion: 8, Opsets: opsets, Graph: g}
	res, err := Infer(m, InferOptions{IgnoreDeclared: true})
	if err != nil {
		t.Fatalf("Infer: %v", err)
	}
	outs := make([]*Value, nOut)
	for i, name := range n.Outputs {
		if name != "" {
			outs[i] = res.Values.Get(name)
		}
	}
	return outs, res.Unresolved
}

// runNNCases runs a family's table.
func runNNCases(t *testing.T, cases []nnCase) {
	t.Helper()
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			outs, unres := nnRun(t, c)
			if c.err != "" {
				if len(unres) == 0 {
					t.Fatalf("resolved to %v; want unresolved with %q", outs, c.err)
				}
				if !strings.Contains(unres[0].Reason, c.err) {
					t.Fatalf("reason %q; want it to contain %q", unres[0].Reason, c.err)
				}
				return
			}
			if len(unres) > 0 {
				t.Fatalf("unresolved: %s", unres[0].Reason)
			}
			for i, w := range c.want {
				if w == "" {
					continue
				}
				if got := outs[i].Type.String(); got != w {
					t.Errorf("output %d: got %s, want %s", i, got, w)
				}
			}
		})
	}
}
