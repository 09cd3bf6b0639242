package tflite

import "fmt"

// Builder writes small TFLite models operator by operator, for tests and
// the demo: float32 or int8 activations in NHWC, weights filled with a
// repeating pattern (their values do not matter to loadline's figures).
// Encode the result with Encode.
type Builder struct {
	m     *Model
	codes map[BuiltinOperator]uint32
	dtype TensorType
	err   error
}

// Tensor types the builder uses.
const (
	Float32 TensorType = 0
	Int32   TensorType = 2
	Int8    TensorType = 9
)

// NewBuilder starts a model whose activations and weights have type dt
// (Float32 or Int8; biases are Int32 with Int8).
func NewBuilder(dt TensorType) *Builder {
	return &Builder{dtype: dt, codes: map[BuiltinOperator]uint32{},
		m: &Model{Version: 3, Description: "loadline builder", Subgraphs: []Subgraph{{Name: "main"}}, Buffers: []Buffer{{}}}}
}

func (b *Builder) sg() *Subgraph { return &b.m.Subgraphs[0] }

func (b *Builder) elemBytes(t TensorType) int {
	switch t {
	case Int8:
		return 1
	default:
		return 4
	}
}

// tensor adds a tensor; with data, a buffer filled with a pattern.
func (b *Builder) tensor(name string, t TensorType, shape []int32, data bool) int32 {
	tn := Tensor{Name: name, Type: t, Shape: shape}
	if t == Int8 {
		tn.Quantization = &Quantization{Scale: []float32{0.05}, ZeroPoint: []int64{0}}
	}
	if data {
		n := b.elemBytes(t)
		for _, d := range shape {
			n *= int(d)
		}
		buf := make([]byte, n)
		for i := range buf {
			buf[i] = byte(i*7 + 1)
		}
		b.m.Buffers = append(b.m.Buffers, Buffer{Data: buf})
		tn.Buffer = uint32(len(b.m.Buffers) - 1)
	}
	b.sg().Tensors = append(b.sg().Tensors, tn)
	return int32(len(b.sg().Tensors) - 1)
}

// Input adds a subgraph input of the given NHWC (or other) shape.
func (b *Builder) Input(name string, shape ...int32) int32 {
	i := b.tensor(name, b.dtype, shape, false)
	b.sg().Inputs = append(b.sg().Inputs, i)
	return i
}

// Output marks x as a subgraph output.
func (b *Builder) Output(x int32) { b.sg().Outputs = append(b.sg().Outputs, x) }

// Shape returns tensor x's shape.
func (b *Builder) Shape(x int32) []int32 { return b.sg().Tensors[x].Shape }

func (b *Builder) op(code BuiltinOperator, in []int32, out int32, optType uint8, opts ...Option) int32 {
	idx, ok := b.codes[code]
	if !ok {
		dep := int8(code)
		if code > 127 {
			dep = 127
		}
		b.m.OperatorCodes = append(b.m.OperatorCodes, OperatorCode{DeprecatedBuiltinCode: dep, BuiltinCode: int32(code), Version: 1})
		idx = uint32(len(b.m.OperatorCodes) - 1)
		b.codes[code] = idx
	}
	b.sg().Operators = append(b.sg().Operators, Operator{OpcodeIndex: idx, Inputs: in, Outputs: []int32{out}, OptionsType: optType, Options: opts})
	return out
}

func spatial(n, k, s int32, same bool) int32 {
	if same {
		return (n + s - 1) / s
	}
	return (n-k)/s + 1
}

func pad(same bool) Option {
	if same {
		return Option{Name: "padding", Kind: OptEnum, Enum: "SAME"}
	}
	return Option{Name: "padding", Kind: OptEnum, Enum: "VALID"}
}

func act(a string) Option { return Option{Name: "fused_activation_function", Kind: OptEnum, Enum: a} }
func num(name string, v int64) Option {
	return Option{Name: name, Kind: OptInt, Int: v}
}

func (b *Builder) biasType() TensorType {
	if b.dtype == Int8 {
		return Int32
	}
	return Float32
}

