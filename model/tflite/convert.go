package tflite

import (
	"encoding/binary"
	"fmt"
	"strings"

	"github.com/loadline/loadline/model"
)

// Options tell the decoder where the data comes from.
type Options struct {
	// Path is the model's file name, used in error messages.
	Path string
}

// Decode decodes a TFLite file into loadline's format-neutral model. data
// stays owned by the caller and must not change while the model is in use:
// every constant's values are sub-slices of it.
func Decode(data []byte, opts Options) (*model.Model, error) {
	f, err := Parse(data, opts.Path)
	if err != nil {
		return nil, err
	}
	return f.Convert(opts.Path)
}

// MaxDepth limits how deeply control flow operators may nest subgraphs.
const MaxDepth = 64

// Metadata names with a meaning for loadline.
const (
	MetaMinRuntimeVersion = "min_runtime_version"
	MetaOfflinePlan       = "OfflineMemoryAllocation"
)

// converter maps a parsed file onto model types.
type converter struct {
	f       *Model
	path    string
	m       *model.Model
	graphs  []*model.Graph // converted subgraphs, by index
	running []bool         // subgraphs being converted (to find cycles)
	depth   int            // subgraphs being converted, nested
	names   [][]string     // unique tensor names, per subgraph
}

func (c *converter) fail(field string, format string, args ...any) error {
	return &DecodeError{Path: c.path, Field: field, Offset: -1, Err: fmt.Errorf(format, args...)}
}

// Convert maps the parsed file onto loadline's model types (see the
// package documentation for the mapping). path names the file in errors.
func (f *Model) Convert(path string) (*model.Model, error) {
	if len(f.Subgraphs) == 0 {
		return nil, (&converter{path: path}).fail("subgraphs", "the model has no subgraph")
	}
	c := &converter{f: f, path: path, graphs: make([]*model.Graph, len(f.Subgraphs)),
		running: make([]bool, len(f.Subgraphs)), names: make([][]string, len(f.Subgraphs))}
	c.m = &model.Model{
		Format:       "tflite",
		IRVersion:    int64(f.Version),
		ProducerName: strings.TrimRight(f.Description, "\x00"),
		Metadata:     map[string]string{},
		DimDefaults:  map[string]int64{},
	}
	for i := range f.Subgraphs {
		c.names[i] = uniqueNames(f.Subgraphs[i].Tensors)
	}
	g, err := c.graph(0)
	if err != nil {
		return nil, err
	}
	c.m.Graph = g
	if err := c.metadata(); err != nil {
		return nil, err
	}
	return c.m, nil
}

// uniqueNames names every tensor: its own name when it is unique and not
// empty, else "name#index" or "tensor#index", so that values have one name
// each in the graph.
func uniqueNames(ts []Tensor) []string {
	count := make(map[string]int, len(ts))
	for _, t := range ts {
		count[t.Name]++
	}
	out := make([]string, len(ts))
	for i, t := range ts {
		switch {
		case t.Name == "":
			out[i] = fmt.Sprintf("tensor#%d", i)
		case count[t.Name] > 1:
			out[i] = fmt.Sprintf("%s#%d", t.Name, i)
		default:
			out[i] = t.Name
		}
	}
	return out
}

// dtypes maps the TensorType enum onto model.DType. RESOURCE and VARIANT
// handles have no element type.
var dtypes = map[TensorType]model.DType{
	0: model.Float32, 1: model.Float16, 2: model.Int32, 3: model.Uint8, 4: model.Int64,
	5: model.String, 6: model.Bool, 7: model.Int16, 8: model.Complex64, 9: model.Int8,
	10: model.Float64, 11: model.Complex128, 12: model.Uint64, 13: model.Undefined,
	14: model.Undefined, 15: model.Uint32, 16: model.Uint16, 17: model.Int4, 18: model.BFloat16,
}

