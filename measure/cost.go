package measure

import (
	"fmt"
	"math"
	"strings"

	"github.com/loadline/loadline/model"
)

// Cost counting. Definitions (README "Conventions", `loadline --help`):
//
// macs are the multiply-accumulates of Conv, ConvTranspose, Gemm, MatMul,
// Einsum, their quantized forms (QLinearConv, ConvInteger, QLinearMatMul,
// MatMulInteger) and the recurrent layers:
//
//	Conv           output elements × (C_in / group) × kernel area
//	               (grouped, depthwise and dilated alike: dilation spreads
//	               the kernel, it does not add taps)
//	ConvTranspose  input elements × (C_out / group) × kernel area
//	Gemm, MatMul   output elements × K (batched and broadcast MatMul alike;
//	               Gemm's K follows transA)
//	Einsum         the product of the sizes of every distinct subscript of
//	               the equation (and of the dims under "...")
//	RNN, GRU, LSTM gates × (input + hidden) × hidden × steps × batch ×
//	               directions, with 1, 3 and 4 gates
//
// flops are 2 × macs plus, for the other operators, the one rule of
// flopRules below: one per output element for elementwise, activation,
// normalisation and quantization operators; one per window element per
// output element for pooling (a global pool's window is the whole map, so
// one per input element); one per input element for reductions. Data
// movement (Reshape, Transpose, Concat, Gather, Pad, …) is 0 by
// definition. A 1-GMAC model is a 2-GFLOP model.
//
// Subgraphs: If counts the branch it runs when its condition is known
// statically (from constants or a --value binding), else its most
// expensive branch (by MACs, then FLOPs);
// Loop counts its body × the trip count M when M is known statically,
// Scan its body × the scan length (× the batch before opset 9),
// SequenceMap its body × the sequence length. When the count is not known
// the body is counted once and the node is listed as unresolved ("trip
// count unknown"). A body is costed with the shapes inference gave its
// first iteration.
//
// A node whose figures need a shape that is not fully known (unknown rank,
// or symbolic dims nobody bound with --dim) is not counted as zero: it is
// listed in Costs.Unresolved with the shape that stopped it, and left out
// of the totals, which then are lower bounds. So are operators of other
// domains, whose arithmetic is not known. A call of a model-local function
// costs what its body costs. The few standard operators no convention covers (uncostedOps:
// DFT, NonMaxSuppression, …) contribute 0 FLOPs, listed there with the
// reason; they do not make the MACs unknown.

// NodeCost is the cost of one node of the main graph; a control-flow node
// carries the cost of the subgraphs it runs.
type NodeCost struct {
	Node  string `json:"node"`
	Op    string `json:"op"`
	MACs  int64  `json:"macs"`
	FLOPs int64  `json:"flops"`
	// Known reports that the figures are complete. When false, MACs and
	// FLOPs hold what could be counted (0 for a node whose shapes are
	// unknown) and Costs.Unresolved says why.
	Known bool `json:"known"`
}

// OpCost sums the nodes of one operator type, subgraph nodes included
// (weighted by their trip counts).
type OpCost struct {
	Nodes int   `json:"nodes"`
	MACs  int64 `json:"macs"`
	FLOPs int64 `json:"flops"`
}

// Costs are the MACs and FLOPs of a model: total, per operator type and
// per node of the main graph, with the nodes whose cost is not (fully)
// known.
type Costs struct {
	MACs       int64             `json:"macs"`
	FLOPs      int64             `json:"flops"`
	ByOp       map[string]OpCost `json:"by_op"`
	Nodes      []NodeCost        `json:"nodes"`
	Unresolved []Unresolved      `json:"unresolved"`
}

// flopKind says how an operator's FLOPs follow from its shapes.
type flopKind uint8

const (
	flopsZero      flopKind = iota // data movement, shape and index work, sampling: 0 by definition
	flopsMACs                      // 2 × the MACs that macs counts
	flopsPerOutput                 // one per element of output 0
	flopsPerWindow                 // one per window element per element of output 0
	flopsPerInput                  // one per element of input 0
	flopsSubgraph                  // the cost of the node's subgraphs
)

// flopRule is one row of the cost table.
type flopRule struct {
	kind flopKind
	macs func(c *costCtx) (int64, error) // for flopsMACs
}

var (
	zeroFlops = flopRule{kind: flopsZero}
	perOutput = flopRule{kind: flopsPerOutput}
	perInput  = flopRule{kind: flopsPerInput}
	perWindow = flopRule{kind: flopsPerWindow}
	subgraph  = flopRule{kind: flopsSubgraph}
)

func macRule(f func(c *costCtx) (int64, error)) flopRule {
	return flopRule{kind: flopsMACs, macs: f}
}

