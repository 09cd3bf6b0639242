package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// TFLite operators. A TFLite builtin is a node of domain "tflite" whose Op
// is the schema's BuiltinOperator name (model/tflite). Its shapes are not
// inferred: the file stores every tensor's shape, and inferStored checks
// them (an operator whose stored output shape contradicts its inputs is
// listed as unresolved and its output is not trusted). Each row of
// tfliteOps gives an operator's cost rule — one of the kinds of flopRules,
// the MAC rules calling the one set of MAC formulas in cost.go with the
// arguments read out of TFLite's layouts (NHWC activations, [C_out, kh,
// kw, C_in] conv filters, [1, kh, kw, C_out] depthwise filters, [C_out,
// K] fully connected weights) — and, where the operator has one, its
// shape check and its shape operands (inputs that carry shapes, axes or
// indices, which are not parameters). Operators without a row are listed
// as unresolved ("no cost rule"); custom operators (domain
// "tflite.custom") always are.
//
// A fused activation (fused_activation_function other than NONE) adds one
// FLOP per output element, as the separate activation node of an ONNX
// graph does.

// tfliteOp is one row of the TFLite operator table.
type tfliteOp struct {
	cost flopRule
	// check returns the output shapes the inputs imply, or nil when it
	// cannot tell (a shape it needs is not known).
	check func(c *costCtx) ([]model.Shape, error)
	// shapeOperands are the inputs that carry shapes, axes or indices.
	shapeOperands []int
}

func tfl(cost flopRule, check func(c *costCtx) ([]model.Shape, error), shapeOps ...int) tfliteOp {
	return tfliteOp{cost: cost, check: check, shapeOperands: shapeOps}
}

