package tflite

import (
	"fmt"
	"strings"
)

// The TFLite FlatBuffers schema (TensorFlow Lite's schema.fbs, version 3),
// as loadline reads it. Field ids are the order of the fields in each
// table of the published schema, written here as facts; the tables are
// the file's own structure, before any mapping onto loadline's graph.

// Model is a whole TFLite file as stored.
type Model struct {
	Version        uint32
	OperatorCodes  []OperatorCode
	Subgraphs      []Subgraph
	Description    string
	Buffers        []Buffer
	MetadataBuffer []int32
	Metadata       []Metadata
	SignatureDefs  []SignatureDef
}

// OperatorCode names an operator: a builtin one, by code, or a custom one,
// by name.
type OperatorCode struct {
	// DeprecatedBuiltinCode is the old one-byte field, which holds the
	// code of the first 127 builtins; BuiltinCode is the field that
	// replaced it. Writers fill both; readers take the larger
	// (PLACEHOLDER_FOR_GREATER_OP_CODES, 127, marks a code the old field
	// cannot hold).
	DeprecatedBuiltinCode int8
	CustomCode            string
	Version               int32
	BuiltinCode           int32
}

// Code is the operator's builtin code, from whichever field holds it.
func (c OperatorCode) Code() BuiltinOperator {
	return BuiltinOperator(max(int32(c.DeprecatedBuiltinCode), c.BuiltinCode))
}

// Subgraph is one graph: the main one (index 0) or the body of a control
// flow operator (WHILE, IF, CALL_ONCE).
type Subgraph struct {
	Tensors   []Tensor
	Inputs    []int32
	Outputs   []int32
	Operators []Operator
	Name      string
}

// Tensor is one entry of a subgraph's tensor table.
type Tensor struct {
	Shape          []int32
	Type           TensorType
	Buffer         uint32 // index into Model.Buffers; 0 is the empty buffer
	Name           string
	Quantization   *Quantization
	IsVariable     bool
	Sparsity       *Sparsity
	ShapeSignature []int32 // the shape with -1 for dynamic dims; nil when absent
	HasRank        bool
}

// Quantization is a tensor's quantization parameters: per tensor (one
// scale) or per channel (one scale per index of QuantizedDimension).
type Quantization struct {
	Min, Max           []float32
	Scale              []float32
	ZeroPoint          []int64
	DetailsType        uint8 // the union's type; 0 when none
	QuantizedDimension int32
}

// Sparsity describes a tensor stored in a sparse format: its buffer holds
// only the values the dim metadata addresses.
type Sparsity struct {
	TraversalOrder []int32
	BlockMap       []int32
	DimMetadata    []DimensionMetadata
}

// DimensionMetadata is one dimension of a sparse tensor's traversal:
// dense (DenseSize elements) or compressed (segments and indices).
type DimensionMetadata struct {
	Format    int8 // 0 dense, 1 sparse CSR
	DenseSize int32
	// SegmentsType and IndicesType are the union types of the index
	// vectors (1 int32, 2 uint16, 3 uint8); Segments and Indices their
	// lengths.
	SegmentsType, IndicesType uint8
	Segments, Indices         int
}

// Operator is one operator application.
type Operator struct {
	OpcodeIndex uint32
	Inputs      []int32 // -1 marks an omitted optional input
	Outputs     []int32
	// OptionsType is the BuiltinOptions union's type; Options its fields
	// decoded by name, for the option tables this package knows (see
	// optionTables), in the schema's field order.
	OptionsType            uint8
	Options                []Option
	CustomOptions          []byte // a sub-slice of the file
	CustomOptionsFormat    int8
	MutatingVariableInputs []bool
	Intermediates          []int32
	LargeCustomOptionsOff  uint64
	LargeCustomOptionsSize uint64
}

// Option is one field of an operator's builtin options. Exactly one of
// Int, Float, Ints holds the value, as Kind says.
type Option struct {
	Name  string
	Kind  OptionKind
	Int   int64
	Float float32
	Ints  []int32
	Enum  string // the enum's name for enum fields (padding, activation)
}

// OptionKind is the type of an option field.
type OptionKind uint8