// flopRules is the cost table: every operator of the default domain that
// shape inference knows, except those of uncostedOps, has one row.
var flopRules = map[string]flopRule{
	// MACs.
	"Conv": macRule(convMACs(0, 1)), "ConvInteger": macRule(convMACs(0, 1)), "QLinearConv": macRule(convMACs(0, 3)),
	"DeformConv":    macRule(convMACs(0, 1)), // the kernel taps of Conv; the bilinear sampling of offsets is not counted
	"ConvTranspose": macRule(convTransposeMACs),
	"Gemm":          macRule(gemmMACs),
	"MatMul":        macRule(matmulMACs(0)), "MatMulInteger": macRule(matmulMACs(0)), "QLinearMatMul": macRule(matmulMACs(0)),
	"Einsum": macRule(einsumMACs),
	"RNN":    macRule(rnnMACs(1)), "GRU": macRule(rnnMACs(3)), "LSTM": macRule(rnnMACs(4)),

	// Elementwise arithmetic, comparison and logic: one per output element.
	"Add": perOutput, "Sub": perOutput, "Mul": perOutput, "Div": perOutput, "Pow": perOutput, "Mod": perOutput,
	"Sum": perOutput, "Mean": perOutput, "Max": perOutput, "Min": perOutput, "Neg": perOutput, "Abs": perOutput,
	"Reciprocal": perOutput, "Sqrt": perOutput, "Exp": perOutput, "Log": perOutput, "Erf": perOutput,
	"Sin": perOutput, "Cos": perOutput, "Tan": perOutput, "Asin": perOutput, "Acos": perOutput, "Atan": perOutput,
	"Sinh": perOutput, "Cosh": perOutput, "Asinh": perOutput, "Acosh": perOutput, "Atanh": perOutput,
	"Ceil": perOutput, "Floor": perOutput, "Round": perOutput, "Sign": perOutput, "IsInf": perOutput, "IsNaN": perOutput,
	"Equal": perOutput, "Greater": perOutput, "GreaterOrEqual": perOutput, "Less": perOutput, "LessOrEqual": perOutput,
	"And": perOutput, "Or": perOutput, "Xor": perOutput, "Not": perOutput, "Where": perOutput,
	"BitShift": perOutput, "BitwiseAnd": perOutput, "BitwiseOr": perOutput, "BitwiseXor": perOutput, "BitwiseNot": perOutput,
	// Activations: one per output element.
	"Relu": perOutput, "LeakyRelu": perOutput, "PRelu": perOutput, "Elu": perOutput, "Selu": perOutput, "Celu": perOutput,
	"Sigmoid": perOutput, "HardSigmoid": perOutput, "HardSwish": perOutput, "Tanh": perOutput, "Softplus": perOutput,
	"Softsign": perOutput, "ThresholdedRelu": perOutput, "Shrink": perOutput, "Gelu": perOutput, "Mish": perOutput,
	"Clip": perOutput, "Softmax": perOutput, "LogSoftmax": perOutput, "Hardmax": perOutput,
	// Normalisation: one per output element.
	"BatchNormalization": perOutput, "InstanceNormalization": perOutput, "LayerNormalization": perOutput,
	"GroupNormalization": perOutput, "LRN": perOutput, "LpNormalization": perOutput, "MeanVarianceNormalization": perOutput,
	// Quantization (scale, round, saturate): one per output element.
	"QuantizeLinear": perOutput, "DequantizeLinear": perOutput, "DynamicQuantizeLinear": perOutput,
	// Resampling and generated tensors, each output element computed once.
	"Resize": perOutput, "Upsample": perOutput, "GridSample": perOutput, "AffineGrid": perOutput,
	"HannWindow": perOutput, "HammingWindow": perOutput, "BlackmanWindow": perOutput, "MelWeightMatrix": perOutput,

	// Pooling: one per window element per output element.
	"MaxPool": perWindow, "AveragePool": perWindow, "LpPool": perWindow,
	"GlobalAveragePool": perWindow, "GlobalMaxPool": perWindow, "GlobalLpPool": perWindow,

	// Reductions: one per input element.
	"ReduceSum": perInput, "ReduceMean": perInput, "ReduceMax": perInput, "ReduceMin": perInput, "ReduceProd": perInput,
	"ReduceL1": perInput, "ReduceL2": perInput, "ReduceLogSum": perInput, "ReduceLogSumExp": perInput,
	"ReduceSumSquare": perInput, "ArgMax": perInput, "ArgMin": perInput, "TopK": perInput, "CumSum": perInput,
	"Col2Im":                  perInput, // every patch element is added into the image once
	"SoftmaxCrossEntropyLoss": perInput, "NegativeLogLikelihoodLoss": perInput,

	// Data movement, shapes, indices, type conversion, fills and sampling:
	// 0 FLOPs by definition.
	"Reshape": zeroFlops, "Flatten": zeroFlops, "Squeeze": zeroFlops, "Unsqueeze": zeroFlops, "Transpose": zeroFlops,
	"Concat": zeroFlops, "Split": zeroFlops, "Slice": zeroFlops, "Gather": zeroFlops, "GatherElements": zeroFlops,
	"GatherND": zeroFlops, "Scatter": zeroFlops, "ScatterElements": zeroFlops, "ScatterND": zeroFlops,
	"Pad": zeroFlops, "Tile": zeroFlops, "Expand": zeroFlops, "DepthToSpace": zeroFlops, "SpaceToDepth": zeroFlops,
	"Compress": zeroFlops, "ReverseSequence": zeroFlops, "Trilu": zeroFlops, "CenterCropPad": zeroFlops,
	"MaxUnpool": zeroFlops, "NonZero": zeroFlops, "Unique": zeroFlops, "Identity": zeroFlops, "Dropout": zeroFlops,
	"Cast": zeroFlops, "CastLike": zeroFlops, "Shape": zeroFlops, "Size": zeroFlops, "Constant": zeroFlops,
	"ConstantOfShape": zeroFlops, "EyeLike": zeroFlops, "Range": zeroFlops, "OneHot": zeroFlops,
	"RandomNormal": zeroFlops, "RandomUniform": zeroFlops, "RandomNormalLike": zeroFlops, "RandomUniformLike": zeroFlops,
	"Bernoulli": zeroFlops, "Multinomial": zeroFlops,
	"SequenceEmpty": zeroFlops, "SequenceConstruct": zeroFlops, "SequenceInsert": zeroFlops, "SequenceErase": zeroFlops,
	"SequenceAt": zeroFlops, "SequenceLength": zeroFlops, "SplitToSequence": zeroFlops, "ConcatFromSequence": zeroFlops,
	"Optional": zeroFlops, "OptionalHasElement": zeroFlops, "OptionalGetElement": zeroFlops,

	// Control flow: the cost of the subgraphs.
	"If": subgraph, "Loop": subgraph, "Scan": subgraph, "SequenceMap": subgraph,
}

