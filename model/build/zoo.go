package build

import (
	"fmt"
	"sort"

	"github.com/loadline/loadline/model"
)

// The reference architectures, written from memory of torchvision's
// definitions (torchvision.models, v0.15 era) and of Howard et al. 2017 for
// MobileNet v1, so that parameter counts match the published figures
// (zoo_test.go checks them). Node and weight names follow PyTorch's module
// paths ("layer1.0.conv1", "features.3.squeeze"), so a reader can put one
// beside the Python.
//
// As torch.onnx.export writes a model in eval mode: BatchNormalization stays
// a separate node (not folded into the convolution), Dropout layers are
// left out (they are the identity at inference), and adaptive average
// pooling to 1×1 is GlobalAveragePool.

// Options configures a reference architecture. The zero value is the
// published configuration: 224×224 RGB input, batch 1, float32, 1000
// classes, opset 13, weights materialised.
type Options struct {
	Size        int64       // input height and width; 0 means 224
	Width       float64     // width multiplier of the MobileNets; 0 means 1.0
	Batch       int64       // 0 means 1
	BatchSymbol string      // when set, the batch dimension is this symbol and Batch is ignored
	DType       model.DType // element type of the input and the weights; Undefined means float32
	Classes     int64       // 0 means 1000
	Opset       int64       // 0 means 13
	Declared    bool        // declare weights without values (see Declared)
	ValueInfo   bool        // record intermediate types (see WithValueInfo)
	Seed        uint64      // seed of the pseudo-random weights (see Seed)
}

func (o Options) withDefaults() Options {
	if o.Size == 0 {
		o.Size = 224
	}
	if o.Width == 0 {
		o.Width = 1
	}
	if o.Batch == 0 {
		o.Batch = 1
	}
	if o.DType == model.Undefined {
		o.DType = model.Float32
	}
	if o.Classes == 0 {
		o.Classes = 1000
	}
	if o.Opset == 0 {
		o.Opset = 13
	}
	return o
}

// start opens a builder for an architecture and declares its input,
// "input" of shape [batch, 3, size, size].
func start(name string, o Options) (*Builder, Value) {
	opts := []Option{Seed(o.Seed)}
	if o.Declared {
		opts = append(opts, Declared())
	}
	if o.ValueInfo {
		opts = append(opts, WithValueInfo())
	}
	b := New(name, o.Opset, opts...)
	if !o.DType.IsFloat() {
		b.fail("%s: dtype %s is not a float type", name, o.DType)
	}
	if o.Size < 1 || o.Batch < 1 || o.Classes < 1 || o.Width <= 0 {
		b.fail("%s: size %d, batch %d, classes %d and width %g must be positive", name, o.Size, o.Batch, o.Classes, o.Width)
	}
	batch := model.Known(o.Batch)
	if o.BatchSymbol != "" {
		batch = model.Sym(o.BatchSymbol)
	}
	x := b.InputShape("input", o.DType, model.Shape{batch, model.Known(3), model.Known(o.Size), model.Known(o.Size)})
	return b, x
}

// finish marks x as the output and returns the model.
func finish(b *Builder, x Value) (*model.Model, error) {
	b.Output(x)
	return b.Model()
}

// head is the classifier tail shared by most architectures: global average
// pooling, torch.flatten(x, 1) and the final nn.Linear.
func head(b *Builder, x Value, fc string, classes int64) Value {
	x = b.GlobalAveragePool("avgpool", x)
	x = b.Flatten("flatten", x, 1)
	return b.Gemm(fc, x, classes, true)
}

// ResNet18 is torchvision's resnet18 (He et al. 2016, BasicBlock, layers
// [2, 2, 2, 2]); from memory.
func ResNet18(o Options) (*model.Model, error) {
	return resnet("resnet18", o, false, [4]int{2, 2, 2, 2})
}

