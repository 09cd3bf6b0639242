package target

// Class is an operator class: operators the cost model charges alike.
type Class string

// The operator classes. Conv, depthwise, dense and recurrent are charged
// per MAC (measure's definition of MACs); the others per element.
const (
	Conv        Class = "conv"        // standard, grouped and transposed convolution
	Depthwise   Class = "depthwise"   // depthwise convolution
	Dense       Class = "dense"       // fully connected, Gemm, MatMul
	Recurrent   Class = "recurrent"   // LSTM, GRU, RNN, SVDF
	Elementwise Class = "elementwise" // arithmetic, activations, normalisation, quantization, softmax
	Pooling     Class = "pooling"     // pooling windows and reductions
	Movement    Class = "movement"    // reshape, transpose, concatenation, padding, gathers
)

// Classes lists every class in report order.
var Classes = []Class{Conv, Depthwise, Dense, Recurrent, Elementwise, Pooling, Movement}

// PerMAC reports whether a class is charged per MAC rather than per
// element.
func (c Class) PerMAC() bool {
	return c == Conv || c == Depthwise || c == Dense || c == Recurrent
}

// Unit names what a class's per_unit figure is charged on.
func (c Class) Unit() string {
	if c.PerMAC() {
		return "MAC"
	}
	return "element"
}

func validClass(s string) bool {
	for _, c := range Classes {
		if string(c) == s {
			return true
		}
	}
	return false
}

// Classify returns the class of an operator: domain "" (or "ai.onnx") for
// ONNX's default domain, "tflite" for a TFLite builtin operator (op is the
// schema's BuiltinOperator name). Depthwise marks an ONNX convolution that
// measure found depthwise. ok is false for an operator the cost model
// does not know (custom operators, other domains, control flow): its cost
// is left out and listed.
func Classify(domain, op string, depthwise bool) (Class, bool) {
	var c Class
	var ok bool
	switch domain {
	case "", "ai.onnx":
		c, ok = onnxClasses[op]
		if ok && c == Conv && depthwise {
			c = Depthwise
		}
	case "tflite":
		c, ok = tfliteClasses[op]
	}
	return c, ok
}

func table(rows map[Class][]string) map[string]Class {
	out := map[string]Class{}
	for c, ops := range rows {
		for _, op := range ops {
			out[op] = c
		}
	}
	return out
}

// onnxClasses classes the operators of ONNX's default domain.
var onnxClasses = table(map[Class][]string{
	Conv:      {"Conv", "ConvInteger", "QLinearConv", "ConvTranspose", "DeformConv"},
	Dense:     {"Gemm", "MatMul", "MatMulInteger", "QLinearMatMul", "Einsum"},
	Recurrent: {"LSTM", "GRU", "RNN"},
	Elementwise: {"Add", "Sub", "Mul", "Div", "Pow", "Mod", "Sum", "Mean", "Max", "Min", "Neg", "Abs",
		"Reciprocal", "Sqrt", "Exp", "Log", "Erf", "Sin", "Cos", "Tan", "Asin", "Acos", "Atan",
		"Sinh", "Cosh", "Asinh", "Acosh", "Atanh", "Ceil", "Floor", "Round", "Sign", "IsInf", "IsNaN",
		"Equal", "Greater", "GreaterOrEqual", "Less", "LessOrEqual", "And", "Or", "Xor", "Not", "Where",
		"BitShift", "BitwiseAnd", "BitwiseOr", "BitwiseXor", "BitwiseNot",
		"Relu", "LeakyRelu", "PRelu", "Elu", "Selu", "Celu", "Sigmoid", "HardSigmoid", "HardSwish", "Tanh",
		"Softplus", "Softsign", "ThresholdedRelu", "Shrink", "Gelu", "Mish", "Clip", "Softmax", "LogSoftmax",
		"Hardmax", "BatchNormalization", "InstanceNormalization", "LayerNormalization", "GroupNormalization",
		"LRN", "LpNormalization", "MeanVarianceNormalization", "QuantizeLinear", "DequantizeLinear",
		"DynamicQuantizeLinear", "Resize", "Upsample", "GridSample", "Cast", "CastLike"},
	Pooling: {"MaxPool", "AveragePool", "LpPool", "GlobalAveragePool", "GlobalMaxPool", "GlobalLpPool",
		"ReduceSum", "ReduceMean", "ReduceMax", "ReduceMin", "ReduceProd", "ReduceL1", "ReduceL2",
		"ReduceLogSum", "ReduceLogSumExp", "ReduceSumSquare", "ArgMax", "ArgMin", "TopK", "CumSum"},
	Movement: {"Reshape", "Flatten", "Squeeze", "Unsqueeze", "Transpose", "Concat", "Split", "Slice",
		"Gather", "GatherElements", "GatherND", "Scatter", "ScatterElements", "ScatterND", "Pad", "Tile",
		"Expand", "DepthToSpace", "SpaceToDepth", "Compress", "ReverseSequence", "Trilu", "CenterCropPad",
		"Identity", "Dropout", "Shape", "Size", "Constant", "ConstantOfShape", "EyeLike", "Range", "OneHot"},
})

