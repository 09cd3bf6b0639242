// Package build writes ONNX-style graphs in Go: a small builder for tests,
// fixtures and the demo, and the reference architectures (zoo.go) whose
// published parameter counts check the measuring code.
//
// A Builder appends nodes in the order its methods are called, names every
// node and tensor deterministically, and tracks the shapes of the values it
// produces so that it can size weights (a Conv's C_in, a Gemm's K) without a
// separate inference pass. That shape arithmetic is deliberately minimal and
// private: real shape inference lives in package measure.
//
// Misuse does not panic. The first error is recorded, later calls do nothing
// and return the zero Value, and Model and Err return the error.
package build

import (
	"errors"
	"fmt"

	"github.com/loadline/loadline/model"
)

// Value is a tensor of the graph being built: a graph input, an initializer
// or a node output, with the element type and shape the builder tracks for
// it. A dimension the builder cannot work out is a fresh symbol ("?1").
// The zero Value stands for an omitted optional input. Treat Shape as
// read-only: the builder keeps the same slice.
type Value struct {
	Name  string
	DType model.DType
	Shape model.Shape
}

// Valid reports whether v names a tensor; the zero Value, which methods
// return after an error, does not.
func (v Value) Valid() bool { return v.Name != "" }

// Builder assembles one model. Its methods are not safe for concurrent use.
type Builder struct {
	name      string
	opset     int64
	declared  bool
	seed      uint64
	valueInfo bool

	g       model.Graph
	tensors map[string]Value // every tensor name in use, with its tracked type
	nodes   map[string]bool  // every node name in use
	outputs map[string]bool
	auto    map[string]int // counters for generated node names, per op
	fresh   int            // counter for unknown dimensions
	err     error
}

// Option configures a Builder.
type Option func(*Builder)

// Declared makes weights declared only: initializers carry dims and dtype
// but no bytes (model.EncodingNone), so that a 138 M-parameter model can be
// built without allocating its weights. Constants given explicit values
// (ConstFloats, ConstInts, Int64s and the shape operands ops create) always
// keep their bytes.
func Declared() Option { return func(b *Builder) { b.declared = true } }

// Seed changes the seed of the pseudo-random weight values. Values depend
// only on the seed and the weight's name, never on call order.
func Seed(s uint64) Option { return func(b *Builder) { b.seed = s } }

// WithValueInfo makes Model record the tracked type of every intermediate
// value in Graph.ValueInfo, as exporters that run shape inference do.
func WithValueInfo() Option { return func(b *Builder) { b.valueInfo = true } }

// MinOpset is the oldest default-domain operator set the builder writes.
const MinOpset = 9

// MaxOpset is the newest default-domain operator set the builder writes.
// The forms it writes are checked against ONNX's checker up to the opset
// the installed onnx package knows (17 for onnx 1.12).
const MaxOpset = 21

// New starts a model named name that imports the default ONNX domain at
// operator set opset (MinOpset to MaxOpset).
func New(name string, opset int64, opts ...Option) *Builder {
	b := &Builder{
		name:    name,
		opset:   opset,
		tensors: map[string]Value{},
		nodes:   map[string]bool{},
		outputs: map[string]bool{},
		auto:    map[string]int{},
	}
	b.g.Name = name
	for _, o := range opts {
		o(b)
	}
	if opset < MinOpset || opset > MaxOpset {
		b.fail("opset %d is outside the supported range %d to %d", opset, MinOpset, MaxOpset)
	}
	return b
}

// DeclareOnly switches Declared mode on or off for the weights declared
// from now on.
func (b *Builder) DeclareOnly(on bool) { b.declared = on }

// Opset returns the operator set version the builder writes.
func (b *Builder) Opset() int64 { return b.opset }

// Err returns the first error recorded, or nil.
func (b *Builder) Err() error { return b.err }

