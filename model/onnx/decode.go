package onnx

import (
	"encoding/binary"
	"fmt"
	"math"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/loadline/loadline/internal/regular"
	"github.com/loadline/loadline/model"
	"google.golang.org/protobuf/encoding/protowire"
)

// DefaultMaxDepth is the subgraph nesting limit when Options.MaxDepth is 0.
const DefaultMaxDepth = 64

// Options tell the decoder where the data comes from.
type Options struct {
	// Path is the model's file name, used in error messages and, through
	// Dir, to resolve external data.
	Path string
	// Dir is the folder external data is resolved against; by default
	// filepath.Dir(Path).
	Dir string
	// ReadFile reads external data files (the resolved path, inside Dir);
	// by default the operating system's file system. It lets callers serve
	// files from git objects.
	ReadFile func(name string) ([]byte, error)
	// MaxDepth limits how deeply subgraphs (and type protos) may nest;
	// 0 means DefaultMaxDepth.
	MaxDepth int
	// Passed, when set, is called as decoding passes each field of the
	// main graph, with the offset in data it has read up to. Decoding
	// does not read the bytes before it again (the model keeps the
	// tensors' values as sub-slices, which others may read): a caller that
	// mapped the file may give back their pages, which keeps a file of
	// large weights from being mapped in whole (the kernel maps a page
	// cache folio of up to 2 MiB around each header read).
	Passed func(offset int)
}

// Decode decodes an ONNX ModelProto. data stays owned by the caller and
// must not change while the model is in use: every tensor's values are
// sub-slices of it. External data is checked but not read.
func Decode(data []byte, opts Options) (*model.Model, error) {
	d := newDecoder(data, opts)
	m, err := d.model()
	if err != nil {
		return nil, err
	}
	d.nameFresh()
	return m, nil
}

// DecodeFile reads the model file at path (with opts.ReadFile when set) and
// decodes it with opts.Path set to path.
func DecodeFile(path string, opts Options) (*model.Model, error) {
	read := opts.ReadFile
	if read == nil {
		// Only a regular file: a FIFO or a device would block or never end.
		read = func(name string) ([]byte, error) { return regular.ReadFile(name, math.MaxInt64) }
	}
	data, err := read(path)
	if err != nil {
		return nil, err
	}
	opts.Path = path
	return Decode(data, opts)
}

// DecodeTensor decodes a standalone TensorProto, such as the input_N.pb and
// output_N.pb files of ONNX's backend test suite. The tensor's values are
// sub-slices of data. External data is resolved against the current folder.
func DecodeTensor(data []byte) (*model.Tensor, error) {
	d := newDecoder(data, Options{})
	return d.tensor(0, len(data), 0)
}

// decoder holds the input and what is shared across one decode.
type decoder struct {
	data     []byte
	path     string
	dir      string
	readFile func(string) ([]byte, error)
	maxDepth int
	passed   func(offset int) // Options.Passed

	fresh  []*model.Dim    // dims with neither dim_value nor dim_param, in file order
	params map[string]bool // every dim_param the file uses

	// Nodes, their input and output name lists, tensors and their
	// segment lists are carved from chunks: a graph of 100,000 nodes
	// would otherwise cost three or four small allocations a node.
	nodes    chunks[model.Node]
	names    chunks[string]
	tensors  chunks[model.Tensor]
	segments chunks[[]byte]
	// words holds one copy of each operator and domain name: a graph
	// names a few dozen of them thousands of times.
	words map[string]string
	// slab holds the bytes of short strings (keepString).
	slab strings.Builder
}

// maxWords bounds how many distinct words are kept; past it (a hostile
// file naming a fresh operator in every node) each is copied on its own.
const maxWords = 4096