var tfliteOps = map[string]tfliteOp{
	// MACs.
	"CONV_2D":                      tfl(macRule(tfliteConvMACs), checkConv2D),
	"DEPTHWISE_CONV_2D":            tfl(macRule(tfliteDepthwiseMACs), checkDepthwise),
	"FULLY_CONNECTED":              tfl(macRule(tfliteFullyConnectedMACs), checkFullyConnected),
	"BATCH_MATMUL":                 tfl(macRule(tfliteBatchMatMulMACs), nil),
	"TRANSPOSE_CONV":               tfl(macRule(tfliteTransposeConvMACs), nil, 0),
	"UNIDIRECTIONAL_SEQUENCE_LSTM": tfl(macRule(tfliteLSTMMACs), nil),
	"SVDF":                         tfl(macRule(tfliteSVDFMACs), checkSVDF),

	// One per output element: elementwise arithmetic, comparison, logic.
	"ADD": tfl(perOutput, checkBroadcast), "SUB": tfl(perOutput, checkBroadcast), "MUL": tfl(perOutput, checkBroadcast),
	"DIV": tfl(perOutput, checkBroadcast), "MAXIMUM": tfl(perOutput, checkBroadcast), "MINIMUM": tfl(perOutput, checkBroadcast),
	"SQUARED_DIFFERENCE": tfl(perOutput, checkBroadcast), "POW": tfl(perOutput, checkBroadcast),
	"FLOOR_DIV": tfl(perOutput, checkBroadcast), "FLOOR_MOD": tfl(perOutput, checkBroadcast),
	"EQUAL": tfl(perOutput, checkBroadcast), "NOT_EQUAL": tfl(perOutput, checkBroadcast), "LESS": tfl(perOutput, checkBroadcast),
	"LESS_EQUAL": tfl(perOutput, checkBroadcast), "GREATER": tfl(perOutput, checkBroadcast), "GREATER_EQUAL": tfl(perOutput, checkBroadcast),
	"LOGICAL_AND": tfl(perOutput, checkBroadcast), "LOGICAL_OR": tfl(perOutput, checkBroadcast), "LOGICAL_NOT": tfl(perOutput, checkSame),
	"SELECT": tfl(perOutput, nil), "SELECT_V2": tfl(perOutput, nil), "ADD_N": tfl(perOutput, nil),
	"ABS": tfl(perOutput, checkSame), "NEG": tfl(perOutput, checkSame), "EXP": tfl(perOutput, checkSame), "LOG": tfl(perOutput, checkSame),
	"SQRT": tfl(perOutput, checkSame), "RSQRT": tfl(perOutput, checkSame), "SIN": tfl(perOutput, checkSame), "COS": tfl(perOutput, checkSame),
	"SQUARE": tfl(perOutput, checkSame), "FLOOR": tfl(perOutput, checkSame), "CEIL": tfl(perOutput, checkSame),
	"ROUND": tfl(perOutput, checkSame), "SIGN": tfl(perOutput, checkSame),
	// Activations.
	"LOGISTIC": tfl(perOutput, checkSame), "TANH": tfl(perOutput, checkSame), "RELU": tfl(perOutput, checkSame),
	"RELU6": tfl(perOutput, checkSame), "RELU_N1_TO_1": tfl(perOutput, checkSame), "RELU_0_TO_1": tfl(perOutput, checkSame),
	"LEAKY_RELU": tfl(perOutput, checkSame), "PRELU": tfl(perOutput, nil), "ELU": tfl(perOutput, checkSame),
	"HARD_SWISH": tfl(perOutput, checkSame), "GELU": tfl(perOutput, checkSame), "SOFTMAX": tfl(perOutput, checkSame),
	"LOG_SOFTMAX": tfl(perOutput, checkSame),
	// Normalisation, quantization, resampling.
	"L2_NORMALIZATION": tfl(perOutput, checkSame), "LOCAL_RESPONSE_NORMALIZATION": tfl(perOutput, checkSame),
	"QUANTIZE": tfl(perOutput, checkSame), "DEQUANTIZE": tfl(perOutput, checkSame),
	"RESIZE_BILINEAR": tfl(perOutput, nil, 1), "RESIZE_NEAREST_NEIGHBOR": tfl(perOutput, nil, 1),

	// Pooling: one per window element per output element.
	"AVERAGE_POOL_2D": tfl(perWindow, checkPool), "MAX_POOL_2D": tfl(perWindow, checkPool), "L2_POOL_2D": tfl(perWindow, checkPool),

	// Reductions: one per input element.
	"MEAN": tfl(perInput, nil, 1), "SUM": tfl(perInput, nil, 1), "REDUCE_MAX": tfl(perInput, nil, 1),
	"REDUCE_MIN": tfl(perInput, nil, 1), "REDUCE_PROD": tfl(perInput, nil, 1), "REDUCE_ANY": tfl(perInput, nil, 1),
	"REDUCE_ALL": tfl(perInput, nil, 1), "ARG_MAX": tfl(perInput, nil, 1), "ARG_MIN": tfl(perInput, nil, 1),
	"CUMSUM": tfl(perInput, nil, 1), "TOPK_V2": tfl(perInput, nil, 1),

	// Data movement, shapes, indices, type conversion, state: 0 FLOPs.
	"RESHAPE": tfl(zeroFlops, checkReshape, 1), "SQUEEZE": tfl(zeroFlops, checkReshape), "EXPAND_DIMS": tfl(zeroFlops, checkReshape, 1),
	"TRANSPOSE": tfl(zeroFlops, nil, 1), "CONCATENATION": tfl(zeroFlops, checkConcat), "PACK": tfl(zeroFlops, nil),
	"UNPACK": tfl(zeroFlops, nil), "SPLIT": tfl(zeroFlops, nil, 0), "SPLIT_V": tfl(zeroFlops, nil, 1, 2),
	"SLICE": tfl(zeroFlops, nil, 1, 2), "STRIDED_SLICE": tfl(zeroFlops, nil, 1, 2, 3), "GATHER": tfl(zeroFlops, nil, 1),
	"GATHER_ND": tfl(zeroFlops, nil, 1), "SCATTER_ND": tfl(zeroFlops, nil, 0, 2), "EMBEDDING_LOOKUP": tfl(zeroFlops, nil, 0),
	"PAD": tfl(zeroFlops, nil, 1), "PADV2": tfl(zeroFlops, nil, 1), "MIRROR_PAD": tfl(zeroFlops, nil, 1),
	"TILE": tfl(zeroFlops, nil, 1), "BROADCAST_TO": tfl(zeroFlops, nil, 1), "DEPTH_TO_SPACE": tfl(zeroFlops, nil),
	"SPACE_TO_DEPTH": tfl(zeroFlops, nil), "BATCH_TO_SPACE_ND": tfl(zeroFlops, nil, 1, 2), "SPACE_TO_BATCH_ND": tfl(zeroFlops, nil, 1, 2),
	"REVERSE_V2": tfl(zeroFlops, nil, 1), "SHAPE": tfl(zeroFlops, nil, 0), "RANK": tfl(zeroFlops, nil, 0),
	"FILL": tfl(zeroFlops, nil, 0), "ZEROS_LIKE": tfl(zeroFlops, nil, 0), "CAST": tfl(zeroFlops, checkSame),
	"ONE_HOT": tfl(zeroFlops, nil, 0, 1), "RANGE": tfl(zeroFlops, nil, 0, 1, 2), "BROADCAST_ARGS": tfl(zeroFlops, nil, 0, 1),
	"VAR_HANDLE": tfl(zeroFlops, nil), "READ_VARIABLE": tfl(zeroFlops, nil), "ASSIGN_VARIABLE": tfl(zeroFlops, nil),

	// Control flow: the cost of the subgraphs.
	"IF": tfl(subgraph, nil, 0), "WHILE": tfl(subgraph, nil), "CALL_ONCE": tfl(subgraph, nil),
}