// DType maps a tensor type onto loadline's element types.
func (t TensorType) DType() (model.DType, bool) {
	d, ok := dtypes[t]
	return d, ok
}

// Symbolic dims. A -1 in a shape_signature is a dim the converter left
// open; its size in the stored shape is the one the file was converted
// for. Axis 0 is named "batch" (the dim a converter leaves open for a
// model saved without a fixed batch size); any other axis k is "dim<k>".
// Every tensor with a -1 at the same axis shares the symbol, so that one
// --dim binds them all; the stored size is the symbol's default.
func symbolFor(axis int) string {
	if axis == 0 {
		return "batch"
	}
	return fmt.Sprintf("dim%d", axis)
}

// tensorType is the declared type of tensor i of subgraph sg.
func (c *converter) tensorType(sg, i int) (model.Type, error) {
	t := &c.f.Subgraphs[sg].Tensors[i]
	field := fmt.Sprintf("subgraphs[%d].tensors[%d]", sg, i)
	dt, ok := t.Type.DType()
	if !ok {
		return model.Type{}, c.fail(field+".type", "unknown tensor type %d", int8(t.Type))
	}
	if dt == model.Undefined {
		return model.Type{Kind: model.KindUnknown}, nil
	}
	shape := make(model.Shape, len(t.Shape))
	sig := t.ShapeSignature
	if sig != nil && len(sig) != len(t.Shape) {
		return model.Type{}, c.fail(field+".shape_signature", "has %d dims, the shape %d", len(sig), len(t.Shape))
	}
	for k, d := range t.Shape {
		switch {
		case d < 0:
			return model.Type{}, c.fail(field+".shape", "dim %d is %d", k, d)
		case sig != nil && sig[k] == -1:
			s := symbolFor(k)
			if def, seen := c.m.DimDefaults[s]; !seen || def == int64(d) {
				c.m.DimDefaults[s] = int64(d)
				shape[k] = model.Sym(s)
				continue
			}
			// The stored size disagrees with the symbol's: keep the
			// file's size for this tensor rather than guess.
			shape[k] = model.Known(int64(d))
		default:
			shape[k] = model.Known(int64(d))
		}
	}
	return model.TensorType(dt, shape), nil
}

// graph converts subgraph i, and the subgraphs its operators run.
func (c *converter) graph(i int) (*model.Graph, error) {
	if g := c.graphs[i]; g != nil {
		return g, nil
	}
	sg := &c.f.Subgraphs[i]
	field := fmt.Sprintf("subgraphs[%d]", i)
	if c.depth >= MaxDepth {
		return nil, c.fail(field, "control flow operators nest subgraphs more than %d deep", MaxDepth)
	}
	c.running[i] = true
	c.depth++
	defer func() { c.running[i] = false; c.depth-- }()
	names := c.names[i]
	g := &model.Graph{Name: sg.Name, TensorOrder: names}
	if g.Name == "" {
		g.Name = fmt.Sprintf("subgraph#%d", i)
	}
	io := func(what string, idx []int32) ([]*model.ValueInfo, error) {
		var out []*model.ValueInfo
		for k, ti := range idx {
			if ti < 0 || int(ti) >= len(sg.Tensors) {
				return nil, c.fail(fmt.Sprintf("%s.%s[%d]", field, what, k), "tensor %d is out of range (%d tensors)", ti, len(sg.Tensors))
			}
			ty, err := c.tensorType(i, int(ti))
			if err != nil {
				return nil, err
			}
			out = append(out, &model.ValueInfo{Name: names[ti], Type: ty})
		}
		return out, nil
	}
	var err error
	if g.Inputs, err = io("inputs", sg.Inputs); err != nil {
		return nil, err
	}
	if g.Outputs, err = io("outputs", sg.Outputs); err != nil {
		return nil, err
	}
	isIO := map[int]bool{}
	for _, ti := range sg.Inputs {
		isIO[int(ti)] = true
	}
	for ti := range sg.Tensors {
		t := &sg.Tensors[ti]
		tf := fmt.Sprintf("%s.tensors[%d]", field, ti)
		ty, err := c.tensorType(i, ti)
		if err != nil {
			return nil, err
		}
		if int(t.Buffer) >= len(c.f.Buffers) && !(t.Buffer == 0 && len(c.f.Buffers) == 0) {
			return nil, c.fail(tf+".buffer", "buffer %d is out of range (%d buffers)", t.Buffer, len(c.f.Buffers))
		}
		var data []byte
		if t.Buffer > 0 {
			data = c.f.Buffers[t.Buffer].Data
		}
		switch {
		case t.IsVariable:
			g.State = append(g.State, &model.ValueInfo{Name: names[ti], Type: ty})
		case len(data) > 0 && !isIO[ti]:
			init, err := c.constant(tf, names[ti], t, ty, data)
			if err != nil {
				return nil, err
			}
			g.Initializers = append(g.Initializers, init)
		default:
			g.ValueInfo = append(g.ValueInfo, &model.ValueInfo{Name: names[ti], Type: ty})
		}
	}
	for k := range sg.Operators {
		n, err := c.node(i, k)
		if err != nil {
			return nil, err
		}
		g.Nodes = append(g.Nodes, n)
	}
	c.graphs[i] = g
	return g, nil
}