// word is str for a field whose few distinct values recur: the
// operator and domain names of nodes.
func (d *decoder) word(f *field, name string) (string, error) {
	if f.typ != protowire.BytesType {
		return "", d.wrongType(f, name, protowire.BytesType)
	}
	b := d.data[f.lo:f.hi]
	if w, ok := d.words[string(b)]; ok {
		return w, nil
	}
	w := string(b)
	if len(d.words) < maxWords {
		if d.words == nil {
			d.words = map[string]string{}
		}
		d.words[w] = w
	}
	return w, nil
}

// chunks hands out elements and short lists carved from blocks of
// chunkLen, one allocation a block rather than one an element.
type chunks[T any] struct{ block []T }

// chunkLen is how many elements one block holds.
const chunkLen = 1024

// one is a zeroed element.
func (c *chunks[T]) one() *T {
	if len(c.block) == cap(c.block) {
		c.block = make([]T, 0, chunkLen)
	}
	c.block = c.block[:len(c.block)+1]
	return &c.block[len(c.block)-1]
}

// copyOf copies list into the current block, nil for an empty one; the
// copy's capacity ends at its length, so that appending to it cannot reach
// a neighbour's elements.
func (c *chunks[T]) copyOf(list ...T) []T {
	if len(list) == 0 {
		return nil
	}
	if cap(c.block)-len(c.block) < len(list) {
		c.block = make([]T, 0, max(chunkLen, len(list)))
	}
	k := len(c.block)
	c.block = append(c.block, list...)
	return c.block[k : k+len(list) : k+len(list)]
}

func newDecoder(data []byte, opts Options) *decoder {
	d := &decoder{data: data, path: opts.Path, dir: opts.Dir, readFile: opts.ReadFile, maxDepth: opts.MaxDepth, passed: opts.Passed}
	if d.dir == "" {
		d.dir = filepath.Dir(opts.Path)
	}
	if d.maxDepth <= 0 {
		d.maxDepth = DefaultMaxDepth
	}
	return d
}

// nameFresh gives every unnamed dim a symbol "?N" the file does not use.
func (d *decoder) nameFresh() {
	n := 0
	for _, dim := range d.fresh {
		for {
			n++
			s := "?" + strconv.Itoa(n)
			if !d.params[s] {
				dim.Symbol = s
				break
			}
		}
	}
	d.fresh = nil
}

// ModelProto
func (d *decoder) model() (*model.Model, error) {
	m := &model.Model{Format: "onnx", Opsets: map[string]int64{}}
	var nOpset, nMeta, nFunc int
	hasGraph := false
	r := d.reader(0, len(d.data))
	r.names = modelFields
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return nil, err
		}
		if !ok {
			break
		}
		switch f.num {
		case 1:
			m.IRVersion, err = d.int64(&f, "ir_version")
		case 2:
			m.ProducerName, err = d.str(&f, "producer_name")
		case 3:
			m.ProducerVersion, err = d.str(&f, "producer_version")
		case 4:
			m.Domain, err = d.str(&f, "domain")
		case 5:
			m.ModelVersion, err = d.int64(&f, "model_version")
		case 6:
			m.DocString, err = d.str(&f, "doc_string")
		case 7:
			if err = d.msg(&f, "graph"); err == nil {
				m.Graph, err = d.graph(f.lo, f.hi, 0, f.off)
				err = within(err, "graph")
				hasGraph = true
			}
		case 8:
			name := indexed("opset_import", nOpset)
			nOpset++
			if err = d.msg(&f, name); err == nil {
				err = within(d.opset(f.lo, f.hi, m.Opsets), name)
			}
		case 14:
			i := nMeta
			nMeta++
			if err = d.msg(&f, ""); err == nil {
				var k, v string
				k, v, err = d.stringPair(f.lo, f.hi)
				if err == nil {
					if m.Metadata == nil {
						m.Metadata = map[string]string{}
					}
					m.Metadata[k] = v
				}
			}
			err = withinAt(err, "metadata_props", i)
		case 20:
			err = d.skipBytes(&f, "training_info")
		case 25:
			i := nFunc
			nFunc++
			if err = d.msg(&f, ""); err == nil {
				var fn *model.Function
				fn, err = d.function(f.lo, f.hi)
				m.Functions = append(m.Functions, fn)
			}
			err = withinAt(err, "functions", i)
		}
		if err != nil {
			return nil, err
		}
	}
	if !hasGraph {
		return nil, d.errAt(len(d.data), "not an ONNX model: no graph (ModelProto field 7)")
	}
	return m, nil
}