func init() {
	for name, op := range tfliteOps {
		flopRules["tflite:"+name] = op.cost
		if op.shapeOperands != nil {
			shapeOperands["tflite:"+name] = op.shapeOperands
		}
	}
}

// nhwc returns an NHWC activation's dims.
func (c *costCtx) nhwc(i int) (n, h, w, ch int64, err error) {
	d, err := c.inDims(i)
	if err != nil {
		return 0, 0, 0, 0, err
	}
	if len(d) != 4 {
		return 0, 0, 0, 0, fmt.Errorf("input %d has rank %d, an NHWC activation has 4", i, len(d))
	}
	return d[0], d[1], d[2], d[3], nil
}

// filter4 returns a rank-4 filter's dims.
func (c *costCtx) filter4(i int) ([]int64, error) {
	d, err := c.inDims(i)
	if err == nil && len(d) != 4 {
		err = fmt.Errorf("filter has rank %d, want 4", len(d))
	}
	return d, err
}

// tfliteConvMACs: convMACsOf with the filter [C_out, kh, kw, C_in/group].
func tfliteConvMACs(c *costCtx) (int64, error) {
	out, err := c.outElems(0)
	if err != nil {
		return 0, err
	}
	f, err := c.filter4(1)
	if err != nil {
		return 0, err
	}
	return convMACsOf(out, f[3], f[1]*f[2])
}

// tfliteDepthwiseMACs: convMACsOf with one input channel per output
// channel and the filter [1, kh, kw, C_out].
func tfliteDepthwiseMACs(c *costCtx) (int64, error) {
	out, err := c.outElems(0)
	if err != nil {
		return 0, err
	}
	f, err := c.filter4(1)
	if err != nil {
		return 0, err
	}
	return convMACsOf(out, 1, f[1]*f[2])
}

// tfliteFullyConnectedMACs: matmulMACsOf with the weights [C_out, K].
func tfliteFullyConnectedMACs(c *costCtx) (int64, error) {
	out, err := c.outElems(0)
	if err != nil {
		return 0, err
	}
	w, err := c.inDims(1)
	if err != nil {
		return 0, err
	}
	if len(w) != 2 {
		return 0, fmt.Errorf("weights have rank %d, want 2", len(w))
	}
	return matmulMACsOf(out, w[1])
}

// tfliteBatchMatMulMACs: matmulMACsOf with K the last dim of x (the one
// before it with adj_x).
func tfliteBatchMatMulMACs(c *costCtx) (int64, error) {
	out, err := c.outElems(0)
	if err != nil {
		return 0, err
	}
	x, err := c.inDims(0)
	if err != nil {
		return 0, err
	}
	if len(x) < 2 {
		return 0, fmt.Errorf("x has rank %d", len(x))
	}
	k := x[len(x)-1]
	if c.attrInt("adj_x", 0) != 0 {
		k = x[len(x)-2]
	}
	return matmulMACsOf(out, k)
}

// tfliteTransposeConvMACs: convTransposeMACsOf with the inputs
// (output_shape, filter [C_out, kh, kw, C_in], input).
func tfliteTransposeConvMACs(c *costCtx) (int64, error) {
	in, err := c.inElems(2)
	if err != nil {
		return 0, err
	}
	f, err := c.filter4(1)
	if err != nil {
		return 0, err
	}
	return convTransposeMACsOf(in, f[0], f[1]*f[2])
}