// ResNet50 is torchvision's resnet50 (Bottleneck, layers [3, 4, 6, 3], the
// stride on the 3×3 convolution: "ResNet v1.5"); from memory.
func ResNet50(o Options) (*model.Model, error) {
	return resnet("resnet50", o, true, [4]int{3, 4, 6, 3})
}

func resnet(name string, o Options, bottleneck bool, layers [4]int) (*model.Model, error) {
	o = o.withDefaults()
	b, x := start(name, o)
	x = b.Conv("conv1", x, Conv2D(64, 7, 2, 3))
	x = b.BatchNormalization("bn1", x, 0)
	x = b.Relu("relu", x)
	x = b.MaxPool("maxpool", x, Pool2D(3, 2, 1))
	expansion := int64(1)
	if bottleneck {
		expansion = 4
	}
	inplanes := int64(64)
	for i, n := range layers {
		planes := int64(64) << i
		for j := range n {
			stride := int64(1)
			if j == 0 && i > 0 {
				stride = 2
			}
			p := fmt.Sprintf("layer%d.%d", i+1, j)
			identity := x
			if bottleneck {
				x = b.Conv(p+".conv1", x, Conv2D(planes, 1, 1, 0))
				x = b.BatchNormalization(p+".bn1", x, 0)
				x = b.Relu(p+".relu", x)
				x = b.Conv(p+".conv2", x, Conv2D(planes, 3, stride, 1))
				x = b.BatchNormalization(p+".bn2", x, 0)
				x = b.Relu(p+".relu_1", x)
				x = b.Conv(p+".conv3", x, Conv2D(planes*expansion, 1, 1, 0))
				x = b.BatchNormalization(p+".bn3", x, 0)
			} else {
				x = b.Conv(p+".conv1", x, Conv2D(planes, 3, stride, 1))
				x = b.BatchNormalization(p+".bn1", x, 0)
				x = b.Relu(p+".relu", x)
				x = b.Conv(p+".conv2", x, Conv2D(planes, 3, 1, 1))
				x = b.BatchNormalization(p+".bn2", x, 0)
			}
			if stride != 1 || inplanes != planes*expansion {
				identity = b.Conv(p+".downsample.0", identity, Conv2D(planes*expansion, 1, stride, 0))
				identity = b.BatchNormalization(p+".downsample.1", identity, 0)
			}
			x = b.Add(p+".add", x, identity)
			last := ".relu_1"
			if bottleneck {
				last = ".relu_2"
			}
			x = b.Relu(p+last, x)
			inplanes = planes * expansion
		}
	}
	return finish(b, head(b, x, "fc", o.Classes))
}

// makeDivisible is torchvision's _make_divisible (from the TensorFlow
// MobileNet code): v rounded to the nearest multiple of divisor, at least
// divisor, and not below 90 % of v.
func makeDivisible(v float64, divisor int64) int64 {
	n := max(divisor, int64(v+float64(divisor)/2)/divisor*divisor)
	if float64(n) < 0.9*v {
		n += divisor
	}
	return n
}

// mobileNetV2Setting is torchvision's inverted_residual_setting: expansion
// t, output channels c, repeats n, first stride s.
var mobileNetV2Setting = [...][4]int64{
	{1, 16, 1, 1},
	{6, 24, 2, 2},
	{6, 32, 3, 2},
	{6, 64, 4, 2},
	{6, 96, 3, 1},
	{6, 160, 3, 2},
	{6, 320, 1, 1},
}

// MobileNetV2 is torchvision's mobilenet_v2 (Sandler et al. 2018) with
// width multiplier o.Width, channels rounded to multiples of 8 as
// torchvision does; from memory.
func MobileNetV2(o Options) (*model.Model, error) {
	return mobileNetV2("mobilenet_v2", o, false)
}