// Lookup returns the tensor named name and whether it exists.
func (b *Builder) Lookup(name string) (Value, bool) {
	v, ok := b.tensors[name]
	return v, ok
}

// Input declares a graph input of known dims.
func (b *Builder) Input(name string, dt model.DType, dims ...int64) Value {
	return b.InputShape(name, dt, model.KnownShape(dims...))
}

// InputShape declares a graph input whose shape may hold symbols, such as
// model.Shape{model.Sym("batch"), model.Known(3), model.Known(224), model.Known(224)}.
func (b *Builder) InputShape(name string, dt model.DType, shape model.Shape) Value {
	if b.err != nil {
		return Value{}
	}
	if !dt.Known() {
		b.fail("input %q: unknown dtype %s", name, dt)
		return Value{}
	}
	for _, d := range shape {
		if d.IsKnown() && d.Value < 0 {
			b.fail("input %q: negative dimension in %s", name, shape)
			return Value{}
		}
	}
	if !b.claimTensor(name) {
		return Value{}
	}
	v := Value{Name: name, DType: dt, Shape: shape.Clone()}
	b.tensors[name] = v
	b.g.Inputs = append(b.g.Inputs, &model.ValueInfo{Name: name, Type: model.TensorType(dt, v.Shape.Clone())})
	return v
}

// Output marks v as a graph output, with the type the builder tracked.
func (b *Builder) Output(v Value) {
	if b.err != nil {
		return
	}
	if !b.known("Output", v) {
		return
	}
	if b.outputs[v.Name] {
		b.fail("%q is already a graph output", v.Name)
		return
	}
	b.outputs[v.Name] = true
	b.g.Outputs = append(b.g.Outputs, &model.ValueInfo{Name: v.Name, Type: model.TensorType(v.DType, v.Shape.Clone())})
}

// IRVersion returns the ONNX IR version Model writes for an operator set:
// 8 up to opset 18, else the first IR version that admits the opset.
func IRVersion(opset int64) int64 {
	switch {
	case opset <= 18:
		return 8
	case opset <= 20:
		return 9
	default:
		return 10
	}
}

// Model returns the model built so far, or the first error recorded. The
// returned model shares tensors and nodes with the builder; build no further
// once it is in use.
func (b *Builder) Model() (*model.Model, error) {
	if b.err != nil {
		return nil, b.err
	}
	if len(b.g.Outputs) == 0 {
		return nil, fmt.Errorf("build: model %q has no outputs", b.name)
	}
	g := b.g
	g.Nodes = append([]*model.Node(nil), b.g.Nodes...)
	g.Inputs = append([]*model.ValueInfo(nil), b.g.Inputs...)
	g.Outputs = append([]*model.ValueInfo(nil), b.g.Outputs...)
	g.Initializers = append([]*model.Tensor(nil), b.g.Initializers...)
	g.ValueInfo = nil
	if b.valueInfo {
		for _, n := range b.g.Nodes {
			for _, o := range n.Outputs {
				if o == "" || b.outputs[o] {
					continue
				}
				v := b.tensors[o]
				g.ValueInfo = append(g.ValueInfo, &model.ValueInfo{Name: o, Type: model.TensorType(v.DType, v.Shape.Clone())})
			}
		}
	}
	return &model.Model{
		Format:       "onnx",
		IRVersion:    IRVersion(b.opset),
		Opsets:       map[string]int64{"": b.opset},
		ProducerName: "loadline-build",
		Graph:        &g,
	}, nil
}

// fail records the first error.
func (b *Builder) fail(format string, args ...any) {
	if b.err == nil {
		b.err = fmt.Errorf("build: "+format, args...)
	}
}

// ErrOpset is wrapped by the errors of operators or operator forms the
// builder's opset does not have.
var ErrOpset = errors.New("not available at this opset")