// Conv2D adds a CONV_2D of cout k×k filters with the given stride,
// padding and fused activation ("NONE", "RELU", "RELU6").
func (b *Builder) Conv2D(name string, x int32, cout, k, stride int32, same bool, activation string) int32 {
	s := b.Shape(x)
	if len(s) != 4 {
		b.err = fmt.Errorf("%s: input of rank %d", name, len(s))
		return x
	}
	w := b.tensor(name+"/filter", b.dtype, []int32{cout, k, k, s[3]}, true)
	bias := b.tensor(name+"/bias", b.biasType(), []int32{cout}, true)
	out := b.tensor(name, b.dtype, []int32{s[0], spatial(s[1], k, stride, same), spatial(s[2], k, stride, same), cout}, false)
	return b.op(3, []int32{x, w, bias}, out, 1, pad(same), num("stride_w", int64(stride)), num("stride_h", int64(stride)), act(activation), num("dilation_w_factor", 1), num("dilation_h_factor", 1))
}

// DepthwiseConv2D adds a DEPTHWISE_CONV_2D (depth multiplier 1).
func (b *Builder) DepthwiseConv2D(name string, x int32, k, stride int32, same bool, activation string) int32 {
	s := b.Shape(x)
	if len(s) != 4 {
		b.err = fmt.Errorf("%s: input of rank %d", name, len(s))
		return x
	}
	w := b.tensor(name+"/filter", b.dtype, []int32{1, k, k, s[3]}, true)
	bias := b.tensor(name+"/bias", b.biasType(), []int32{s[3]}, true)
	out := b.tensor(name, b.dtype, []int32{s[0], spatial(s[1], k, stride, same), spatial(s[2], k, stride, same), s[3]}, false)
	return b.op(4, []int32{x, w, bias}, out, 2, pad(same), num("stride_w", int64(stride)), num("stride_h", int64(stride)), num("depth_multiplier", 1), act(activation), num("dilation_w_factor", 1), num("dilation_h_factor", 1))
}

// AveragePool2D adds an AVERAGE_POOL_2D over the whole spatial extent
// (VALID), giving [N, 1, 1, C].
func (b *Builder) AveragePool2D(name string, x int32) int32 {
	s := b.Shape(x)
	out := b.tensor(name, b.dtype, []int32{s[0], 1, 1, s[3]}, false)
	return b.op(1, []int32{x}, out, 5, pad(false), num("stride_w", 1), num("stride_h", 1), num("filter_width", int64(s[2])), num("filter_height", int64(s[1])), act("NONE"))
}

// Reshape adds a RESHAPE to shape (its new shape a constant input).
func (b *Builder) Reshape(name string, x int32, shape ...int32) int32 {
	sh := b.tensor(name+"/shape", Int32, []int32{int32(len(shape))}, false)
	buf := make([]byte, 0, 4*len(shape))
	for _, d := range shape {
		buf = append(buf, byte(d), byte(d>>8), byte(d>>16), byte(d>>24))
	}
	b.m.Buffers = append(b.m.Buffers, Buffer{Data: buf})
	b.sg().Tensors[sh].Buffer = uint32(len(b.m.Buffers) - 1)
	out := b.tensor(name, b.dtype, shape, false)
	return b.op(22, []int32{x, sh}, out, 0)
}

// FullyConnected adds a FULLY_CONNECTED to units outputs.
func (b *Builder) FullyConnected(name string, x int32, units int32, activation string) int32 {
	s := b.Shape(x)
	k := s[len(s)-1]
	w := b.tensor(name+"/weights", b.dtype, []int32{units, k}, true)
	bias := b.tensor(name+"/bias", b.biasType(), []int32{units}, true)
	rows := int32(1)
	for _, d := range s[:len(s)-1] {
		rows *= d
	}
	out := b.tensor(name, b.dtype, []int32{rows, units}, false)
	return b.op(9, []int32{x, w, bias}, out, 8, act(activation), num("weights_format", 0), num("keep_num_dims", 0), num("asymmetric_quantize_inputs", 0))
}

// Softmax adds a SOFTMAX.
func (b *Builder) Softmax(name string, x int32) int32 {
	out := b.tensor(name, b.dtype, b.Shape(x), false)
	return b.op(25, []int32{x}, out, 9, Option{Name: "beta", Kind: OptFloat, Float: 1})
}

// Model returns the model built so far, or the first error.
func (b *Builder) Model() (*Model, error) {
	if b.err != nil {
		return nil, b.err
	}
	return b.m, nil
}