// MobileNetV2QDQ is MobileNetV2 as an int8 deployment exports it in QDQ
// form: BatchNormalization folded into each convolution (which gains a
// bias), weights stored int8 with per-output-channel scales (per tensor
// before opset 13) and dequantized by DequantizeLinear, biases int32, and a
// QuantizeLinear/DequantizeLinear pair (int8, per tensor) on the input and
// after every convolution with its activation, every residual Add, the
// pooling, the Flatten and the classifier. Scales and zero points are placeholders; the
// graph's structure is what matters. o.DType must be float32.
func MobileNetV2QDQ(o Options) (*model.Model, error) {
	return mobileNetV2("mobilenet_v2_int8_qdq", o, true)
}

func mobileNetV2(name string, o Options, qdq bool) (*model.Model, error) {
	o = o.withDefaults()
	b, x := start(name, o)
	if qdq && o.DType != model.Float32 {
		b.fail("%s: dtype %s, want float32", name, o.DType)
	}
	l := layers{b: b, qdq: qdq}
	if qdq {
		x = l.quant(x)
	}
	in := makeDivisible(32*o.Width, 8)
	last := makeDivisible(1280*max(1, o.Width), 8)
	x = l.convBN("features.0", x, Conv2D(in, 3, 2, 1), relu6)
	idx := 1
	for _, st := range mobileNetV2Setting {
		t, c, n, s := st[0], st[1], st[2], st[3]
		out := makeDivisible(float64(c)*o.Width, 8)
		for i := range n {
			stride := int64(1)
			if i == 0 {
				stride = s
			}
			p := fmt.Sprintf("features.%d", idx)
			hidden := in * t // int(round(inp * t)) with integer t
			y := x
			k := 0
			if t != 1 {
				y = l.convBN(fmt.Sprintf("%s.conv.%d", p, k), y, Conv2D(hidden, 1, 1, 0), relu6)
				k++
			}
			y = l.convBN(fmt.Sprintf("%s.conv.%d", p, k), y, Conv2D(hidden, 3, stride, 1).Grouped(hidden), relu6)
			k++
			y = l.convBNFlat(fmt.Sprintf("%s.conv.%d", p, k), fmt.Sprintf("%s.conv.%d", p, k+1), y, Conv2D(out, 1, 1, 0))
			if stride == 1 && in == out {
				y = l.add(p+".add", x, y)
			}
			x, in = y, out
			idx++
		}
	}
	x = l.convBN(fmt.Sprintf("features.%d", idx), x, Conv2D(last, 1, 1, 0), relu6)
	x = b.GlobalAveragePool("avgpool", x)
	if qdq {
		x = l.quant(x)
	}
	x = b.Flatten("flatten", x, 1)
	// classifier.0 is Dropout(0.2), left out at inference.
	if !qdq {
		return finish(b, b.Gemm("classifier.1", x, o.Classes, true))
	}
	x = l.quant(x)
	if !x.Valid() {
		return nil, b.Err()
	}
	w := b.QuantizedWeight("classifier.1.weight", model.Int8, o.Classes, x.Shape[1].Value)
	bias := b.QuantizedWeight("classifier.1.bias", model.Int32, o.Classes)
	x = b.GemmWith("classifier.1", x, w, bias, false, true)
	return finish(b, l.quant(x))
}

// activation names the activation that follows a convolution block.
type activation uint8

const (
	noActivation activation = iota
	relu
	relu6
)

// layers writes convolution blocks either as torchvision's float modules
// (Conv, BatchNormalization, activation) or, with qdq, as an int8 QDQ
// export has them (BatchNormalization folded, weights dequantized, the
// block's output quantized and dequantized).
type layers struct {
	b   *Builder
	qdq bool
}

// convBN is torchvision's Conv2dNormActivation: prefix.0 the convolution,
// prefix.1 the BatchNormalization, prefix.2 the activation.
func (l layers) convBN(prefix string, x Value, s ConvSpec, act activation) Value {
	if l.qdq {
		return l.qconv(prefix+".0", prefix+".2", x, s, act)
	}
	x = l.b.Conv(prefix+".0", x, s)
	x = l.b.BatchNormalization(prefix+".1", x, 0)
	return l.act(prefix+".2", x, act)
}

