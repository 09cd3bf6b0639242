package build

import (
	"math"
	"runtime"
	"testing"

	"github.com/loadline/loadline/model"
)

// notParams lists the inputs, by op and position, whose constants are not
// parameters: shape, axes and pads operands, clip bounds, quantization
// scales and zero points, and BatchNormalization's running mean and
// variance. The last are buffers in PyTorch, not parameters, and
// torchvision's num_params (sum of p.numel() over model.parameters())
// leaves them out; a count that includes them is 2 per BatchNormalization
// channel higher.
var notParams = map[string][]int{
	"BatchNormalization": {3, 4},
	"Reshape":            {1},
	"Squeeze":            {1},
	"Unsqueeze":          {1},
	"Pad":                {1, 2},
	"Resize":             {1, 2, 3},
	"Clip":               {1, 2},
	"Dropout":            {1, 2},
	"QuantizeLinear":     {1, 2},
	"DequantizeLinear":   {1, 2},
}

// countParams is the test's own parameter count: elements of every
// initializer of rank one or more that some node uses as a weight (in a
// position notParams does not list). Scalars never count.
func countParams(t *testing.T, m *model.Model) int64 {
	t.Helper()
	weight := map[string]bool{}
	for _, n := range m.Graph.Nodes {
		skip := map[int]bool{}
		for _, i := range notParams[n.Op] {
			skip[i] = true
		}
		for i, in := range n.Inputs {
			if in != "" && !skip[i] {
				weight[in] = true
			}
		}
	}
	var total int64
	for _, init := range m.Graph.Initializers {
		if len(init.Dims) > 0 && weight[init.Name] {
			total += init.Elements()
		}
	}
	return total
}

// countBNChannels sums the channels of every BatchNormalization.
func countBNChannels(m *model.Model) int64 {
	var n int64
	for _, node := range m.Graph.Nodes {
		if node.Op == "BatchNormalization" {
			n += m.Graph.Initializer(node.Inputs[1]).Elements()
		}
	}
	return n
}

// shapes maps every tensor of a model built WithValueInfo to its dims.
func shapes(t *testing.T, m *model.Model) map[string][]int64 {
	t.Helper()
	out := map[string][]int64{}
	for _, list := range [][]*model.ValueInfo{m.Graph.Inputs, m.Graph.ValueInfo, m.Graph.Outputs} {
		for _, v := range list {
			dims, ok := v.Type.Shape.Ints()
			if !ok {
				t.Fatalf("%s has shape %s", v.Name, v.Type.Shape)
			}
			out[v.Name] = dims
		}
	}
	for _, init := range m.Graph.Initializers {
		out[init.Name] = init.Dims
	}
	return out
}

func elems(d []int64) int64 {
	n := int64(1)
	for _, v := range d {
		n *= v
	}
	return n
}

// countMACs is the test's own hand arithmetic of multiply-accumulates, by
// the rule the README's "Conventions" (MACs) states: Conv = output elements
// × C_in/group × kernel area, Gemm = output elements × K.
func countMACs(t *testing.T, m *model.Model) int64 {
	t.Helper()
	s := shapes(t, m)
	var total int64
	for _, n := range m.Graph.Nodes {
		switch n.Op {
		case "Conv":
			w := s[n.Inputs[1]]
			total += elems(s[n.Outputs[0]]) * elems(w[1:])
		case "Gemm":
			k := s[n.Inputs[0]][1]
			if a := n.Attr("transA"); a != nil && a.Int == 1 {
				k = s[n.Inputs[0]][0]
			}
			total += elems(s[n.Outputs[0]]) * k
		case "MatMul", "ConvTranspose", "LSTM", "GRU":
			t.Fatalf("countMACs does not know %s", n.Op)
		}
	}
	return total
}