// tfliteClasses classes TFLite's builtin operators (schema BuiltinOperator
// names).
var tfliteClasses = table(map[Class][]string{
	Conv:      {"CONV_2D", "TRANSPOSE_CONV", "CONV_3D", "CONV_3D_TRANSPOSE"},
	Depthwise: {"DEPTHWISE_CONV_2D"},
	Dense:     {"FULLY_CONNECTED", "BATCH_MATMUL"},
	Recurrent: {"SVDF", "UNIDIRECTIONAL_SEQUENCE_LSTM", "BIDIRECTIONAL_SEQUENCE_LSTM", "LSTM",
		"UNIDIRECTIONAL_SEQUENCE_RNN", "BIDIRECTIONAL_SEQUENCE_RNN", "RNN"},
	Elementwise: {"ADD", "SUB", "MUL", "DIV", "ADD_N", "SQUARED_DIFFERENCE", "FLOOR_DIV", "FLOOR_MOD", "POW",
		"MAXIMUM", "MINIMUM", "ABS", "NEG", "SQRT", "RSQRT", "SQUARE", "EXP", "LOG", "SIN", "COS",
		"FLOOR", "CEIL", "ROUND", "SIGN", "EQUAL", "NOT_EQUAL", "GREATER", "GREATER_EQUAL", "LESS",
		"LESS_EQUAL", "LOGICAL_AND", "LOGICAL_OR", "LOGICAL_NOT", "SELECT", "SELECT_V2",
		"RELU", "RELU6", "RELU_N1_TO_1", "RELU_0_TO_1", "LEAKY_RELU", "PRELU", "ELU", "HARD_SWISH", "GELU",
		"LOGISTIC", "TANH", "SOFTMAX", "LOG_SOFTMAX", "L2_NORMALIZATION", "LOCAL_RESPONSE_NORMALIZATION",
		"QUANTIZE", "DEQUANTIZE", "CAST", "RESIZE_BILINEAR", "RESIZE_NEAREST_NEIGHBOR"},
	Pooling: {"AVERAGE_POOL_2D", "MAX_POOL_2D", "L2_POOL_2D", "MEAN", "SUM", "REDUCE_MAX", "REDUCE_MIN",
		"REDUCE_PROD", "REDUCE_ANY", "ARG_MAX", "ARG_MIN", "CUMSUM"},
	Movement: {"RESHAPE", "SQUEEZE", "EXPAND_DIMS", "TRANSPOSE", "CONCATENATION", "PACK", "UNPACK", "SPLIT",
		"SPLIT_V", "SLICE", "STRIDED_SLICE", "PAD", "PADV2", "MIRROR_PAD", "GATHER", "GATHER_ND",
		"SPACE_TO_DEPTH", "DEPTH_TO_SPACE", "SPACE_TO_BATCH_ND", "BATCH_TO_SPACE_ND", "SHAPE", "FILL",
		"ZEROS_LIKE", "ONES_LIKE", "BROADCAST_TO", "BROADCAST_ARGS", "TILE", "REVERSE_V2"},
})