// needOpset records an error unless the builder's opset is at least min.
func (b *Builder) needOpset(what string, min int64) bool {
	if b.opset < min {
		if b.err == nil {
			b.err = fmt.Errorf("build: %s needs opset %d or newer, the model imports %d: %w", what, min, b.opset, ErrOpset)
		}
		return false
	}
	return true
}

// claimTensor reserves a tensor name.
func (b *Builder) claimTensor(name string) bool {
	if name == "" {
		b.fail("empty tensor name")
		return false
	}
	if _, dup := b.tensors[name]; dup {
		b.fail("tensor name %q is already in use", name)
		return false
	}
	// Reserve now; the caller stores the final type.
	b.tensors[name] = Value{Name: name}
	return true
}

// nodeName resolves the name of a node about to be added: an empty name
// becomes the op and a counter ("Relu_3"). The node's first output tensor
// takes the same name, so both namespaces are claimed. It returns "" after
// recording an error.
func (b *Builder) nodeName(op, name string) string {
	if b.err != nil {
		return ""
	}
	if name == "" {
		for {
			b.auto[op]++
			name = fmt.Sprintf("%s_%d", op, b.auto[op])
			_, t := b.tensors[name]
			if !b.nodes[name] && !t {
				break
			}
		}
	}
	if b.nodes[name] {
		b.fail("node name %q is already in use", name)
		return ""
	}
	if !b.claimTensor(name) {
		return ""
	}
	b.nodes[name] = true
	return name
}

// known records an error unless every valid value is a tensor of this
// builder with its tracked type; the zero Value passes (an omitted input).
func (b *Builder) known(op string, vs ...Value) bool {
	if b.err != nil {
		return false
	}
	for _, v := range vs {
		if !v.Valid() {
			continue
		}
		t, ok := b.tensors[v.Name]
		if !ok || t.DType == model.Undefined {
			b.fail("%s: %q is not a tensor of this builder", op, v.Name)
			return false
		}
	}
	return true
}

// required records an error unless every value is valid and known.
func (b *Builder) required(op, name string, vs ...Value) bool {
	if b.err != nil {
		return false
	}
	for i, v := range vs {
		if !v.Valid() {
			b.fail("%s %q: input %d is missing", op, name, i)
			return false
		}
	}
	return b.known(op, vs...)
}

// emit appends a node whose outputs are already claimed tensor names, with
// their tracked types, and returns the first output.
func (b *Builder) emit(op, name string, inputs []Value, attrs []*model.Attr, outs ...Value) Value {
	n := &model.Node{Name: name, Op: op, Attrs: attrs}
	for _, in := range inputs {
		n.Inputs = append(n.Inputs, in.Name)
	}
	// Drop trailing omitted inputs, as exporters do.
	for len(n.Inputs) > 0 && n.Inputs[len(n.Inputs)-1] == "" {
		n.Inputs = n.Inputs[:len(n.Inputs)-1]
	}
	for _, o := range outs {
		n.Outputs = append(n.Outputs, o.Name)
		b.tensors[o.Name] = o
	}
	b.g.Nodes = append(b.g.Nodes, n)
	return outs[0]
}

// node appends a single-output node named name (already resolved) whose
// output tensor is also called name.
func (b *Builder) node(op, name string, inputs []Value, attrs []*model.Attr, dt model.DType, shape model.Shape) Value {
	return b.emit(op, name, inputs, attrs, Value{Name: name, DType: dt, Shape: shape})
}

// unknownDim returns a fresh symbol for a dimension the builder cannot work out.
func (b *Builder) unknownDim() model.Dim {
	b.fresh++
	return model.Sym(fmt.Sprintf("?%d", b.fresh))
}

func attrInt(name string, v int64) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrInt, Int: v}
}

func attrInts(name string, v []int64) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrInts, Ints: append([]int64{}, v...)}
}

func attrFloat(name string, v float64) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrFloat, Float: float32(v)}
}

func attrString(name, v string) *model.Attr {
	return &model.Attr{Name: name, Kind: model.AttrString, String: v}
}
