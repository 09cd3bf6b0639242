package measure

import (
	"testing"

	"github.com/loadline/loadline/model/build"
)

// TestParamsPublished checks params on the reference architectures of
// model/build (BatchNormalization unfolded, 224×224, batch 1) against the
// counts torchvision's model documentation publishes (num_params), exactly.
func TestParamsPublished(t *testing.T) {
	cases := []struct {
		arch string
		want int64
	}{
		{"resnet18", 11_689_512},     // torchvision model documentation
		{"resnet50", 25_557_032},     // torchvision model documentation
		{"mobilenet_v2", 3_504_872},  // torchvision model documentation
		{"squeezenet1_1", 1_235_496}, // torchvision model documentation
		{"alexnet", 61_100_840},      // torchvision model documentation
		{"vgg16", 138_357_544},       // torchvision model documentation
	}
	for _, c := range cases {
		t.Run(c.arch, func(t *testing.T) {
			f, ok := build.Architecture(c.arch)
			if !ok {
				t.Fatalf("no architecture %q", c.arch)
			}
			m, err := f(build.Options{Declared: true})
			if err != nil {
				t.Fatal(err)
			}
			met, err := Measure(m, 0, Options{})
			if err != nil {
				t.Fatal(err)
			}
			if met.Params != c.want {
				t.Errorf("params = %d, torchvision publishes %d (diff %+d)", met.Params, c.want, met.Params-c.want)
			}
			if met.ParamBytes != 4*c.want {
				t.Errorf("param_bytes = %d, want 4 × params = %d (float32)", met.ParamBytes, 4*c.want)
			}
			if len(met.Unresolved) > 0 {
				t.Errorf("unresolved nodes: %v", met.Unresolved)
			}
		})
	}
}

// TestParamBytesQuantized: the int8 QDQ twin of MobileNetV2 stores its
// weights in about a quarter of the float model's bytes (common practice:
// 8-bit quantization shrinks fp32 weights about 4×). Its int32 biases and
// the folding of BatchNormalization keep it from being exactly a quarter.
func TestParamBytesQuantized(t *testing.T) {
	f, err := build.MobileNetV2(build.Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	q, err := build.MobileNetV2QDQ(build.Options{Declared: true})
	if err != nil {
		t.Fatal(err)
	}
	mf, err := Measure(f, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	mq, err := Measure(q, 0, Options{})
	if err != nil {
		t.Fatal(err)
	}
	ratio := float64(mq.ParamBytes) / float64(mf.ParamBytes)
	t.Logf("param_bytes float32 %d, int8 %d, ratio %.3f", mf.ParamBytes, mq.ParamBytes, ratio)
	if ratio < 0.24 || ratio > 0.27 {
		t.Errorf("int8/float32 param_bytes ratio %.3f, want about 0.25", ratio)
	}
}