// The kinds of option fields.
const (
	OptInt OptionKind = iota
	OptBool
	OptFloat
	OptInts
	OptEnum
)

// Buffer is one entry of the buffer table: data stored inside the
// FlatBuffer, or, in files larger than 2 GiB, Offset and Size locating it
// in the file after the FlatBuffer. Data is a sub-slice of the file in
// both cases (the decoder resolves Offset and Size).
type Buffer struct {
	Data   []byte
	Offset uint64
	Size   uint64
}

// Metadata is a named buffer of model metadata.
type Metadata struct {
	Name   string
	Buffer uint32
}

// SignatureDef maps a signature's named inputs and outputs to a subgraph's
// tensors.
type SignatureDef struct {
	Inputs        []TensorMap
	Outputs       []TensorMap
	SignatureKey  string
	SubgraphIndex uint32
}

// TensorMap names one tensor of a signature.
type TensorMap struct {
	Name        string
	TensorIndex uint32
}

// TensorType is the schema's TensorType enum.
type TensorType int8

// tensorTypeNames are the TensorType enum's names by value.
var tensorTypeNames = []string{
	"FLOAT32", "FLOAT16", "INT32", "UINT8", "INT64", "STRING", "BOOL", "INT16",
	"COMPLEX64", "INT8", "FLOAT64", "COMPLEX128", "UINT64", "RESOURCE", "VARIANT",
	"UINT32", "UINT16", "INT4", "BFLOAT16",
}

func (t TensorType) String() string {
	if t >= 0 && int(t) < len(tensorTypeNames) {
		return tensorTypeNames[t]
	}
	return fmt.Sprintf("TensorType(%d)", int8(t))
}

// BuiltinOperator is the schema's BuiltinOperator enum.
type BuiltinOperator int32