// tfliteLSTMMACs: recurrentMACsOf with 4 gates, one direction, the input
// [batch, steps, input] ([steps, batch, input] with time_major) and the
// hidden size from the input-to-output weights [hidden, input] (input 4).
func tfliteLSTMMACs(c *costCtx) (int64, error) {
	x, err := c.inDims(0)
	if err != nil {
		return 0, err
	}
	if len(x) != 3 {
		return 0, fmt.Errorf("input has rank %d, want 3", len(x))
	}
	batch, steps, input := x[0], x[1], x[2]
	if c.attrInt("time_major", 0) != 0 {
		batch, steps = x[1], x[0]
	}
	w, err := c.inDims(4)
	if err != nil {
		return 0, fmt.Errorf("input-to-output weights: %v", err)
	}
	if len(w) != 2 {
		return 0, fmt.Errorf("input-to-output weights have rank %d, want 2", len(w))
	}
	return recurrentMACsOf(4, input, w[0], steps, batch, 1)
}

// tfliteSVDFMACs: an SVDF layer is two matrix products per step: the
// input [batch, input] by the feature weights [filters, input], then each
// filter's memory by the time weights [filters, memory]; matmulMACsOf of
// each: batch × (filters × input + filters × memory).
func tfliteSVDFMACs(c *costCtx) (int64, error) {
	x, err := c.inDims(0)
	if err != nil {
		return 0, err
	}
	feat, err := c.inDims(1)
	if err != nil {
		return 0, err
	}
	tw, err := c.inDims(2)
	if err != nil {
		return 0, err
	}
	if len(x) != 2 || len(feat) != 2 || len(tw) != 2 {
		return 0, fmt.Errorf("input, feature and time weights have ranks %d, %d, %d; want 2", len(x), len(feat), len(tw))
	}
	rows, err := product(x[0], feat[0])
	if err != nil {
		return 0, err
	}
	a, err := matmulMACsOf(rows, feat[1])
	if err != nil {
		return 0, err
	}
	b, err := matmulMACsOf(rows, tw[1])
	if err != nil {
		return 0, err
	}
	sum, ok := addChecked(a, b)
	if !ok {
		return 0, fmt.Errorf("the count overflows int64")
	}
	return sum, nil
}

// Shape checks. Each returns what the operator's inputs imply for its
// outputs; inferStored compares that with the stored shapes.

// windowOut is the output size of a window of size k (dilation d) sliding
// with stride s over n elements, with SAME or VALID padding.
func windowOut(n, k, s, d int64, padding string) (int64, error) {
	if s <= 0 || d <= 0 {
		return 0, fmt.Errorf("stride %d, dilation %d", s, d)
	}
	if padding == "SAME" {
		return (n + s - 1) / s, nil
	}
	eff := (k-1)*d + 1
	if eff > n {
		return 0, fmt.Errorf("window %d is larger than the input %d", eff, n)
	}
	return (n-eff)/s + 1, nil
}

func spatialOut(c *costCtx, h, w, kh, kw int64) (int64, int64, error) {
	pad := c.attrString("padding", "SAME")
	oh, err := windowOut(h, kh, c.attrInt("stride_h", 1), c.attrInt("dilation_h_factor", 1), pad)
	if err != nil {
		return 0, 0, err
	}
	ow, err := windowOut(w, kw, c.attrInt("stride_w", 1), c.attrInt("dilation_w_factor", 1), pad)
	return oh, ow, err
}

func checkConv2D(c *costCtx) ([]model.Shape, error) {
	n, h, w, ch, err := c.nhwc(0)
	if err != nil {
		return nil, nil
	}
	f, err := c.filter4(1)
	if err != nil {
		return nil, nil
	}
	if f[3] <= 0 || ch%f[3] != 0 {
		return nil, fmt.Errorf("input channels %d are not a multiple of the filter's %d", ch, f[3])
	}
	oh, ow, err := spatialOut(c, h, w, f[1], f[2])
	if err != nil {
		return nil, err
	}
	return []model.Shape{model.KnownShape(n, oh, ow, f[0])}, nil
}