// constant is a buffer-backed tensor as a model.Tensor whose values are a
// sub-slice of the file. A sparse tensor keeps its dense dims and no
// values: its buffer holds only the values its index vectors address.
func (c *converter) constant(field, name string, t *Tensor, ty model.Type, data []byte) (*model.Tensor, error) {
	dims := make([]int64, len(t.Shape))
	for k, d := range t.Shape {
		dims[k] = int64(d)
	}
	out := &model.Tensor{Name: name, DType: ty.DType, Dims: dims}
	if t.Sparsity != nil {
		return out, nil
	}
	if want := out.StorageBytes(); want >= 0 && want != int64(len(data)) {
		return nil, c.fail(field, "buffer %d holds %d bytes, its shape %v of %s needs %d", t.Buffer, len(data), t.Shape, t.Type, want)
	}
	out.Data = model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{data}}
	return out, nil
}

// graphOptions are the options of the control flow operators that name
// subgraphs, and the attribute each becomes.
var graphOptions = map[string]string{
	"then_subgraph_index": "then_branch", "else_subgraph_index": "else_branch",
	"cond_subgraph_index": "cond", "body_subgraph_index": "body",
	"init_subgraph_index": "init",
}

// node converts operator k of subgraph sg.
func (c *converter) node(sg, k int) (*model.Node, error) {
	op := &c.f.Subgraphs[sg].Operators[k]
	field := fmt.Sprintf("subgraphs[%d].operators[%d]", sg, k)
	if int(op.OpcodeIndex) >= len(c.f.OperatorCodes) {
		return nil, c.fail(field+".opcode_index", "operator code %d is out of range (%d operator codes)", op.OpcodeIndex, len(c.f.OperatorCodes))
	}
	code := c.f.OperatorCodes[op.OpcodeIndex]
	n := &model.Node{Domain: "tflite", Op: code.Code().String()}
	if code.Code() == opCustom {
		n.Domain, n.Op = "tflite.custom", code.CustomCode
		if n.Op == "" {
			n.Op = "CUSTOM"
		}
	}
	names := c.names[sg]
	refs := func(what string, idx []int32) ([]string, error) {
		out := make([]string, len(idx))
		for j, ti := range idx {
			switch {
			case ti == -1:
			case ti < 0 || int(ti) >= len(names):
				return nil, c.fail(fmt.Sprintf("%s.%s[%d]", field, what, j), "tensor %d is out of range (%d tensors)", ti, len(names))
			default:
				out[j] = names[ti]
			}
		}
		return out, nil
	}
	var err error
	if n.Inputs, err = refs("inputs", op.Inputs); err != nil {
		return nil, err
	}
	if n.Outputs, err = refs("outputs", op.Outputs); err != nil {
		return nil, err
	}
	for j := range op.Options {
		o := &op.Options[j]
		a := &model.Attr{Name: o.Name}
		switch o.Kind {
		case OptInt, OptBool:
			a.Kind, a.Int = model.AttrInt, o.Int
		case OptFloat:
			a.Kind, a.Float = model.AttrFloat, o.Float
		case OptInts:
			a.Kind, a.Ints = model.AttrInts, make([]int64, len(o.Ints))
			for q, v := range o.Ints {
				a.Ints[q] = int64(v)
			}
		case OptEnum:
			a.Kind, a.String = model.AttrString, o.Enum
		}
		n.Attrs = append(n.Attrs, a)
		if body, ok := graphOptions[o.Name]; ok {
			idx := o.Int
			if idx < 0 || idx >= int64(len(c.f.Subgraphs)) {
				return nil, c.fail(field+".builtin_options."+o.Name, "subgraph %d is out of range (%d subgraphs)", idx, len(c.f.Subgraphs))
			}
			if c.running[idx] {
				return nil, c.fail(field+".builtin_options."+o.Name, "%s runs subgraph %d, which is already running: the subgraphs form a cycle", n.Op, idx)
			}
			g, err := c.graph(int(idx))
			if err != nil {
				return nil, err
			}
			n.Attrs = append(n.Attrs, &model.Attr{Name: body, Kind: model.AttrGraph, Graph: g})
		}
	}
	return n, nil
}

