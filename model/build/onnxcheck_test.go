package build_test

import (
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// checkScript runs ONNX's own checker with full_check (which includes
// strict shape inference, so the types the builder tracked for the outputs
// and value info must agree with ONNX's) on every file named.
const checkScript = `
import sys, onnx
bad = 0
for p in sys.argv[1:]:
    try:
        # By path, so that external data resolves beside the model and is
        # not read into memory.
        onnx.checker.check_model(p, full_check=True)
    except Exception as e:
        bad += 1
        print("FAIL %s: %s" % (p, str(e)[:1500]))
sys.exit(1 if bad else 0)
`

// python returns the interpreter with the onnx package, or skips (fails
// when LOADLINE_REQUIRE_CORPUS=1).
func python(t *testing.T) string {
	t.Helper()
	const py = "/usr/bin/python3"
	out, err := exec.Command(py, "-c", "import onnx; print(onnx.__version__)").CombinedOutput()
	if err != nil {
		corpus.Missing(t, fmt.Sprintf("python3-onnx is not available (%v: %s); install the Debian package python3-onnx", err, strings.TrimSpace(string(out))))
	}
	t.Logf("onnx %s", strings.TrimSpace(string(out)))
	return py
}

// kitchenSink uses every operator the builder writes, at one opset.
func kitchenSink(opset int64) (*model.Model, error) {
	b := build.New(fmt.Sprintf("ops_opset%d", opset), opset, build.WithValueInfo())
	x := b.InputShape("x", model.Float32, model.Shape{model.Sym("N"), model.Known(4), model.Known(8), model.Known(8)})
	y := b.Conv("conv", x, build.Conv2D(8, 3, 1, 1).WithBias())
	y = b.BatchNormalization("bn", y, 0)
	y = b.Relu6("relu6", y)
	y = b.Conv("dw", y, build.Conv2D(8, 3, 2, 1).Grouped(8).Dilated(1))
	y = b.LeakyRelu("leaky", y, 0.1)
	y = b.HardSigmoid("hsig", y, 1.0/6, 0.5)
	if opset >= 14 {
		y = b.HardSwish("hswish", y)
	}
	y = b.Mul("mul", y, b.Sigmoid("sig", y))
	y = b.Add("add", y, b.Weight("add.b", model.Float32, 8, 1, 1))
	y = b.ConvTranspose("up", y, build.ConvSpec{Out: 4, Kernel: []int64{2, 2}, Strides: []int64{2, 2}, Bias: true})
	y = b.Concat("cat", 1, y, x)
	ceil := build.Pool2D(3, 2, 0)
	if opset >= 10 {
		ceil = ceil.Ceil()
	}
	p := b.MaxPool("maxpool", y, ceil)
	p = b.AveragePool("avgpool", p, build.PoolSpec{Kernel: []int64{2, 2}, Pads: []int64{0, 0, 1, 1}, CountIncludePad: true})
	p = b.Pad("pad", p, []int64{0, 0, 1, 1, 0, 0, 1, 1}, "constant", 0.5)
	p = b.Pad("pad_edge", p, []int64{0, 0, 1, 1, 0, 0, 0, 0}, "edge", 0)
	if opset >= 10 {
		p = b.Resize("resize", p, []float64{1, 1, 2, 2}, "nearest")
	}
	g := b.GlobalAveragePool("gap", p)
	g = b.Squeeze("squeeze", g, 2, 3)
	g = b.Unsqueeze("unsqueeze", g, 1)
	g = b.Flatten("flatten", g, 1)
	g = b.Dropout("dropout", g, 0.3)
	g = b.Identity("identity", g)
	g = b.Gemm("fc", g, 6, true)
	g = b.Tanh("tanh", g)
	g = b.MatMul("matmul", g, b.Weight("matmul.w", model.Float32, 6, 5))
	g = b.Softmax("softmax", g, 1)
	b.Output(g)
	// A sequence branch: [N, 8, 8, 8] → [8, N, 64] → LSTM and GRU.
	s := b.Transpose("to_seq", y, 2, 0, 1, 3)
	s = b.Reshape("seq", s, 8, 0, -1)
	l := b.LSTM("lstm", s, build.RNNSpec{Hidden: 5, Direction: "bidirectional", Bias: true})
	b.Output(l)
	r := b.GRU("gru", s, build.RNNSpec{Hidden: 3, Bias: true})
	b.Output(b.Reshape("gru_flat", r, 8, -1))
	if opset >= 10 {
		q := b.QDQ(y, model.Int8, 0.1, 0)
		w := b.QuantizedWeight("qconv.weight", model.Int8, 2, 8, 1, 1)
		bias := b.QuantizedWeight("qconv.bias", model.Int32, 2)
		b.Output(b.ConvWith("qconv", q, w, bias, build.ConvSpec{}))
	}
	return b.Model()
}

func TestONNXChecker(t *testing.T) {
	py := python(t)
	dir := t.TempDir()
	type named struct {
		name string
		make func() (*model.Model, error)
	}
	var models []named
	for _, opset := range []int64{9, 11, 13, 14, 17} {
		models = append(models, named{fmt.Sprintf("ops_opset%d", opset), func() (*model.Model, error) { return kitchenSink(opset) }})
	}
	small := build.Options{Size: 32, Classes: 10, ValueInfo: true, BatchSymbol: "batch"}
	// The small architectures are materialised (at most 13 MB of weights);
	// the big ones are declared, written with external-data references to a
	// sparse file, which the checker does not read.
	for _, arch := range build.Architectures() {
		f, _ := build.Architecture(arch)
		o := small
		name := arch + "_32"
		switch arch {
		case "alexnet", "vgg16":
			o = build.Options{Declared: true, ValueInfo: true} // 224: their adaptive pools need it
			name = arch + "_declared"
		case "resnet18", "resnet50":
			o.Declared = true
			name += "_declared"
		}
		models = append(models, named{name, func() (*model.Model, error) { return f(o) }})
	}
	models = append(models,
		named{"mobilenet_v2_32_fp16", func() (*model.Model, error) {
			return build.MobileNetV2(build.Options{Size: 32, Classes: 10, DType: model.Float16, ValueInfo: true})
		}},
		named{"resnet50_fp16_opset17_declared", func() (*model.Model, error) {
			return build.ResNet50(build.Options{Size: 64, DType: model.Float16, Opset: 17, ValueInfo: true, Declared: true})
		}},
		named{"mobilenet_v2_opset11_qdq", func() (*model.Model, error) {
			return build.MobileNetV2QDQ(build.Options{Size: 32, Classes: 10, Opset: 11, Width: 0.5})
		}},
	)
	var paths []string
	for _, nm := range models {
		m, err := nm.make()
		if err != nil {
			t.Fatalf("%s: %v", nm.name, err)
		}
		var data []byte
		var off int64
		if strings.HasSuffix(nm.name, "_declared") {
			data, err = onnx.EncodeWithExternal(m, func(t *model.Tensor) (string, int64) {
				o := off
				off += t.StorageBytes()
				return nm.name + ".weights", o
			})
		} else {
			data, err = onnx.Encode(m)
		}
		if err != nil {
			t.Fatalf("%s: encode: %v", nm.name, err)
		}
		if strings.HasSuffix(nm.name, "_declared") {
			// The checker wants the weights file to exist; a sparse file of
			// the promised length takes no disk blocks.
			f, err := os.Create(filepath.Join(dir, nm.name+".weights"))
			if err == nil {
				err = f.Truncate(off)
				f.Close()
			}
			if err != nil {
				t.Fatal(err)
			}
		}
		p := filepath.Join(dir, nm.name+".onnx")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		paths = append(paths, p)
	}
	out, err := exec.Command(py, append([]string{"-c", checkScript}, paths...)...).CombinedOutput()
	if err != nil {
		t.Fatalf("onnx.checker.check_model(full_check=True): %v\n%s", err, out)
	}
	t.Logf("%d models pass onnx.checker.check_model(full_check=True)", len(paths))
}