func TestParamsMatchTorchvision(t *testing.T) {
	cases := []struct {
		name   string
		build  func(Options) (*model.Model, error)
		params int64
	}{
		{"resnet18", ResNet18, 11_689_512},          // torchvision model documentation, resnet18 num_params
		{"resnet50", ResNet50, 25_557_032},          // torchvision model documentation, resnet50 num_params
		{"mobilenet_v2", MobileNetV2, 3_504_872},    // torchvision model documentation, mobilenet_v2 num_params
		{"squeezenet1_1", SqueezeNet1_1, 1_235_496}, // torchvision model documentation, squeezenet1_1 num_params
		{"alexnet", AlexNet, 61_100_840},            // torchvision model documentation, alexnet num_params
		{"vgg16", VGG16, 138_357_544},               // torchvision model documentation, vgg16 num_params
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			m, err := c.build(Options{Declared: true})
			if err != nil {
				t.Fatal(err)
			}
			if got := countParams(t, m); got != c.params {
				t.Errorf("params = %d, want %d (diff %d)", got, c.params, got-c.params)
			}
			for _, init := range m.Graph.Initializers {
				if init.HasData() && init.DType != model.Int64 && len(init.Dims) > 0 {
					t.Errorf("declared model stores values of %s %v", init.Name, init.Dims)
				}
			}
		})
	}
}

func TestMobileNetV1Params(t *testing.T) {
	cases := []struct {
		width  float64
		params float64 // millions
		macs   float64 // millions
	}{
		// Howard et al. 2017, "MobileNets", Table 6 (confirmed).
		{1.0, 4.2, 569},
		{0.75, 2.6, 325},
		{0.5, 1.3, 149},
		{0.25, 0.5, 41},
	}
	for _, c := range cases {
		m, err := MobileNetV1(Options{Width: c.width, Declared: true, ValueInfo: true})
		if err != nil {
			t.Fatal(err)
		}
		// The paper prints params to 0.1 M and mult-adds to 1 M: the count
		// must round to the printed figure (0.25's 0.470 M rounds to 0.5).
		got := float64(countParams(t, m)) / 1e6
		if math.Abs(got-c.params) > 0.05 {
			t.Errorf("width %g: params = %.3f M, want %.1f M at the paper's rounding (Howard et al. 2017, Table 6)", c.width, got, c.params)
		}
		// and the README claims MACs within 1 %.
		macs := float64(countMACs(t, m)) / 1e6
		if d := math.Abs(macs - c.macs); d > 0.5 || d > 0.01*c.macs {
			t.Errorf("width %g: MACs = %.1f M, want %.0f M at the paper's rounding and within 1%% (Howard et al. 2017, Table 6)", c.width, macs, c.macs)
		}
		t.Logf("mobilenet_v1 %g: %.3f M params, %.1f M MACs", c.width, got, macs)
	}
}

func TestMACsMatchTorchvision(t *testing.T) {
	cases := []struct {
		name  string
		build func(Options) (*model.Model, error)
		gmacs float64
		unit  float64 // the last printed digit, in GMACs
	}{
		{"resnet18", ResNet18, 1.814, 0.001},           // torchvision model documentation, resnet18 GFLOPS (counts MACs)
		{"resnet50", ResNet50, 4.089, 0.001},           // torchvision model documentation, resnet50 GFLOPS
		{"mobilenet_v2", MobileNetV2, 0.301, 0.001},    // torchvision model documentation, mobilenet_v2 GFLOPS
		{"squeezenet1_1", SqueezeNet1_1, 0.349, 0.001}, // torchvision model documentation, squeezenet1_1 GFLOPS
		{"alexnet", AlexNet, 0.714, 0.001},             // torchvision model documentation, alexnet GFLOPS
		{"vgg16", VGG16, 15.47, 0.01},                  // torchvision model documentation, vgg16 GFLOPS
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			m, err := c.build(Options{Declared: true, ValueInfo: true})
			if err != nil {
				t.Fatal(err)
			}
			got := float64(countMACs(t, m)) / 1e9
			// Within 0.1 % (the README's claim) and equal at the
			// documentation's rounding (half a unit of its last digit).
			if d := math.Abs(got - c.gmacs); d > 0.001*c.gmacs || d > c.unit/2 {
				t.Errorf("MACs = %.4f G, want %.3f G within 0.1%% and at the documentation's rounding", got, c.gmacs)
			}
			t.Logf("%.4f G MACs", got)
		})
	}
}