// OperatorSetIdProto, added to opsets. A domain imported twice keeps the
// last version, as protobuf map semantics would.
func (d *decoder) opset(lo, hi int, opsets map[string]int64) error {
	var domain string
	var version int64
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return err
		}
		if !ok {
			break
		}
		switch f.num {
		case 1:
			domain, err = d.str(&f, "domain")
		case 2:
			version, err = d.int64(&f, "version")
		}
		if err != nil {
			return err
		}
	}
	opsets[domain] = version
	return nil
}

// StringStringEntryProto
func (d *decoder) stringPair(lo, hi int) (key, value string, err error) {
	r := d.reader(lo, hi)
	var f field
	for {
		var ok bool
		ok, err = r.next(&f)
		if err != nil || !ok {
			return key, value, err
		}
		switch f.num {
		case 1:
			key, err = d.str(&f, "key")
		case 2:
			value, err = d.str(&f, "value")
		}
		if err != nil {
			return key, value, err
		}
	}
}

// GraphProto at the given nesting depth (0 for the main graph); off is the
// offset of the field that holds it, for the depth error.
func (d *decoder) graph(lo, hi, depth, off int) (*model.Graph, error) {
	if depth > d.maxDepth {
		return nil, d.errAt(off, "subgraphs nested more than %d deep (Options.MaxDepth)", d.maxDepth)
	}
	g := &model.Graph{}
	var nNode, nInit, nSparse, nIn, nOut, nVI int
	r := d.reader(lo, hi)
	r.names = graphFields
	var f field
	for {
		if depth == 0 && d.passed != nil {
			d.passed(r.pos) // the fields before are decoded
		}
		ok, err := r.next(&f)
		if err != nil {
			return nil, err
		}
		if !ok {
			break
		}
		switch f.num {
		case 1:
			i := nNode
			nNode++
			if err = d.msg(&f, ""); err == nil {
				var n *model.Node
				n, err = d.node(f.lo, f.hi, depth)
				g.Nodes = append(g.Nodes, n)
			}
			err = withinAt(err, "node", i)
		case 2:
			g.Name, err = d.str(&f, "name")
		case 5:
			i := nInit
			nInit++
			if err = d.msg(&f, ""); err == nil {
				var t *model.Tensor
				t, err = d.tensor(f.lo, f.hi, f.off)
				g.Initializers = append(g.Initializers, t)
			}
			err = withinAt(err, "initializer", i)
		case 15:
			i := nSparse
			nSparse++
			if err = d.msg(&f, ""); err == nil {
				var s *model.SparseTensor
				s, err = d.sparse(f.lo, f.hi, f.off)
				g.Sparse = append(g.Sparse, s)
			}
			err = withinAt(err, "sparse_initializer", i)
		case 10:
			err = d.skipBytes(&f, "doc_string")
		case 11, 12, 13:
			var field string
			var i int
			var list *[]*model.ValueInfo
			switch f.num {
			case 11:
				field, i, list = "input", nIn, &g.Inputs
				nIn++
			case 12:
				field, i, list = "output", nOut, &g.Outputs
				nOut++
			default:
				field, i, list = "value_info", nVI, &g.ValueInfo
				nVI++
			}
			if err = d.msg(&f, ""); err == nil {
				var vi *model.ValueInfo
				vi, err = d.valueInfo(f.lo, f.hi)
				*list = append(*list, vi)
			}
			err = withinAt(err, field, i)
		case 14:
			err = d.skipBytes(&f, "quantization_annotation")
		case 16:
			err = d.skipBytes(&f, "metadata_props")
		}
		if err != nil {
			return nil, err
		}
	}
	return g, nil
}

