package model

// Model is one decoded model file.
type Model struct {
	Format          string // "onnx" or "tflite"
	IRVersion       int64
	Opsets          map[string]int64 // operator set version per domain; "" is the default ONNX domain
	ProducerName    string
	ProducerVersion string
	Domain          string
	ModelVersion    int64
	DocString       string
	Metadata        map[string]string
	Graph           *Graph
	Functions       []*Function // model-local functions
	// DimDefaults are the sizes the file itself gives its symbolic dims
	// (TFLite: the stored shape behind a shape_signature's -1); a size
	// bound with --dim takes precedence. Nil for ONNX, whose symbols have
	// no size until bound.
	DimDefaults map[string]int64
}

// Opset returns the operator set version the model imports for domain, with
// "ai.onnx" and "" treated as one domain. It returns 0 when none is imported.
func (m *Model) Opset(domain string) int64 {
	if domain == "ai.onnx" {
		domain = ""
	}
	if v, ok := m.Opsets[domain]; ok {
		return v
	}
	if domain == "" {
		return m.Opsets["ai.onnx"]
	}
	return 0
}

// FindFunction returns the model-local function with this domain and name.
func (m *Model) FindFunction(domain, name string) *Function {
	for _, f := range m.Functions {
		if f.Domain == domain && f.Name == name {
			return f
		}
	}
	return nil
}

// Graph is a computation graph: the main one, or a subgraph held by an
// attribute of a control-flow node.
type Graph struct {
	Name         string
	Nodes        []*Node
	Inputs       []*ValueInfo
	Outputs      []*ValueInfo
	ValueInfo    []*ValueInfo // declared types of intermediate values
	Initializers []*Tensor
	Sparse       []*SparseTensor // sparse initializers

	// The fields below are filled by formats that describe how a runtime
	// holds the graph's tensors (TFLite); they are empty for ONNX.

	// TensorOrder lists every tensor of the graph in the file's tensor
	// table order, which a runtime's memory planner follows.
	TensorOrder []string
	// State are the tensors that keep their values from one invocation to
	// the next (TFLite variable tensors), with their types: neither
	// weights nor activations.
	State []*ValueInfo
	// PlannedOffsets are the arena offsets of the tensors an offline
	// memory plan places (TFLite OfflineMemoryAllocation metadata), by
	// tensor name.
	PlannedOffsets map[string]int64
}

// Initializer returns the initializer named name, or nil.
func (g *Graph) Initializer(name string) *Tensor {
	for _, t := range g.Initializers {
		if t.Name == name {
			return t
		}
	}
	return nil
}

// ValueInfo is a named value with its declared type.
type ValueInfo struct {
	Name string
	Type Type
}

// Node is one operator application.
type Node struct {
	Name    string
	Op      string
	Domain  string   // "" for the default ONNX domain
	Inputs  []string // "" marks an omitted optional input
	Outputs []string
	Attrs   []*Attr
}

// Attr returns the attribute named name, or nil.
func (n *Node) Attr(name string) *Attr {
	for _, a := range n.Attrs {
		if a.Name == name {
			return a
		}
	}
	return nil
}

// Input returns the i-th input name, or "" when the node has fewer inputs.
func (n *Node) Input(i int) string {
	if i < len(n.Inputs) {
		return n.Inputs[i]
	}
	return ""
}

// AttrKind says which field of an Attr holds its value.
type AttrKind uint8

// Attribute kinds, as in the ONNX standard.
const (
	AttrUndefined AttrKind = iota
	AttrFloat
	AttrInt
	AttrString
	AttrTensor
	AttrGraph
	AttrFloats
	AttrInts
	AttrStrings
	AttrTensors
	AttrGraphs
	AttrSparseTensor
	AttrSparseTensors
	AttrType
	AttrTypes
)

var attrKindNames = [...]string{"undefined", "float", "int", "string", "tensor", "graph", "floats", "ints", "strings", "tensors", "graphs", "sparse_tensor", "sparse_tensors", "type", "types"}

func (k AttrKind) String() string {
	if int(k) < len(attrKindNames) {
		return attrKindNames[k]
	}
	return "attr_kind?"
}

// Attr is one node attribute. Only the field its Kind names is meaningful.
type Attr struct {
	Name    string
	Kind    AttrKind
	RefName string // a function body's reference to the caller's attribute
	Float   float32
	Int     int64
	String  string
	Tensor  *Tensor
	Graph   *Graph
	Sparse  *SparseTensor
	Type    *Type
	Floats  []float32
	Ints    []int64
	Strings []string
	Tensors []*Tensor
	Graphs  []*Graph
	Types   []Type
}

// Function is a model-local function: a named, reusable subgraph.
type Function struct {
	Name       string
	Domain     string
	Inputs     []string
	Outputs    []string
	Attributes []string // attribute names the body may reference
	AttrProtos []*Attr  // attributes with default values
	Nodes      []*Node
	Opsets     map[string]int64
}

// SparseTensor is a constant stored as values at indices.
type SparseTensor struct {
	Values  *Tensor
	Indices *Tensor
	Dims    []int64
}
