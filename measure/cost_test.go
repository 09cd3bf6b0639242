package measure

import (
	"math"
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// costsOf infers m (binding dims) and counts its costs.
func costsOf(t *testing.T, m *model.Model, dims map[string]int64) *Costs {
	t.Helper()
	inf, err := Infer(m, InferOptions{Dims: dims})
	if err != nil {
		t.Fatalf("Infer: %v", err)
	}
	if len(inf.Unresolved) > 0 {
		t.Fatalf("shape inference left %d node(s) unresolved: %s", len(inf.Unresolved), inf.UnresolvedSummary())
	}
	return CountCosts(inf)
}

func within(got int64, want, tol float64) bool {
	return math.Abs(float64(got)-want) <= tol*want
}

// TestCostsTorchvision checks MACs of the reference architectures at
// 224×224, batch 1, against the published figures, within 0.5 %.
func TestCostsTorchvision(t *testing.T) {
	cases := []struct {
		name  string
		gmacs float64
	}{
		{"resnet18", 1.814},      // torchvision model documentation, resnet18 "GFLOPS" (multiply-adds), confirmed (REFERENCES.md)
		{"resnet50", 4.089},      // torchvision model documentation, resnet50, confirmed
		{"mobilenet_v2", 0.301},  // torchvision model documentation, mobilenet_v2, confirmed
		{"squeezenet1_1", 0.349}, // torchvision model documentation, squeezenet1_1, confirmed
		{"alexnet", 0.714},       // torchvision model documentation, alexnet, confirmed
		{"vgg16", 15.47},         // torchvision model documentation, vgg16, confirmed
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			f, ok := build.Architecture(c.name)
			if !ok {
				t.Fatalf("no architecture %q", c.name)
			}
			m, err := f(build.Options{Declared: true})
			if err != nil {
				t.Fatal(err)
			}
			got := costsOf(t, m, nil)
			if len(got.Unresolved) > 0 {
				t.Fatalf("unresolved: %+v", got.Unresolved)
			}
			if !within(got.MACs, c.gmacs*1e9, 0.005) {
				t.Errorf("MACs %d (%.4f G), published %.3f G", got.MACs, float64(got.MACs)/1e9, c.gmacs)
			}
			t.Logf("%s: %d MACs (%.4f G; published %.3f G), %d FLOPs", c.name, got.MACs, float64(got.MACs)/1e9, c.gmacs, got.FLOPs)
		})
	}
}

// TestCostsMobileNetV1 checks the width multipliers of Howard et al. 2017.
func TestCostsMobileNetV1(t *testing.T) {
	cases := []struct {
		width float64
		macs  float64
	}{
		{1.0, 569e6},  // Howard et al. 2017, "MobileNets", Table 6: 569 M mult-adds, confirmed
		{0.75, 325e6}, // Howard et al. 2017, Table 6: 325 M, confirmed
		{0.5, 149e6},  // Howard et al. 2017, Table 6: 149 M, confirmed
		{0.25, 41e6},  // Howard et al. 2017, Table 6: 41 M, confirmed
	}
	for _, c := range cases {
		m, err := build.MobileNetV1(build.Options{Width: c.width, Declared: true})
		if err != nil {
			t.Fatal(err)
		}
		got := costsOf(t, m, nil)
		if !within(got.MACs, c.macs, 0.01) {
			t.Errorf("width %g: MACs %d, published %.0f", c.width, got.MACs, c.macs)
		}
	}
}

// TestCostTableCoversInference checks that every operator shape inference
// knows has a cost rule or is listed as not costed, so none is counted as
// zero by omission.
func TestCostTableCoversInference(t *testing.T) {
	for _, op := range SupportedOps() {
		_, ruled := flopRules[op]
		_, listed := uncostedOps[op]
		switch {
		case !ruled && !listed:
			t.Errorf("operator %s has no cost rule and is not in uncostedOps", op)
		case ruled && listed:
			t.Errorf("operator %s is both in flopRules and uncostedOps", op)
		}
	}
	known := map[string]bool{}
	for _, op := range SupportedOps() {
		known[op] = true
	}
	for op := range flopRules {
		if !known[op] {
			t.Errorf("flopRules has %s, which shape inference does not know", op)
		}
	}
	for op := range uncostedOps {
		if !known[op] {
			t.Errorf("uncostedOps has %s, which shape inference does not know", op)
		}
	}
}