// uncostedOps are the operators shape inference knows that have no row in
// flopRules, with the reason: no accepted convention counts their
// arithmetic, so they contribute 0 MACs and 0 FLOPs. Operators of other
// domains, whose arithmetic is not known, are listed as unresolved
// instead.
var uncostedOps = map[string]string{
	"DFT":                               "a Fourier transform's cost depends on the algorithm (FFT or not)",
	"STFT":                              "a Fourier transform's cost depends on the algorithm (FFT or not)",
	"Det":                               "a determinant's cost depends on the factorisation",
	"NonMaxSuppression":                 "its comparisons depend on the boxes, known only at run time",
	"RoiAlign":                          "its sampling depends on the regions, known only at run time",
	"MaxRoiPool":                        "its windows depend on the regions, known only at run time",
	"TfIdfVectorizer":                   "n-gram matching is not arithmetic on tensors",
	"StringNormalizer":                  "string processing is not arithmetic on tensors",
	"ai.onnx.preview.training:Adagrad":  "a training operator; loadline counts inference",
	"ai.onnx.preview.training:Adam":     "a training operator; loadline counts inference",
	"ai.onnx.preview.training:Momentum": "a training operator; loadline counts inference",
	"ai.onnx.preview.training:Gradient": "a training operator; loadline counts inference",
}

// costCtx is what a MAC rule sees: the node and what inference knows of
// its inputs and outputs.
type costCtx struct {
	node *model.Node
	ins  []*Value
	outs []*Value
	// room holds ins and outs for a node of a few of them, so that the
	// context is one allocation.
	room [6]*Value
}

// newCostCtx is the context of node n, its values not yet looked up.
func newCostCtx(n *model.Node) *costCtx {
	c := &costCtx{}
	c.reset(n)
	return c
}

// reset makes c the context of node n, its values not yet looked up.
func (c *costCtx) reset(n *model.Node) {
	*c = costCtx{node: n}
	vs := c.room[:0]
	if k := len(n.Inputs) + len(n.Outputs); k > len(c.room) {
		vs = make([]*Value, 0, k)
	}
	vs = vs[:len(n.Inputs)+len(n.Outputs)]
	c.ins, c.outs = vs[:len(n.Inputs):len(n.Inputs)], vs[len(n.Inputs):]
}

// lookUp sets each of c's inputs and outputs to find's value for its
// name; an omitted one ("") stays nil.
func (c *costCtx) lookUp(find func(string) *Value) {
	for j, name := range c.node.Inputs {
		if name != "" {
			c.ins[j] = find(name)
		}
	}
	for j, name := range c.node.Outputs {
		if name != "" {
			c.outs[j] = find(name)
		}
	}
}

func (c *costCtx) attrInt(name string, def int64) int64 {
	if a := c.node.Attr(name); a != nil {
		return a.Int
	}
	return def
}

func (c *costCtx) attrString(name, def string) string {
	if a := c.node.Attr(name); a != nil {
		return a.String
	}
	return def
}

// knownDims returns the fully known shape of v, or an error that shows the
// shape ("output shape [batch,64,?,?] has symbolic dims").
func knownDims(v *Value, what string) ([]int64, error) {
	switch {
	case v == nil || v.Absent:
		return nil, fmt.Errorf("%s is missing", what)
	case v.Type.Kind != model.KindTensor || !v.Type.RankKnown:
		return nil, fmt.Errorf("%s shape is not known", what)
	}
	d, ok := v.Type.Shape.Ints()
	if !ok {
		return nil, fmt.Errorf("%s shape %s has symbolic dims", what, v.Type.Shape)
	}
	for _, x := range d {
		if x < 0 {
			return nil, fmt.Errorf("%s shape %s has a negative dim", what, v.Type.Shape)
		}
	}
	return d, nil
}