// convBNFlat is a convolution named conv followed by a BatchNormalization
// named bn and no activation, as MobileNetV2's projection layers have.
func (l layers) convBNFlat(conv, bn string, x Value, s ConvSpec) Value {
	if l.qdq {
		return l.qconv(conv, "", x, s, noActivation)
	}
	x = l.b.Conv(conv, x, s)
	return l.b.BatchNormalization(bn, x, 0)
}

// qconv is a quantized convolution with BatchNormalization folded into its
// bias, then its activation (named actName) and the QDQ pair on its output.
func (l layers) qconv(conv, actName string, x Value, s ConvSpec, act activation) Value {
	b := l.b
	if b.err != nil {
		return Value{}
	}
	cin, g, ok := b.channels("Conv", conv, x, s)
	if !ok {
		return Value{}
	}
	w := b.QuantizedWeight(conv+".weight", model.Int8, append([]int64{s.Out, cin / g}, s.Kernel...)...)
	bias := b.QuantizedWeight(conv+".bias", model.Int32, s.Out)
	x = b.ConvWith(conv, x, w, bias, s)
	x = l.act(actName, x, act)
	return l.quant(x)
}

func (l layers) act(name string, x Value, act activation) Value {
	switch act {
	case relu:
		return l.b.Relu(name, x)
	case relu6:
		return l.b.Relu6(name, x)
	}
	return x
}

func (l layers) add(name string, x, y Value) Value {
	z := l.b.Add(name, x, y)
	if l.qdq {
		z = l.quant(z)
	}
	return z
}

// quant is the int8 QDQ pair on an activation.
func (l layers) quant(x Value) Value { return l.b.QDQ(x, model.Int8, 0.05, 0) }

// MobileNetV1 is MobileNet v1 (Howard et al. 2017, Table 1) with width
// multiplier o.Width (the paper's α: 1.0, 0.75, 0.5, 0.25): a 3×3 stride-2
// convolution, 13 depthwise-separable blocks, global average pooling (the
// paper's 7×7 average pool at 224), the 1000-class fully connected layer and
// Softmax. Every convolution is followed by BatchNormalization and ReLU, and
// has no bias. Channels are int(c·α), at least 8, as TF-slim's
// mobilenet_v1 computes them. Names follow the torchvision style of the
// other models (features.N). From memory.
func MobileNetV1(o Options) (*model.Model, error) {
	o = o.withDefaults()
	b, x := start("mobilenet_v1", o)
	depth := func(c int64) int64 { return max(int64(float64(c)*o.Width), 8) }
	l := layers{b: b}
	x = l.convBN("features.0", x, Conv2D(depth(32), 3, 2, 1), relu)
	blocks := [...]struct{ out, stride int64 }{
		{64, 1}, {128, 2}, {128, 1}, {256, 2}, {256, 1}, {512, 2},
		{512, 1}, {512, 1}, {512, 1}, {512, 1}, {512, 1},
		{1024, 2}, {1024, 1},
	}
	for i, blk := range blocks {
		if !x.Valid() {
			break
		}
		p := fmt.Sprintf("features.%d", i+1)
		c := x.Shape[1].Value
		x = b.Conv(p+".0", x, Conv2D(c, 3, blk.stride, 1).Grouped(c))
		x = b.BatchNormalization(p+".1", x, 0)
		x = b.Relu(p+".2", x)
		x = b.Conv(p+".3", x, Conv2D(depth(blk.out), 1, 1, 0))
		x = b.BatchNormalization(p+".4", x, 0)
		x = b.Relu(p+".5", x)
	}
	x = head(b, x, "fc", o.Classes)
	return finish(b, b.Softmax("softmax", x, 1))
}