// ValueInfoProto
func (d *decoder) valueInfo(lo, hi int) (*model.ValueInfo, error) {
	vi := &model.ValueInfo{}
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return nil, err
		}
		if !ok {
			return vi, nil
		}
		switch f.num {
		case 1:
			vi.Name, err = d.str(&f, "name")
		case 2:
			if err = d.msg(&f, "type"); err == nil {
				vi.Type, err = d.typeProto(f.lo, f.hi, 0, f.off)
				err = within(err, "type")
			}
		case 3:
			err = d.skipBytes(&f, "doc_string")
		}
		if err != nil {
			return nil, err
		}
	}
}

// NodeProto in a graph at the given depth.
func (d *decoder) node(lo, hi, depth int) (*model.Node, error) {
	n := d.nodes.one()
	// The names gather here (on the stack for a usual node) and are
	// kept once the node is read.
	var inBuf, outBuf [8]string
	ins, outs := inBuf[:0], outBuf[:0]
	nAttr := 0
	r := d.reader(lo, hi)
	r.names = nodeFields
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return nil, err
		}
		if !ok {
			n.Inputs, n.Outputs = d.names.copyOf(ins...), d.names.copyOf(outs...)
			return n, nil
		}
		var s string
		switch f.num {
		case 1:
			s, err = d.str(&f, "")
			err = withinAt(err, "input", len(ins))
			ins = append(ins, s)
		case 2:
			s, err = d.str(&f, "")
			err = withinAt(err, "output", len(outs))
			outs = append(outs, s)
		case 3:
			n.Name, err = d.str(&f, "name")
		case 4:
			n.Op, err = d.word(&f, "op_type")
		case 7:
			n.Domain, err = d.word(&f, "domain")
		case 5:
			i := nAttr
			nAttr++
			if err = d.msg(&f, ""); err == nil {
				var a *model.Attr
				a, err = d.attr(f.lo, f.hi, depth)
				n.Attrs = append(n.Attrs, a)
			}
			err = withinAt(err, "attribute", i)
		case 6:
			err = d.skipBytes(&f, "doc_string")
		}
		if err != nil {
			return nil, err
		}
	}
}

// attrFieldKinds maps AttributeProto value fields to the kind they hold,
// in the order used to infer a missing type (old models, IR version 1).
var attrFieldKinds = []struct {
	num  protowire.Number
	kind model.AttrKind
}{
	{2, model.AttrFloat}, {3, model.AttrInt}, {4, model.AttrString}, {5, model.AttrTensor},
	{6, model.AttrGraph}, {22, model.AttrSparseTensor}, {14, model.AttrType},
	{7, model.AttrFloats}, {8, model.AttrInts}, {9, model.AttrStrings}, {10, model.AttrTensors},
	{11, model.AttrGraphs}, {23, model.AttrSparseTensors}, {15, model.AttrTypes},
}