// product multiplies sizes, failing on int64 overflow.
func product(dims ...int64) (int64, error) {
	n := int64(1)
	for _, d := range dims {
		var ok bool
		if n, ok = checkedMul(n, d); !ok {
			return 0, fmt.Errorf("the count overflows int64")
		}
	}
	return n, nil
}

func (c *costCtx) in(i int) *Value {
	if i < len(c.ins) {
		return c.ins[i]
	}
	return nil
}

func (c *costCtx) out(i int) *Value {
	if i < len(c.outs) {
		return c.outs[i]
	}
	return nil
}

func (c *costCtx) inDims(i int) ([]int64, error) {
	return knownDims(c.in(i), fmt.Sprintf("input %d", i))
}

func (c *costCtx) outElems(i int) (int64, error) {
	if n, ok := costElems(c.out(i)); ok {
		return n, nil
	}
	d, err := knownDims(c.out(i), "output")
	if err != nil {
		return 0, err
	}
	return product(d...)
}

func (c *costCtx) inElems(i int) (int64, error) {
	if n, ok := costElems(c.in(i)); ok {
		return n, nil
	}
	d, err := c.inDims(i)
	if err != nil {
		return 0, err
	}
	return product(d...)
}

// costElems is product(knownDims(v)) when both succeed, found without
// building the list of dims (one per node costed, on a large graph); the
// callers take the long way for the error otherwise.
func costElems(v *Value) (int64, bool) {
	if v == nil || v.Absent || v.Type.Kind != model.KindTensor || !v.Type.RankKnown {
		return 0, false
	}
	n := int64(1)
	for _, d := range v.Type.Shape {
		var ok bool
		if !d.IsKnown() || d.Value < 0 {
			return 0, false
		}
		if n, ok = checkedMul(n, d.Value); !ok {
			return 0, false
		}
	}
	return n, true
}

// The MAC formulas. Each is defined once, here, on layout-neutral
// arguments; the cost rows of every format (ONNX's below, TFLite's in
// tflite_ops.go) read the arguments out of their own layouts and call
// these, so that a convolution costs the same whatever file it comes from.

// convMACsOf: output elements × (C_in / group) × kernel area.
func convMACsOf(outElems, inPerGroup, kernelArea int64) (int64, error) {
	return product(outElems, inPerGroup, kernelArea)
}

// convTransposeMACsOf: input elements × (C_out / group) × kernel area:
// every input element is spread over a kernel of every output channel of
// its group.
func convTransposeMACsOf(inElems, outPerGroup, kernelArea int64) (int64, error) {
	return product(inElems, outPerGroup, kernelArea)
}

// matmulMACsOf: output elements × K, the length of the reduced dim.
func matmulMACsOf(outElems, k int64) (int64, error) {
	return product(outElems, k)
}

// recurrentMACsOf: gates × (input + hidden) × hidden × steps × batch ×
// directions: each step multiplies [x, h] by the gates' stacked input and
// recurrent weights.
func recurrentMACsOf(gates, input, hidden, steps, batch, dirs int64) (int64, error) {
	width, ok := addChecked(input, hidden)
	if !ok {
		return 0, fmt.Errorf("input + hidden overflows int64")
	}
	return product(gates, width, hidden, steps, batch, dirs)
}

// convMACs: convMACsOf with W [M, C_in/group, k1, ..., kn] at input wi.
func convMACs(xi, wi int) func(c *costCtx) (int64, error) {
	return func(c *costCtx) (int64, error) {
		out, err := c.outElems(0)
		if err != nil {
			return 0, err
		}
		ws, err := c.inDims(wi)
		if err != nil {
			return 0, err
		}
		if len(ws) < 2 {
			return 0, fmt.Errorf("weights have rank %d", len(ws))
		}
		area, err := product(ws[2:]...)
		if err != nil {
			return 0, err
		}
		return convMACsOf(out, ws[1], area)
	}
}

// convTransposeMACs: convTransposeMACsOf with W [C_in, C_out/group, k1,
// ..., kn]. Output padding and output_shape only add untouched output
// elements.
func convTransposeMACs(c *costCtx) (int64, error) {
	in, err := c.inElems(0)
	if err != nil {
		return 0, err
	}
	ws, err := c.inDims(1)
	if err != nil {
		return 0, err
	}
	if len(ws) < 2 {
		return 0, fmt.Errorf("weights have rank %d", len(ws))
	}
	area, err := product(ws[2:]...)
	if err != nil {
		return 0, err
	}
	return convTransposeMACsOf(in, ws[1], area)
}

// gemmMACs: output elements × K, K being A's dim 1 (dim 0 with transA).
func gemmMACs(c *costCtx) (int64, error) {
	out, err := c.outElems(0)
	if err != nil {
		return 0, err
	}
	as, err := c.inDims(0)
	if err != nil {
		return 0, err
	}
	if len(as) != 2 {
		return 0, fmt.Errorf("A has rank %d", len(as))
	}
	k := as[1]
	if c.attrInt("transA", 0) != 0 {
		k = as[0]
	}
	return matmulMACsOf(out, k)
}