// SqueezeNet1_1 is torchvision's squeezenet1_1 (Iandola et al. 2016, the
// 1.1 revision from the SqueezeNet repository); from memory. Its
// convolutions have biases and its pools use ceil_mode.
func SqueezeNet1_1(o Options) (*model.Model, error) {
	o = o.withDefaults()
	b, x := start("squeezenet1_1", o)
	x = b.Conv("features.0", x, Conv2D(64, 3, 2, 0).WithBias())
	x = b.Relu("features.1", x)
	x = b.MaxPool("features.2", x, Pool2D(3, 2, 0).Ceil())
	fire := func(i int, sq, e1, e3 int64) {
		p := fmt.Sprintf("features.%d", i)
		s := b.Conv(p+".squeeze", x, Conv2D(sq, 1, 1, 0).WithBias())
		s = b.Relu(p+".squeeze_activation", s)
		a := b.Conv(p+".expand1x1", s, Conv2D(e1, 1, 1, 0).WithBias())
		a = b.Relu(p+".expand1x1_activation", a)
		c := b.Conv(p+".expand3x3", s, Conv2D(e3, 3, 1, 1).WithBias())
		c = b.Relu(p+".expand3x3_activation", c)
		x = b.Concat(p+".cat", 1, a, c)
	}
	fire(3, 16, 64, 64)
	fire(4, 16, 64, 64)
	x = b.MaxPool("features.5", x, Pool2D(3, 2, 0).Ceil())
	fire(6, 32, 128, 128)
	fire(7, 32, 128, 128)
	x = b.MaxPool("features.8", x, Pool2D(3, 2, 0).Ceil())
	fire(9, 48, 192, 192)
	fire(10, 48, 192, 192)
	fire(11, 64, 256, 256)
	fire(12, 64, 256, 256)
	// classifier.0 is Dropout(0.5), left out at inference.
	x = b.Conv("classifier.1", x, Conv2D(o.Classes, 1, 1, 0).WithBias())
	x = b.Relu("classifier.2", x)
	x = b.GlobalAveragePool("classifier.3", x)
	return finish(b, b.Flatten("flatten", x, 1))
}

// adaptiveAvgPool models nn.AdaptiveAvgPool2d((n, n)) as torch.onnx.export
// can write it: nothing when the input is already n×n (so at 224 input
// for AlexNet and VGG16, whose feature maps are then 6×6 and 7×7), an
// AveragePool with kernel and stride size/n when n divides the size, and
// an error otherwise (the exporter refuses that case too).
func adaptiveAvgPool(b *Builder, name string, x Value, n int64) Value {
	if b.err != nil {
		return Value{}
	}
	h, w := x.Shape[2], x.Shape[3]
	switch {
	case !h.IsKnown() || !w.IsKnown() || h.Value%n != 0 || w.Value%n != 0:
		b.fail("%s: adaptive pooling of %s to %d×%d is not a fixed window; choose an input size that gives a multiple of %d", name, x.Shape, n, n, n)
		return Value{}
	case h.Value == n && w.Value == n:
		return x
	}
	return b.AveragePool(name, x, PoolSpec{Kernel: []int64{h.Value / n, w.Value / n}, Strides: []int64{h.Value / n, w.Value / n}})
}

// AlexNet is torchvision's alexnet (the "one weird trick" variant of
// Krizhevsky 2014, 64-192-384-256-256 channels) with AdaptiveAvgPool2d to
// 6×6 before the classifier, which at 224 input is the identity and is
// left out (see adaptiveAvgPool); from memory.
func AlexNet(o Options) (*model.Model, error) {
	o = o.withDefaults()
	b, x := start("alexnet", o)
	x = b.Conv("features.0", x, Conv2D(64, 11, 4, 2).WithBias())
	x = b.Relu("features.1", x)
	x = b.MaxPool("features.2", x, Pool2D(3, 2, 0))
	x = b.Conv("features.3", x, Conv2D(192, 5, 1, 2).WithBias())
	x = b.Relu("features.4", x)
	x = b.MaxPool("features.5", x, Pool2D(3, 2, 0))
	x = b.Conv("features.6", x, Conv2D(384, 3, 1, 1).WithBias())
	x = b.Relu("features.7", x)
	x = b.Conv("features.8", x, Conv2D(256, 3, 1, 1).WithBias())
	x = b.Relu("features.9", x)
	x = b.Conv("features.10", x, Conv2D(256, 3, 1, 1).WithBias())
	x = b.Relu("features.11", x)
	x = b.MaxPool("features.12", x, Pool2D(3, 2, 0))
	x = adaptiveAvgPool(b, "avgpool", x, 6)
	x = b.Flatten("flatten", x, 1)
	// classifier.0 and classifier.3 are Dropout(0.5), left out at inference.
	x = b.Gemm("classifier.1", x, 4096, true)
	x = b.Relu("classifier.2", x)
	x = b.Gemm("classifier.4", x, 4096, true)
	x = b.Relu("classifier.5", x)
	return finish(b, b.Gemm("classifier.6", x, o.Classes, true))
}