func checkDepthwise(c *costCtx) ([]model.Shape, error) {
	n, h, w, ch, err := c.nhwc(0)
	if err != nil {
		return nil, nil
	}
	f, err := c.filter4(1)
	if err != nil {
		return nil, nil
	}
	if m := c.attrInt("depth_multiplier", 0); m > 0 && ch*m != f[3] {
		return nil, fmt.Errorf("input channels %d × depth multiplier %d are not the filter's %d", ch, m, f[3])
	}
	oh, ow, err := spatialOut(c, h, w, f[1], f[2])
	if err != nil {
		return nil, err
	}
	return []model.Shape{model.KnownShape(n, oh, ow, f[3])}, nil
}

func checkPool(c *costCtx) ([]model.Shape, error) {
	n, h, w, ch, err := c.nhwc(0)
	if err != nil {
		return nil, nil
	}
	oh, ow, err := spatialOut(c, h, w, c.attrInt("filter_height", 1), c.attrInt("filter_width", 1))
	if err != nil {
		return nil, err
	}
	return []model.Shape{model.KnownShape(n, oh, ow, ch)}, nil
}

func checkFullyConnected(c *costCtx) ([]model.Shape, error) {
	x, err := c.inDims(0)
	if err != nil {
		return nil, nil
	}
	wd, err := c.inDims(1)
	if err != nil || len(wd) != 2 || len(x) == 0 {
		return nil, nil
	}
	k := wd[1]
	if c.attrInt("keep_num_dims", 0) != 0 {
		if x[len(x)-1] != k {
			return nil, fmt.Errorf("input's last dim %d is not the weights' K %d", x[len(x)-1], k)
		}
		out := model.KnownShape(x...)
		out[len(out)-1] = model.Known(wd[0])
		return []model.Shape{out}, nil
	}
	elems, err := product(x...)
	if err != nil || k <= 0 || elems%k != 0 {
		return nil, fmt.Errorf("input of %d elements does not split into rows of K = %d", elems, k)
	}
	return []model.Shape{model.KnownShape(elems/k, wd[0])}, nil
}

func checkSVDF(c *costCtx) ([]model.Shape, error) {
	x, err := c.inDims(0)
	if err != nil {
		return nil, nil
	}
	feat, err := c.inDims(1)
	rank := c.attrInt("rank", 0)
	if err != nil || len(x) != 2 || len(feat) != 2 || rank <= 0 {
		return nil, nil
	}
	if feat[0]%rank != 0 {
		return nil, fmt.Errorf("%d filters do not divide by rank %d", feat[0], rank)
	}
	return []model.Shape{model.KnownShape(x[0], feat[0]/rank)}, nil
}

func checkBroadcast(c *costCtx) ([]model.Shape, error) {
	var shapes []model.Shape
	for i := range c.ins {
		v := c.in(i)
		if v == nil || !v.Type.RankKnown {
			return nil, nil
		}
		shapes = append(shapes, v.Type.Shape)
	}
	if len(shapes) == 0 {
		return nil, nil
	}
	s, err := broadcast(shapes...)
	return []model.Shape{s}, err
}

func checkSame(c *costCtx) ([]model.Shape, error) {
	v := c.in(0)
	if v == nil || !v.Type.RankKnown {
		return nil, nil
	}
	return []model.Shape{v.Type.Shape}, nil
}

// checkReshape: the stored output holds as many elements as the input.
func checkReshape(c *costCtx) ([]model.Shape, error) {
	in, err := c.inElems(0)
	if err != nil {
		return nil, nil
	}
	o, err := c.outElems(0)
	if err != nil {
		return nil, nil
	}
	if in != o {
		return nil, fmt.Errorf("%d input elements cannot become %d", in, o)
	}
	return nil, nil
}

func checkConcat(c *costCtx) ([]model.Shape, error) {
	var out []int64
	axis := c.attrInt("axis", 0)
	for i := range c.ins {
		d, err := c.inDims(i)
		if err != nil {
			return nil, nil
		}
		ax, err := normAxis(axis, len(d))
		if err != nil {
			return nil, err
		}
		if out == nil {
			out = append([]int64{}, d...)
			continue
		}
		if len(d) != len(out) {
			return nil, fmt.Errorf("inputs of ranks %d and %d", len(out), len(d))
		}
		out[ax] += d[ax]
	}
	if out == nil {
		return nil, nil
	}
	return []model.Shape{model.KnownShape(out...)}, nil
}