// AttributeProto of a node in a graph at the given depth. All value fields
// are decoded (and so checked); only the one the kind names is kept.
func (d *decoder) attr(lo, hi, depth int) (*model.Attr, error) {
	a := &model.Attr{}
	nSparse := 0
	var seen uint32 // bit per field number that carries a value
	typ := int32(-1)
	r := d.reader(lo, hi)
	r.names = attrFields
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return nil, err
		}
		if !ok {
			break
		}
		if f.num < 32 {
			seen |= 1 << f.num
		}
		switch f.num {
		case 1:
			a.Name, err = d.str(&f, "name")
		case 21:
			a.RefName, err = d.str(&f, "ref_attr_name")
		case 13:
			err = d.skipBytes(&f, "doc_string")
		case 20:
			typ, err = d.int32(&f, "type")
			if err == nil && (typ < 0 || typ > int32(model.AttrTypes)) {
				err = &DecodeError{Path: d.path, Field: "type", Offset: f.off, Err: fmt.Errorf("unknown attribute type %d", typ)}
			}
		case 2:
			if f.typ != protowire.Fixed32Type {
				err = d.wrongType(&f, "f", protowire.Fixed32Type)
			}
			a.Float = math.Float32frombits(uint32(f.v))
		case 3:
			a.Int, err = d.int64(&f, "i")
		case 4:
			a.String, err = d.str(&f, "s")
		case 5:
			if err = d.msg(&f, "t"); err == nil {
				a.Tensor, err = d.tensor(f.lo, f.hi, f.off)
				err = within(err, "t")
			}
		case 6:
			if err = d.msg(&f, "g"); err == nil {
				a.Graph, err = d.graph(f.lo, f.hi, depth+1, f.off)
				err = within(err, "g")
			}
		case 22:
			if err = d.msg(&f, "sparse_tensor"); err == nil {
				a.Sparse, err = d.sparse(f.lo, f.hi, f.off)
				err = within(err, "sparse_tensor")
			}
		case 14:
			if err = d.msg(&f, "tp"); err == nil {
				var t model.Type
				t, err = d.typeProto(f.lo, f.hi, 0, f.off)
				a.Type = &t
				err = within(err, "tp")
			}
		case 7:
			a.Floats, err = d.appendFloats(a.Floats, &f, indexed("floats", len(a.Floats)))
		case 8:
			a.Ints, err = d.appendInt64s(a.Ints, &f, indexed("ints", len(a.Ints)))
		case 9:
			var s string
			s, err = d.str(&f, indexed("strings", len(a.Strings)))
			a.Strings = append(a.Strings, s)
		case 10:
			name := indexed("tensors", len(a.Tensors))
			if err = d.msg(&f, name); err == nil {
				var t *model.Tensor
				t, err = d.tensor(f.lo, f.hi, f.off)
				a.Tensors = append(a.Tensors, t)
				err = within(err, name)
			}
		case 11:
			name := indexed("graphs", len(a.Graphs))
			if err = d.msg(&f, name); err == nil {
				var g *model.Graph
				g, err = d.graph(f.lo, f.hi, depth+1, f.off)
				a.Graphs = append(a.Graphs, g)
				err = within(err, name)
			}
		case 23:
			// model.Attr has no field for a list of sparse tensors: they are
			// checked and dropped.
			i := nSparse
			nSparse++
			if err = d.msg(&f, ""); err == nil {
				_, err = d.sparse(f.lo, f.hi, f.off)
			}
			err = withinAt(err, "sparse_tensors", i)
		case 15:
			name := indexed("type_protos", len(a.Types))
			if err = d.msg(&f, name); err == nil {
				var t model.Type
				t, err = d.typeProto(f.lo, f.hi, 0, f.off)
				a.Types = append(a.Types, t)
				err = within(err, name)
			}
		}
		if err != nil {
			return nil, err
		}
	}
	if typ >= 0 {
		a.Kind = model.AttrKind(typ)
	} else {
		for _, fk := range attrFieldKinds {
			if seen&(1<<fk.num) != 0 {
				a.Kind = fk.kind
				break
			}
		}
	}
	keepOnly(a)
	if a.RefName == "" {
		// A reference to a caller's attribute carries no value; anything
		// else of a message kind must have one, or callers meet a nil.
		missing := ""
		switch {
		case a.Kind == model.AttrTensor && a.Tensor == nil:
			missing = "t"
		case a.Kind == model.AttrGraph && a.Graph == nil:
			missing = "g"
		case a.Kind == model.AttrSparseTensor && a.Sparse == nil:
			missing = "sparse_tensor"
		case a.Kind == model.AttrType && a.Type == nil:
			missing = "tp"
		}
		if missing != "" {
			return nil, d.errAt(lo, "attribute %q of type %s has no %s field", a.Name, strings.ToUpper(a.Kind.String()), missing)
		}
	}
	return a, nil
}