// VGG16 is torchvision's vgg16 (Simonyan and Zisserman 2015, configuration
// D, without batch normalization) with AdaptiveAvgPool2d to 7×7 before the
// classifier, the identity at 224 input and left out (see
// adaptiveAvgPool); from memory.
func VGG16(o Options) (*model.Model, error) {
	o = o.withDefaults()
	b, x := start("vgg16", o)
	const pool = 0
	cfg := []int64{64, 64, pool, 128, 128, pool, 256, 256, 256, pool, 512, 512, 512, pool, 512, 512, 512, pool}
	for i, idx := 0, 0; i < len(cfg); i++ {
		if cfg[i] == pool {
			x = b.MaxPool(fmt.Sprintf("features.%d", idx), x, Pool2D(2, 2, 0))
			idx++
			continue
		}
		x = b.Conv(fmt.Sprintf("features.%d", idx), x, Conv2D(cfg[i], 3, 1, 1).WithBias())
		x = b.Relu(fmt.Sprintf("features.%d", idx+1), x)
		idx += 2
	}
	x = adaptiveAvgPool(b, "avgpool", x, 7)
	x = b.Flatten("flatten", x, 1)
	// classifier.2 and classifier.5 are Dropout(0.5), left out at inference.
	x = b.Gemm("classifier.0", x, 4096, true)
	x = b.Relu("classifier.1", x)
	x = b.Gemm("classifier.3", x, 4096, true)
	x = b.Relu("classifier.4", x)
	return finish(b, b.Gemm("classifier.6", x, o.Classes, true))
}

var architectures = map[string]func(Options) (*model.Model, error){
	"alexnet":               AlexNet,
	"mobilenet_v1":          MobileNetV1,
	"mobilenet_v2":          MobileNetV2,
	"mobilenet_v2_int8_qdq": MobileNetV2QDQ,
	"resnet18":              ResNet18,
	"resnet50":              ResNet50,
	"squeezenet1_1":         SqueezeNet1_1,
	"vgg16":                 VGG16,
}

// Architecture returns the reference architecture called name, one of
// Architectures().
func Architecture(name string) (func(Options) (*model.Model, error), bool) {
	f, ok := architectures[name]
	return f, ok
}

// Architectures lists the names Architecture knows, sorted.
func Architectures() []string {
	names := make([]string, 0, len(architectures))
	for n := range architectures {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

// ConvClassifier is a small classifier of our own for tests: a 3×3
// convolution with bias from 3 channels to width on a size×size image,
// ReLU, global average pooling, and a fully connected layer with bias to 4
// classes. Its params are 28·width + 4·width + 4 (hand-worked).
func ConvClassifier(name string, size, width int64) (*model.Model, error) {
	b := New(name, 13)
	x := b.Input("image", model.Float32, 1, 3, size, size)
	x = b.Conv("conv", x, Conv2D(width, 3, 1, 1).WithBias())
	x = b.Relu("relu", x)
	x = b.GlobalAveragePool("pool", x)
	x = b.Flatten("flat", x, 1)
	x = b.Gemm("fc", x, 4, true)
	b.Output(x)
	return b.Model()
}