// matmulMACs: output elements × K, K being the last dim of A (input ai);
// batch dims broadcast into the output, so they are in its elements.
func matmulMACs(ai int) func(c *costCtx) (int64, error) {
	return func(c *costCtx) (int64, error) {
		out, err := c.outElems(0)
		if err != nil {
			return 0, err
		}
		as, err := c.inDims(ai)
		if err != nil {
			return 0, err
		}
		if len(as) == 0 {
			return 0, fmt.Errorf("A is a scalar")
		}
		return matmulMACsOf(out, as[len(as)-1])
	}
}

// einsumMACs: the product of the sizes of all distinct subscripts (a
// letter of size 1 in one operand broadcasts to its size elsewhere) and of
// the broadcast dims under "...": one multiply-accumulate per point of the
// iteration space.
func einsumMACs(c *costCtx) (int64, error) {
	eq := strings.ReplaceAll(c.attrString("equation", ""), " ", "")
	lhs, _, _ := strings.Cut(eq, "->")
	parts := strings.Split(lhs, ",")
	if eq == "" || len(parts) != len(c.ins) {
		return 0, fmt.Errorf("equation %q does not fit the %d inputs", eq, len(c.ins))
	}
	sizes := map[byte]int64{}
	var ell []model.Shape
	for i, p := range parts {
		t, err := parseEinsumTerm(p)
		if err != nil {
			return 0, err
		}
		s, err := c.inDims(i)
		if err != nil {
			return 0, err
		}
		ellRank := len(s) - len(t.labels)
		if ellRank < 0 || (t.ell < 0 && ellRank != 0) {
			return 0, fmt.Errorf("operand %d has rank %d for subscripts %q", i, len(s), p)
		}
		pos := 0
		for j, l := range t.labels {
			if j == t.ell {
				ell = append(ell, model.KnownShape(s[pos:pos+ellRank]...))
				pos += ellRank
			}
			if prev, seen := sizes[l]; !seen || prev == 1 {
				sizes[l] = s[pos]
			}
			pos++
		}
		if t.ell == len(t.labels) {
			ell = append(ell, model.KnownShape(s[pos:pos+ellRank]...))
		}
	}
	var dims []int64
	for _, d := range sizes {
		dims = append(dims, d)
	}
	eb, err := broadcast(ell...)
	if err != nil {
		return 0, err
	}
	for _, d := range eb {
		dims = append(dims, d.Value)
	}
	return product(dims...)
}

// rnnMACs: recurrentMACsOf with X [steps, batch, input] ([batch, steps,
// input] with layout 1) and hidden_size (or R's or W's dims).
func rnnMACs(gates int64) func(c *costCtx) (int64, error) {
	return func(c *costCtx) (int64, error) {
		xs, err := c.inDims(0)
		if err != nil {
			return 0, err
		}
		if len(xs) != 3 {
			return 0, fmt.Errorf("X has rank %d", len(xs))
		}
		steps, batch, input := xs[0], xs[1], xs[2]
		if c.attrInt("layout", 0) == 1 {
			steps, batch = xs[1], xs[0]
		}
		dirs := int64(1)
		if c.attrString("direction", "forward") == "bidirectional" {
			dirs = 2
		}
		hidden := c.attrInt("hidden_size", 0)
		if hidden <= 0 {
			if rs, err := c.inDims(2); err == nil && len(rs) == 3 {
				hidden = rs[2]
			} else if ws, err := c.inDims(1); err == nil && len(ws) == 3 {
				hidden = ws[1] / gates
			} else {
				return 0, fmt.Errorf("hidden size is not known: %v", err)
			}
		}
		return recurrentMACsOf(gates, input, hidden, steps, batch, dirs)
	}
}

// windowArea is a pool's window size: kernel_shape, or for a global pool
// the spatial area of input 0.
func windowArea(c *costCtx) (int64, error) {
	if c.node.Domain == "tflite" {
		// TFLite's Pool2DOptions.
		return product(c.attrInt("filter_height", 0), c.attrInt("filter_width", 0))
	}
	if strings.HasPrefix(c.node.Op, "Global") {
		xs, err := c.inDims(0)
		if err != nil {
			return 0, err
		}
		if len(xs) < 2 {
			return 0, fmt.Errorf("input has rank %d", len(xs))
		}
		return product(xs[2:]...)
	}
	a := c.node.Attr("kernel_shape")
	if a == nil || len(a.Ints) == 0 {
		return 0, fmt.Errorf("no kernel_shape")
	}
	for _, k := range a.Ints {
		if k < 0 {
			return 0, fmt.Errorf("kernel_shape %v is negative", a.Ints)
		}
	}
	return product(a.Ints...)
}

// tally is the cost of a node or a graph, broken down by operator type.
type tally struct {
	macs, flops int64
	known       bool
	// op is the operator of a tally of one node, whose own figures are
	// macs and flops; byOp holds the figures by operator of a tally of
	// several, made when a second is added (most tallies are of one node,
	// and a map each would cost more than the node).
	op       string
	byOp     map[string]OpCost
	overflow bool
}

func newTally() *tally { return &tally{known: true} }