// builtinNames are the BuiltinOperator enum's names by value.
var builtinNames = strings.Fields(`
ADD AVERAGE_POOL_2D CONCATENATION CONV_2D DEPTHWISE_CONV_2D DEPTH_TO_SPACE DEQUANTIZE
EMBEDDING_LOOKUP FLOOR FULLY_CONNECTED HASHTABLE_LOOKUP L2_NORMALIZATION L2_POOL_2D
LOCAL_RESPONSE_NORMALIZATION LOGISTIC LSH_PROJECTION LSTM MAX_POOL_2D MUL RELU
RELU_N1_TO_1 RELU6 RESHAPE RESIZE_BILINEAR RNN SOFTMAX SPACE_TO_DEPTH SVDF TANH
CONCAT_EMBEDDINGS SKIP_GRAM CALL CUSTOM EMBEDDING_LOOKUP_SPARSE PAD
UNIDIRECTIONAL_SEQUENCE_RNN GATHER BATCH_TO_SPACE_ND SPACE_TO_BATCH_ND TRANSPOSE MEAN
SUB DIV SQUEEZE UNIDIRECTIONAL_SEQUENCE_LSTM STRIDED_SLICE BIDIRECTIONAL_SEQUENCE_RNN
EXP TOPK_V2 SPLIT LOG_SOFTMAX DELEGATE BIDIRECTIONAL_SEQUENCE_LSTM CAST PRELU MAXIMUM
ARG_MAX MINIMUM LESS NEG PADV2 GREATER GREATER_EQUAL LESS_EQUAL SELECT SLICE SIN
TRANSPOSE_CONV SPARSE_TO_DENSE TILE EXPAND_DIMS EQUAL NOT_EQUAL LOG SUM SQRT RSQRT
SHAPE POW ARG_MIN FAKE_QUANT REDUCE_PROD REDUCE_MAX PACK LOGICAL_OR ONE_HOT
LOGICAL_AND LOGICAL_NOT UNPACK REDUCE_MIN FLOOR_DIV REDUCE_ANY SQUARE ZEROS_LIKE FILL
FLOOR_MOD RANGE RESIZE_NEAREST_NEIGHBOR LEAKY_RELU SQUARED_DIFFERENCE MIRROR_PAD ABS
SPLIT_V UNIQUE CEIL REVERSE_V2 ADD_N GATHER_ND COS WHERE RANK ELU REVERSE_SEQUENCE
MATRIX_DIAG QUANTIZE MATRIX_SET_DIAG ROUND HARD_SWISH IF WHILE NON_MAX_SUPPRESSION_V4
NON_MAX_SUPPRESSION_V5 SCATTER_ND SELECT_V2 DENSIFY SEGMENT_SUM BATCH_MATMUL
PLACEHOLDER_FOR_GREATER_OP_CODES CUMSUM CALL_ONCE BROADCAST_TO RFFT2D CONV_3D IMAG
REAL COMPLEX_ABS HASHTABLE HASHTABLE_FIND HASHTABLE_IMPORT HASHTABLE_SIZE REDUCE_ALL
CONV_3D_TRANSPOSE VAR_HANDLE READ_VARIABLE ASSIGN_VARIABLE BROADCAST_ARGS
RANDOM_STANDARD_NORMAL BUCKETIZE RANDOM_UNIFORM MULTINOMIAL GELU DYNAMIC_UPDATE_SLICE
RELU_0_TO_1 UNSORTED_SEGMENT_PROD UNSORTED_SEGMENT_MAX UNSORTED_SEGMENT_SUM ATAN2
UNSORTED_SEGMENT_MIN SIGN BITCAST BITWISE_XOR RIGHT_SHIFT STABLEHLO_LOGISTIC
STABLEHLO_ADD STABLEHLO_DIVIDE STABLEHLO_MULTIPLY STABLEHLO_MAXIMUM STABLEHLO_RESHAPE
STABLEHLO_CLAMP STABLEHLO_CONCATENATE STABLEHLO_BROADCAST_IN_DIM STABLEHLO_CONVOLUTION
STABLEHLO_SLICE STABLEHLO_CUSTOM_CALL STABLEHLO_REDUCE STABLEHLO_ABS STABLEHLO_AND
STABLEHLO_COSINE STABLEHLO_EXPONENTIAL STABLEHLO_FLOOR STABLEHLO_LOG STABLEHLO_MINIMUM
STABLEHLO_NEGATE STABLEHLO_OR STABLEHLO_POWER STABLEHLO_REMAINDER STABLEHLO_RSQRT
STABLEHLO_SELECT STABLEHLO_SUBTRACT STABLEHLO_TANH STABLEHLO_SCATTER STABLEHLO_COMPARE
STABLEHLO_CONVERT STABLEHLO_DYNAMIC_SLICE STABLEHLO_DYNAMIC_UPDATE_SLICE STABLEHLO_PAD
STABLEHLO_IOTA STABLEHLO_DOT_GENERAL STABLEHLO_REDUCE_WINDOW STABLEHLO_SORT
STABLEHLO_WHILE STABLEHLO_GATHER STABLEHLO_TRANSPOSE DILATE STABLEHLO_RNG_BIT_GENERATOR
REDUCE_WINDOW STABLEHLO_COMPOSITE STABLEHLO_SHIFT_LEFT STABLEHLO_CBRT STABLEHLO_CASE
`)

// The builtin codes this package treats specially.
const (
	opCustom   BuiltinOperator = 32
	opIf       BuiltinOperator = 118
	opWhile    BuiltinOperator = 119
	opCallOnce BuiltinOperator = 129
)

// String is the enum's name ("CONV_2D"), or BUILTIN_<n> for a code newer
// than this package knows.
func (b BuiltinOperator) String() string {
	if b >= 0 && int(b) < len(builtinNames) {
		return builtinNames[b]
	}
	return fmt.Sprintf("BUILTIN_%d", int32(b))
}

// ParseBuiltin maps an enum name back to its code.
func ParseBuiltin(name string) (BuiltinOperator, bool) {
	for i, n := range builtinNames {
		if n == name {
			return BuiltinOperator(i), true
		}
	}
	return 0, false
}

// Enum names of option fields.
var (
	paddingNames    = []string{"SAME", "VALID"}
	activationNames = []string{"NONE", "RELU", "RELU_N1_TO_1", "RELU6", "TANH", "SIGN_BIT"}
)

// optField is one field of an option table, in field-id order.
type optField struct {
	name  string
	kind  OptionKind
	size  int64 // bytes of a scalar field
	def   int64
	enums []string
}