// keepOnly clears every value field of a but the one its kind names, so that
// a decoded attribute holds exactly what an encoder would write back.
func keepOnly(a *model.Attr) {
	k := *a
	*a = model.Attr{Name: k.Name, Kind: k.Kind, RefName: k.RefName}
	switch k.Kind {
	case model.AttrFloat:
		a.Float = k.Float
	case model.AttrInt:
		a.Int = k.Int
	case model.AttrString:
		a.String = k.String
	case model.AttrTensor:
		a.Tensor = k.Tensor
	case model.AttrGraph:
		a.Graph = k.Graph
	case model.AttrSparseTensor:
		a.Sparse = k.Sparse
	case model.AttrType:
		a.Type = k.Type
	case model.AttrFloats:
		a.Floats = k.Floats
	case model.AttrInts:
		a.Ints = k.Ints
	case model.AttrStrings:
		a.Strings = k.Strings
	case model.AttrTensors:
		a.Tensors = k.Tensors
	case model.AttrGraphs:
		a.Graphs = k.Graphs
	case model.AttrTypes:
		a.Types = k.Types
	}
}

// appendFloats appends the values of a repeated float field, packed or not.
func (d *decoder) appendFloats(dst []float32, f *field, name string) ([]float32, error) {
	switch f.typ {
	case protowire.Fixed32Type:
		return append(dst, math.Float32frombits(uint32(f.v))), nil
	case protowire.BytesType:
		b := d.data[f.lo:f.hi]
		if len(b)%4 != 0 {
			return dst, &DecodeError{Path: d.path, Field: name, Offset: f.off,
				Err: fmt.Errorf("packed floats of %d bytes, not a multiple of 4", len(b))}
		}
		if dst == nil {
			dst = make([]float32, 0, len(b)/4)
		}
		for ; len(b) >= 4; b = b[4:] {
			dst = append(dst, math.Float32frombits(binary.LittleEndian.Uint32(b)))
		}
		return dst, nil
	}
	return dst, d.wrongType(f, name, protowire.Fixed32Type)
}

// FunctionProto
func (d *decoder) function(lo, hi int) (*model.Function, error) {
	fn := &model.Function{Opsets: map[string]int64{}}
	var nNode, nOpset, nAttrProto, nVI int
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return nil, err
		}
		if !ok {
			return fn, nil
		}
		var s string
		switch f.num {
		case 1:
			fn.Name, err = d.str(&f, "name")
		case 4:
			s, err = d.str(&f, indexed("input", len(fn.Inputs)))
			fn.Inputs = append(fn.Inputs, s)
		case 5:
			s, err = d.str(&f, indexed("output", len(fn.Outputs)))
			fn.Outputs = append(fn.Outputs, s)
		case 6:
			s, err = d.str(&f, indexed("attribute", len(fn.Attributes)))
			fn.Attributes = append(fn.Attributes, s)
		case 11:
			i := nAttrProto
			nAttrProto++
			if err = d.msg(&f, ""); err == nil {
				var a *model.Attr
				a, err = d.attr(f.lo, f.hi, 0)
				fn.AttrProtos = append(fn.AttrProtos, a)
			}
			err = withinAt(err, "attribute_proto", i)
		case 7:
			i := nNode
			nNode++
			if err = d.msg(&f, ""); err == nil {
				var n *model.Node
				n, err = d.node(f.lo, f.hi, 0)
				fn.Nodes = append(fn.Nodes, n)
			}
			err = withinAt(err, "node", i)
		case 8:
			err = d.skipBytes(&f, "doc_string")
		case 9:
			name := indexed("opset_import", nOpset)
			nOpset++
			if err = d.msg(&f, name); err == nil {
				err = within(d.opset(f.lo, f.hi, fn.Opsets), name)
			}
		case 10:
			fn.Domain, err = d.str(&f, "domain")
		case 12:
			// model.Function has no place for value_info: checked and dropped.
			i := nVI
			nVI++
			if err = d.msg(&f, ""); err == nil {
				_, err = d.valueInfo(f.lo, f.hi)
			}
			err = withinAt(err, "value_info", i)
		}
		if err != nil {
			return nil, err
		}
	}
}