func addChecked(a, b int64) (int64, bool) {
	s := a + b
	if (b > 0 && s < a) || (b < 0 && s > a) {
		return 0, false
	}
	return s, true
}

// eachOp calls fn with t's figures of each operator.
func (t *tally) eachOp(fn func(op string, c OpCost)) {
	if t.op != "" {
		fn(t.op, OpCost{Nodes: 1, MACs: t.macs, FLOPs: t.flops})
		return
	}
	for op, c := range t.byOp {
		fn(op, c)
	}
}

// byOperator is t's figures by operator, a map of its own.
func (t *tally) byOperator() map[string]OpCost {
	out := make(map[string]OpCost, max(1, len(t.byOp)))
	t.eachOp(func(op string, c OpCost) { out[op] = c })
	return out
}

// add adds u into t.
func (t *tally) add(u *tally) {
	var ok1, ok2 bool
	if t.op != "" {
		t.byOp, t.op = t.byOperator(), ""
	}
	if t.byOp == nil {
		t.byOp = map[string]OpCost{}
	}
	t.macs, ok1 = addChecked(t.macs, u.macs)
	t.flops, ok2 = addChecked(t.flops, u.flops)
	t.overflow = t.overflow || u.overflow || !ok1 || !ok2
	t.known = t.known && u.known
	u.eachOp(func(op string, c OpCost) {
		s := t.byOp[op]
		s.Nodes += c.Nodes
		s.MACs, ok1 = addChecked(s.MACs, c.MACs)
		s.FLOPs, ok2 = addChecked(s.FLOPs, c.FLOPs)
		t.overflow = t.overflow || !ok1 || !ok2
		t.byOp[op] = s
	})
}

// clone returns a copy of t that can be changed without changing t.
func (t *tally) clone() *tally {
	out := *t
	if t.byOp != nil {
		out.byOp = t.byOperator()
	}
	return &out
}

// times returns t repeated n times (node counts stay: they count nodes,
// not executions).
func (t *tally) times(n int64) *tally {
	out := &tally{known: t.known, byOp: map[string]OpCost{}, overflow: t.overflow}
	var ok1, ok2 bool
	out.macs, ok1 = checkedMul(t.macs, n)
	out.flops, ok2 = checkedMul(t.flops, n)
	out.overflow = out.overflow || !ok1 || !ok2
	t.eachOp(func(op string, c OpCost) {
		c.MACs, ok1 = checkedMul(c.MACs, n)
		c.FLOPs, ok2 = checkedMul(c.FLOPs, n)
		out.overflow = out.overflow || !ok1 || !ok2
		out.byOp[op] = c
	})
	return out
}

// scopes looks a value up in a subgraph's values, then its enclosing ones.
type scopes []*Values

func (s scopes) lookup(name string) *Value {
	for i := len(s) - 1; i >= 0; i-- {
		if v, ok := s[i].lookup(name); ok {
			return v
		}
	}
	return nil
}

type coster struct {
	inf        *Inference
	opset      int64
	unresolved []Unresolved
	depth      int
	// bodies holds the cost of each function body already counted: calls
	// with one signature share one body (Inference.Calls), and counting it
	// once per call would multiply the work as nested calls do.
	bodies map[*CallBody]*tally
	// ctxs holds a node context per nesting depth, reused from node to
	// node: a node's context is done with before the next node at its
	// depth, and the nodes of its bodies are one depth deeper.
	ctxs []*costCtx
	// tallies holds node's tally per nesting depth, likewise (scratch).
	tallies []*tally
}

// ctx is the context of node n at the coster's depth.
func (k *coster) ctx(n *model.Node) *costCtx {
	for len(k.ctxs) <= k.depth {
		k.ctxs = append(k.ctxs, &costCtx{})
	}
	c := k.ctxs[k.depth]
	c.reset(n)
	return c
}

// CountCosts counts the MACs and FLOPs of every node of an inferred model
// (see the definitions at the top of this file).
func CountCosts(inf *Inference) *Costs { return countCosts(inf, true) }

// countCosts is CountCosts, listing each node's figures in Costs.Nodes
// only when perNode is set (the per-layer view reads them; on a large
// graph the list is megabytes the totals do not need).
func countCosts(inf *Inference, perNode bool) *Costs {
	k := &coster{inf: inf, opset: inf.Model.Opset(""), bodies: map[*CallBody]*tally{}}
	if k.opset == 0 {
		k.opset = 21
	}
	out := &Costs{ByOp: map[string]OpCost{}, Nodes: []NodeCost{}}
	if perNode {
		out.Nodes = make([]NodeCost, 0, len(inf.Model.Graph.Nodes))
	}
	total := newTally()
	sc := scopes{inf.Values}
	x := inf.index(inf.Model.Graph, inf.Values)
	for i, n := range inf.Model.Graph.Nodes {
		t := k.node(n, i, sc, x)
		total.add(t)
		if perNode {
			out.Nodes = append(out.Nodes, NodeCost{Node: nodeName(n, i), Op: n.Op, MACs: t.macs, FLOPs: t.flops, Known: t.known})
		}
	}
	if total.overflow {
		k.unresolved = append(k.unresolved, Unresolved{Node: inf.Model.Graph.Name, Op: "", Reason: "the model's MACs or FLOPs overflow int64; totals are not meaningful"})
	}
	out.MACs, out.FLOPs, out.ByOp = total.macs, total.flops, total.byOperator()
	out.Unresolved = k.unresolved
	if out.Unresolved == nil {
		out.Unresolved = []Unresolved{}
	}
	return out
}