// metadata reads the model metadata loadline uses: min_runtime_version
// (text) and OfflineMemoryAllocation (an offline arena plan). Other
// entries are listed by their size.
func (c *converter) metadata() error {
	for i, md := range c.f.Metadata {
		field := fmt.Sprintf("metadata[%d]", i)
		if int(md.Buffer) >= len(c.f.Buffers) {
			return c.fail(field+".buffer", "buffer %d is out of range (%d buffers)", md.Buffer, len(c.f.Buffers))
		}
		data := c.f.Buffers[md.Buffer].Data
		switch md.Name {
		case MetaMinRuntimeVersion:
			c.m.Metadata[md.Name] = strings.TrimRight(string(data), "\x00")
		case MetaOfflinePlan:
			if err := c.offlinePlan(field, data); err != nil {
				return err
			}
			c.m.Metadata[md.Name] = fmt.Sprintf("%d bytes", len(data))
		default:
			c.m.Metadata[md.Name] = fmt.Sprintf("%d bytes", len(data))
		}
	}
	return nil
}

// offlinePlan reads OfflineMemoryAllocation: int32s [version, subgraphs,
// n, offset_0 … offset_n-1], the offsets of the tensors of every subgraph
// in order, the main subgraph's first; -1 leaves a tensor to the run-time
// planner.
func (c *converter) offlinePlan(field string, data []byte) error {
	if len(data)%4 != 0 || len(data) < 12 {
		return c.fail(field, "%s holds %d bytes, not a list of at least 3 int32s", MetaOfflinePlan, len(data))
	}
	n := int64(int32(binary.LittleEndian.Uint32(data[8:])))
	if n < 0 || n != int64(len(data)/4-3) {
		return c.fail(field, "%s claims %d offsets and holds %d", MetaOfflinePlan, n, len(data)/4-3)
	}
	names := c.names[0]
	plan := map[string]int64{}
	for i := 0; i < len(names) && int64(i) < n; i++ {
		off := int64(int32(binary.LittleEndian.Uint32(data[12+4*i:])))
		if off < -1 {
			return c.fail(field, "%s gives tensor %d the offset %d", MetaOfflinePlan, i, off)
		}
		if off >= 0 {
			plan[names[i]] = off
		}
	}
	c.m.Graph.PlannedOffsets = plan
	return nil
}