func i32(name string, def int64) optField {
	return optField{name: name, kind: OptInt, size: 4, def: def}
}
func b8(name string) optField   { return optField{name: name, kind: OptBool, size: 1} }
func f32(name string) optField  { return optField{name: name, kind: OptFloat, size: 4} }
func ints(name string) optField { return optField{name: name, kind: OptInts, size: 4} }
func padding() optField {
	return optField{name: "padding", kind: OptEnum, size: 1, enums: paddingNames}
}
func activation() optField {
	return optField{name: "fused_activation_function", kind: OptEnum, size: 1, enums: activationNames}
}
func byteEnum(name string) optField { return optField{name: name, kind: OptInt, size: 1} }

// optionTable is one table of the BuiltinOptions union.
type optionTable struct {
	name   string
	fields []optField
}

// optionTables are the BuiltinOptions union's members this package decodes
// field by field, by union type. Others are kept as their type only.
var optionTables = map[uint8]optionTable{
	1:   {"Conv2DOptions", []optField{padding(), i32("stride_w", 0), i32("stride_h", 0), activation(), i32("dilation_w_factor", 1), i32("dilation_h_factor", 1)}},
	2:   {"DepthwiseConv2DOptions", []optField{padding(), i32("stride_w", 0), i32("stride_h", 0), i32("depth_multiplier", 0), activation(), i32("dilation_w_factor", 1), i32("dilation_h_factor", 1)}},
	5:   {"Pool2DOptions", []optField{padding(), i32("stride_w", 0), i32("stride_h", 0), i32("filter_width", 0), i32("filter_height", 0), activation()}},
	6:   {"SVDFOptions", []optField{i32("rank", 0), activation(), b8("asymmetric_quantize_inputs")}},
	8:   {"FullyConnectedOptions", []optField{activation(), byteEnum("weights_format"), b8("keep_num_dims"), b8("asymmetric_quantize_inputs")}},
	9:   {"SoftmaxOptions", []optField{f32("beta")}},
	10:  {"ConcatenationOptions", []optField{i32("axis", 0), activation()}},
	11:  {"AddOptions", []optField{activation(), optField{name: "pot_scale_int16", kind: OptBool, size: 1, def: 1}}},
	17:  {"ReshapeOptions", []optField{ints("new_shape")}},
	21:  {"MulOptions", []optField{activation()}},
	27:  {"ReducerOptions", []optField{b8("keep_dims")}},
	28:  {"SubOptions", []optField{activation(), optField{name: "pot_scale_int16", kind: OptBool, size: 1, def: 1}}},
	29:  {"DivOptions", []optField{activation()}},
	49:  {"TransposeConvOptions", []optField{padding(), i32("stride_w", 0), i32("stride_h", 0), activation()}},
	71:  {"UnidirectionalSequenceLSTMOptions", []optField{activation(), f32("cell_clip"), f32("proj_clip"), b8("time_major"), b8("asymmetric_quantize_inputs"), b8("diagonal_recurrent_tensors")}},
	92:  {"IfOptions", []optField{i32("then_subgraph_index", 0), i32("else_subgraph_index", 0)}},
	93:  {"WhileOptions", []optField{i32("cond_subgraph_index", 0), i32("body_subgraph_index", 0)}},
	101: {"BatchMatMulOptions", []optField{b8("adj_x"), b8("adj_y"), b8("asymmetric_quantize_inputs")}},
	103: {"CallOnceOptions", []optField{i32("init_subgraph_index", 0)}},
}

// Option returns the option named name, or nil.
func (o *Operator) Option(name string) *Option {
	for i := range o.Options {
		if o.Options[i].Name == name {
			return &o.Options[i]
		}
	}
	return nil
}

// OptionsName is the name of the operator's options table ("Conv2DOptions"),
// "NONE" when it has none, or BuiltinOptions(<n>) for a table this package
// does not decode.
func (o *Operator) OptionsName() string {
	if o.OptionsType == 0 {
		return "NONE"
	}
	if t, ok := optionTables[o.OptionsType]; ok {
		return t.name
	}
	return fmt.Sprintf("BuiltinOptions(%d)", o.OptionsType)
}