// nodeName is a node's name, or Op#index when it has none (as inference
// names it in its unresolved list).
func nodeName(n *model.Node, i int) string {
	if n.Name != "" {
		return n.Name
	}
	return fmt.Sprintf("%s#%d", n.Op, i)
}

func (k *coster) fail(n *model.Node, i int, format string, args ...any) *tally {
	k.unresolved = append(k.unresolved, Unresolved{Node: nodeName(n, i), Op: n.Op, Reason: fmt.Sprintf(format, args...)})
	t := newTally()
	t.known = false
	return t
}

// scratch is the tally node fills for a node costed by its rule, one per
// nesting depth, reused: every caller adds node's tally into its own at
// once, and a tally allocated per node was 6 MB of a 100,000-node graph's
// costing. It is valid until the next node at the same depth.
func (k *coster) scratch() *tally {
	for len(k.tallies) <= k.depth {
		k.tallies = append(k.tallies, &tally{})
	}
	t := k.tallies[k.depth]
	*t = tally{known: true}
	return t
}

// node costs one node whose values are found in sc; the tally it returns
// is valid until the next node at the same depth (scratch).
func (k *coster) node(n *model.Node, i int, sc scopes, x *graphIndex) *tally {
	domain := n.Domain
	if domain == "ai.onnx" {
		domain = ""
	}
	if k.inf.Model.FindFunction(n.Domain, n.Op) != nil {
		return k.call(n, i)
	}
	key := n.Op
	if domain != "" {
		key = domain + ":" + n.Op
	}
	rule, ok := flopRules[key]
	if _, listed := uncostedOps[key]; listed && !ok {
		rule, ok = zeroFlops, true
	}
	if !ok {
		return k.fail(n, i, "MACs unknown: no cost rule for operator %s", key)
	}
	c := k.ctx(n)
	if x != nil {
		// The main graph's values by number: no look-up by name.
		for j, id := range x.ins(i) {
			c.ins[j] = x.value(id)
		}
		for j, id := range x.outs(i) {
			c.outs[j] = x.value(id)
		}
	} else {
		c.lookUp(sc.lookup)
	}
	t := k.scratch()
	var err error
	switch rule.kind {
	case flopsZero:
	case flopsMACs:
		t.macs, err = rule.macs(c)
		if err == nil {
			t.flops, err = product(2, t.macs)
		}
		if err != nil {
			return k.fail(n, i, "MACs unknown: %v", err)
		}
	case flopsPerOutput:
		if t.flops, err = c.outElems(0); err != nil {
			return k.fail(n, i, "FLOPs unknown: %v", err)
		}
	case flopsPerInput:
		if t.flops, err = c.inElems(0); err != nil {
			return k.fail(n, i, "FLOPs unknown: %v", err)
		}
	case flopsPerWindow:
		var out, area int64
		if out, err = c.outElems(0); err == nil {
			if area, err = windowArea(c); err == nil {
				t.flops, err = product(out, area)
			}
		}
		if err != nil {
			return k.fail(n, i, "FLOPs unknown: %v", err)
		}
	case flopsSubgraph:
		return k.control(n, i, c, sc)
	}
	if a := n.Attr("fused_activation_function"); a != nil && n.Domain == "tflite" && a.String != "NONE" && a.String != "" {
		// A fused activation: one per output element, as an activation
		// node would count.
		act, err := c.outElems(0)
		if err == nil {
			var ok bool
			if t.flops, ok = addChecked(t.flops, act); !ok {
				err = fmt.Errorf("the count overflows int64")
			}
		}
		if err != nil {
			return k.fail(n, i, "FLOPs unknown: fused activation: %v", err)
		}
	}
	t.op = n.Op
	return t
}

// graph costs the nodes of a subgraph, whose values inference recorded in
// Inference.Subgraphs.
func (k *coster) graph(g *model.Graph, outer scopes) (*tally, bool) {
	vals, ok := k.inf.Subgraphs[g]
	if !ok || k.depth >= maxGraphDepth {
		return nil, false
	}
	k.depth++
	defer func() { k.depth-- }()
	sc := append(outer[:len(outer):len(outer)], vals)
	t := newTally()
	for i, n := range g.Nodes {
		t.add(k.node(n, i, sc, nil))
	}
	return t, true
}

// call costs a call of a model-local function by the function's body, as
// inference instantiated it for this call.
func (k *coster) call(n *model.Node, i int) *tally {
	body := k.inf.Calls[n]
	if body == nil || k.depth >= maxGraphDepth {
		return k.fail(n, i, "MACs unknown: the body of function %s was not inferred for this call", n.Op)
	}
	if t, ok := k.bodies[body]; ok {
		return t.clone()
	}
	k.depth++
	defer func() { k.depth-- }()
	t := newTally()
	sc := scopes{body.Values}
	for j, bn := range body.Graph.Nodes {
		t.add(k.node(bn, j, sc, nil))
	}
	k.bodies[body] = t.clone()
	return t
}