func TestMobileNetV2QDQ(t *testing.T) {
	float, err := MobileNetV2(Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	m, err := MobileNetV2QDQ(Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	// Derived: folding BatchNormalization replaces its scale and bias (two
	// per channel) by one conv bias per channel.
	want := countParams(t, float) - countBNChannels(float)
	if got := countParams(t, m); got != want {
		t.Errorf("params = %d, want %d", got, want)
	}
	producer := map[string]*model.Node{}
	for _, n := range m.Graph.Nodes {
		for _, o := range n.Outputs {
			producer[o] = n
		}
	}
	convs := 0
	for _, n := range m.Graph.Nodes {
		switch n.Op {
		case "BatchNormalization":
			t.Errorf("%s: BatchNormalization left in a QDQ model", n.Name)
		case "Conv", "Gemm":
			convs++
			for i, in := range n.Inputs {
				p := producer[in]
				if p == nil || p.Op != "DequantizeLinear" {
					t.Errorf("%s: input %d %q does not come from DequantizeLinear", n.Name, i, in)
					continue
				}
				q := m.Graph.Initializer(p.Inputs[0])
				if i > 0 && (q == nil || (i == 1 && q.DType != model.Int8) || (i == 2 && q.DType != model.Int32)) {
					t.Errorf("%s: input %d is not an int8 weight or int32 bias initializer", n.Name, i)
				}
			}
		}
	}
	if convs != 53 { // 52 convolutions (torchvision's mobilenet_v2) and the classifier
		t.Errorf("%d Conv and Gemm nodes, want 53", convs)
	}
}

func TestZooSmallMemory(t *testing.T) {
	// vgg16 has 138 M parameters: 553 MB at float32. Declared, the whole
	// model must come to a few hundred KB.
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&before)
	m, err := VGG16(Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	runtime.ReadMemStats(&after)
	if got := after.TotalAlloc - before.TotalAlloc; got > 4<<20 {
		t.Errorf("building declared vgg16 allocated %d bytes", got)
	}
	runtime.KeepAlive(m)
}

func TestZooOptions(t *testing.T) {
	for _, name := range Architectures() {
		t.Run(name, func(t *testing.T) {
			f, ok := Architecture(name)
			if !ok {
				t.Fatal("not found")
			}
			m, err := f(Options{Declared: true, BatchSymbol: "N"})
			if err != nil {
				t.Fatal(err)
			}
			if m.Graph.Name == "" || m.Format != "onnx" || m.IRVersion != 8 || m.Opset("") != 13 || m.ProducerName != "loadline-build" {
				t.Errorf("model header %q %q ir %d opset %d %q", m.Graph.Name, m.Format, m.IRVersion, m.Opset(""), m.ProducerName)
			}
			in := m.Graph.Inputs[0].Type.Shape
			out := m.Graph.Outputs[0].Type.Shape
			if in.String() != "[N,3,224,224]" || out.String() != "[N,1000]" {
				t.Errorf("input %s, output %s", in, out)
			}
		})
	}
	if _, ok := Architecture("resnet19"); ok {
		t.Error("resnet19 found")
	}
	if _, err := AlexNet(Options{Size: 200, Declared: true}); err == nil {
		t.Error("alexnet at 200: no error for a feature map adaptive pooling cannot window")
	}
	// 448 input gives 13×13 features for AlexNet: 13 is no multiple of 6.
	// VGG16 at 448 gives 14×14, pooled by a 2×2 AveragePool.
	m, err := VGG16(Options{Size: 448, Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	if countParams(t, m) != 138_357_544 {
		t.Errorf("vgg16 at 448: params changed")
	}
	if _, err := MobileNetV2QDQ(Options{DType: model.Float16, Declared: true}); err == nil {
		t.Error("QDQ at float16: no error")
	}
	half, err := MobileNetV2(Options{DType: model.Float16, Classes: 10, Size: 32, Width: 0.5})
	if err != nil {
		t.Fatal(err)
	}
	for _, init := range half.Graph.Initializers {
		if init.DType != model.Float16 || !init.HasData() {
			t.Fatalf("%s is %s, data %v", init.Name, init.DType, init.HasData())
		}
	}
}