// control costs If, Loop, Scan and SequenceMap by their subgraphs.
func (k *coster) control(n *model.Node, i int, c *costCtx, sc scopes) *tally {
	body := func(name string) (*tally, bool) {
		a := n.Attr(name)
		if a == nil || a.Graph == nil {
			return nil, false
		}
		return k.graph(a.Graph, sc)
	}
	var t *tally
	if n.Op == "CALL_ONCE" { // TFLite: its init subgraph runs once
		t, ok := body("init")
		if !ok {
			return k.fail(n, i, "MACs unknown: its init subgraph was not read")
		}
		return t
	}
	if n.Op == "If" || n.Op == "IF" {
		// A known condition runs one branch; inference inferred only it.
		if taken := takenBranch(n, c.in(0)); taken != "" {
			t, ok := body(taken)
			if !ok {
				return k.fail(n, i, "MACs unknown: its %s was not inferred", taken)
			}
			return t
		}
		th, ok1 := body("then_branch")
		el, ok2 := body("else_branch")
		if !ok1 || !ok2 {
			return k.fail(n, i, "MACs unknown: its branches were not inferred")
		}
		t = th
		if el.macs > th.macs || (el.macs == th.macs && el.flops > th.flops) {
			t = el
		}
		t.known = th.known && el.known
		return t
	}
	t, ok := body("body")
	if !ok {
		return k.fail(n, i, "MACs unknown: its body was not inferred")
	}
	if n.Op == "WHILE" { // TFLite: the condition subgraph runs once more than the body
		if cond, ok := body("cond"); ok {
			t.add(cond)
		}
	}
	trip, reason := k.tripCount(n, c)
	if trip < 0 {
		k.unresolved = append(k.unresolved, Unresolved{Node: nodeName(n, i), Op: n.Op, Reason: "trip count unknown (" + reason + "); the body is counted once"})
		t.known = false
		return t
	}
	t = t.times(trip)
	if t.overflow {
		return k.fail(n, i, "MACs unknown: body × trip count %d overflows int64", trip)
	}
	return t
}

// takenBranch is the attribute name of the branch an If node runs when its
// condition cond is known statically, else "".
func takenBranch(n *model.Node, cond *Value) string {
	if n.Op != "If" || cond == nil {
		return ""
	}
	x, ok := cond.Const().KnownInts()
	if !ok || len(x) != 1 {
		return ""
	}
	if x[0] != 0 {
		return "then_branch"
	}
	return "else_branch"
}

// tripCount is how many times a Loop, Scan or SequenceMap runs its body,
// or -1 with the reason when that is not known statically.
func (k *coster) tripCount(n *model.Node, c *costCtx) (int64, string) {
	switch n.Op {
	case "Loop":
		if cond := c.in(1); cond != nil {
			if v, ok := cond.Const().KnownInts(); ok && len(v) == 1 && v[0] == 0 {
				return 0, "" // the condition is false before the first iteration
			}
		}
		m := c.in(0)
		if m == nil {
			return -1, "M is not given; the loop ends on its condition"
		}
		v, ok := m.Const().KnownInts()
		if !ok || len(v) != 1 {
			return -1, "M is computed at run time"
		}
		switch {
		case v[0] < 0:
			return -1, fmt.Sprintf("M is %d", v[0])
		case v[0] >= math.MaxInt32 && c.in(1) != nil && !isConstTrue(c.in(1)):
			// A while loop as exporters write it (INT64_MAX, or INT32_MAX,
			// and a condition): M is a bound, not a count.
			return -1, fmt.Sprintf("M is %d, a bound; the loop ends on its condition", v[0])
		}
		return v[0], ""
	case "Scan":
		nScan := int(c.attrInt("num_scan_inputs", 0))
		ins := c.ins
		batched := k.opset < 9
		if batched && len(ins) > 0 {
			ins = ins[1:]
		}
		first := len(ins) - nScan
		if nScan <= 0 || first < 0 || first >= len(ins) {
			return -1, "num_scan_inputs does not fit the inputs"
		}
		s, err := knownDims(ins[first], "scan input")
		if err != nil {
			return -1, err.Error()
		}
		axis := int64(0)
		if batched {
			axis = 1
		} else if a := n.Attr("scan_input_axes"); a != nil && len(a.Ints) > 0 {
			axis = a.Ints[0]
		}
		ax, err := normAxis(axis, len(s))
		if err != nil {
			return -1, err.Error()
		}
		if batched {
			trip, err := product(s[0], s[ax])
			if err != nil {
				return -1, err.Error()
			}
			return trip, ""
		}
		return s[ax], ""
	case "WHILE":
		return -1, "a TFLite WHILE runs until its condition subgraph says stop"
	case "SequenceMap":
		s := c.in(0)
		if s == nil || !s.SeqKnown() {
			return -1, "the sequence's length is known only at run time"
		}
		return int64(len(s.Seq())), ""
	}
	return -1, "not a loop"
}
