package measure

import (
	"math/rand"
	"reflect"
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// TestDeployedOffIsGraphView: with every rewrite off the deployed view is
// the graph view, exactly, on random DAGs and the reference architectures.
func TestDeployedOffIsGraphView(t *testing.T) {
	for seed := range int64(200) {
		inf := randomGraph(rand.New(rand.NewSource(seed)))
		if p, q := PlanMemory(inf), PlanDeployed(inf, DeployOptions{}); !reflect.DeepEqual(p, q) {
			t.Fatalf("seed %d: graph view %+v, deployed view with no rewrites %+v", seed, p, q)
		}
	}
	for _, arch := range build.Architectures() {
		f, _ := build.Architecture(arch)
		m, err := f(build.Options{Declared: true})
		if err != nil {
			t.Fatal(err)
		}
		inf, err := Infer(m, InferOptions{})
		if err != nil {
			t.Fatal(err)
		}
		if p, q := PlanMemory(inf), PlanDeployed(inf, DeployOptions{}); !reflect.DeepEqual(p, q) {
			t.Errorf("%s: graph view and deployed view with no rewrites differ", arch)
		}
	}
}

// TestDeployedRandomDAGs: the deployed view's layouts keep the planner's
// invariants on random DAGs whose ops trigger every rewrite: arena ≥ peak,
// no shared bytes between tensors live at once, determinism; and no step
// holds more than in the graph view (a fused or aliased tensor has its
// input's size and takes over where the input's lifetime ends; an in-place
// output is no larger than the input whose buffer it takes over).
func TestDeployedRandomDAGs(t *testing.T) {
	all := DefaultDeployOptions()
	all.InPlaceDepthwise = true
	for seed := range int64(200) {
		inf := randomGraph(rand.New(rand.NewSource(seed)))
		graph := PlanMemory(inf)
		for _, opts := range []DeployOptions{DefaultDeployOptions(), all} {
			p := PlanDeployed(inf, opts)
			if p.ArenaBytes < p.PeakLiveBytes {
				t.Fatalf("seed %d %+v: arena %d < peak %d", seed, opts, p.ArenaBytes, p.PeakLiveBytes)
			}
			for s := range p.LiveBytesByStep {
				if p.LiveBytesByStep[s] > graph.LiveBytesByStep[s] {
					t.Fatalf("seed %d %+v: step %d holds %d B deployed, above the graph view's %d", seed, opts, s, p.LiveBytesByStep[s], graph.LiveBytesByStep[s])
				}
			}
			checkPlacements(t, p.Placements, p.ArenaBytes)
			if q := PlanDeployed(inf, opts); !reflect.DeepEqual(p, q) {
				t.Fatalf("seed %d: not deterministic", seed)
			}
		}
	}
}

// TestDeployedConvBNReluFlatten: x → Conv (1×1, 4 out) → BatchNormalization
// → Relu → Flatten → Gemm (10 out), float32. x [1,2,4,4] = 128 B; c, bn, r
// [1,4,4,4] = 256 B; f [1,64] = 256 B; y [1,10] = 40 B. Hand-worked:
//
// Graph view, lifetimes x 0..0, c 0..1, bn 1..2, r 2..3, f 3..4, y 4..4:
// steps 384, 512, 512, 512, 296 → peak 512.
//
// Deployed, default: BN folds into the Conv, Relu fuses into it, Flatten
// aliases r: buffers x 0..0 (128 B), r 0..4 (256 B, written at step 0,
// read through f by the Gemm at step 4), y 4..4 (40 B). Steps 384, 256,
// 256, 256, 296 → peak 384 at step 0. Greedy: r at 0, x at 256, y at 256
// → arena 384.
//
// FoldBN off: c 0..1 stored, Relu fuses into the BatchNormalization (r
// written at step 1): step 1 holds c + r = 512. AliasViews off: f is its
// own 3..4, r ends at 3: step 3 holds r + f = 512.
func TestDeployedConvBNReluFlatten(t *testing.T) {
	b := build.New("cbr", 13, build.Declared())
	x := b.Input("x", model.Float32, 1, 2, 4, 4)
	y := b.Conv("c", x, build.Conv2D(4, 1, 1, 0))
	y = b.BatchNormalization("bn", y, 0)
	y = b.Relu("r", y)
	y = b.Flatten("f", y, 1)
	b.Output(b.Gemm("y", y, 10, true))
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	inf, err := Infer(m, InferOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if g := PlanMemory(inf); !reflect.DeepEqual(g.LiveBytesByStep, []int64{384, 512, 512, 512, 296}) { // hand-worked, above
		t.Errorf("graph view by step %v", g.LiveBytesByStep)
	}
	p := PlanDeployed(inf, DefaultDeployOptions())
	if want := []int64{384, 256, 256, 256, 296}; !reflect.DeepEqual(p.LiveBytesByStep, want) { // hand-worked, above
		t.Errorf("deployed by step %v, want %v", p.LiveBytesByStep, want)
	}
	if p.PeakLiveBytes != 384 || p.ArenaBytes != 384 || !reflect.DeepEqual(p.LiveAtPeak, []string{"x", "r"}) { // hand-worked: 128 + 256
		t.Errorf("deployed peak %d %v, arena %d; want 384 [x r], 384", p.PeakLiveBytes, p.LiveAtPeak, p.ArenaBytes)
	}
	checkPlacements(t, p.Placements, p.ArenaBytes)
	noBN := DefaultDeployOptions()
	noBN.FoldBN = false
	if q := PlanDeployed(inf, noBN); q.PeakLiveBytes != 512 || q.PeakStep != 1 { // hand-worked: c + r = 256 + 256 at step 1
		t.Errorf("FoldBN off: peak %d at step %d, want 512 at 1", q.PeakLiveBytes, q.PeakStep)
	}
	noAlias := DefaultDeployOptions()
	noAlias.AliasViews = false
	if q := PlanDeployed(inf, noAlias); q.PeakLiveBytes != 512 || q.PeakStep != 3 { // hand-worked: r + f = 256 + 256 at step 3
		t.Errorf("AliasViews off: peak %d at step %d, want 512 at 3", q.PeakLiveBytes, q.PeakStep)
	}
}

// TestDeployedMobileNetV2 checks the deployed view of MobileNetV2 1.0 at
// 224×224, batch 1.
//
// int8 QDQ (build.MobileNetV2QDQ): every Conv (+ Clip) + QuantizeLinear is
// one int8 tensor and every DequantizeLinear reads it in place. The peak is
// in features.2 (16 → 96 → 24 channels, stride 2). Without in-place
// depthwise it is the depthwise step: its 96×112×112 input and 96×56×56
// output, 1,204,224 + 301,056 = 1,505,280 B (derived). With in-place
// depthwise the output overwrites the input, and the peak is the expansion
// step: 16×112×112 input + 96×112×112 output = 200,704 + 1,204,224 =
// 1,404,928 B — MCUNetV2 (Lin et al. 2021), Fig. 1: 1372 kB; arithmetic
// derived. No later step comes close: from 56×56 on the widest tensors are
// 144×56×56 = 451,584 B.
//
// float32 (build.MobileNetV2): BatchNormalization and Clip fold into each
// Conv, leaving the same tensors at 4 bytes an element: 4 × 1,505,280 =
// 6,021,120 B, and 4 × 1,404,928 = 5,619,712 B in place (derived).
func TestDeployedMobileNetV2(t *testing.T) {
	inPlace := DefaultDeployOptions()
	inPlace.InPlaceDepthwise = true
	cases := []struct {
		name  string
		build func(build.Options) (*model.Model, error)
		opts  DeployOptions
		want  int64
		peak  []string
	}{
		{"int8", build.MobileNetV2QDQ, DefaultDeployOptions(), 112*112*96 + 56*56*96, nil},       // derived: 1,505,280
		{"int8 in place", build.MobileNetV2QDQ, inPlace, 112*112*16 + 112*112*96, nil},           // MCUNetV2 Fig. 1: 1,404,928
		{"float32", build.MobileNetV2, DefaultDeployOptions(), 4 * (112*112*96 + 56*56*96), nil}, // derived: 6,021,120
		{"float32 in place", build.MobileNetV2, inPlace, 4 * (112*112*16 + 112*112*96), nil},     // derived: 5,619,712
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			m, err := c.build(build.Options{Declared: true})
			if err != nil {
				t.Fatal(err)
			}
			inf, err := Infer(m, InferOptions{})
			if err != nil {
				t.Fatal(err)
			}
			p := PlanDeployed(inf, c.opts)
			t.Logf("deployed peak %d B at step %d %v, arena %d B, ratio %.4f", p.PeakLiveBytes, p.PeakStep, p.LiveAtPeak, p.ArenaBytes, p.Ratio())
			if p.PeakLiveBytes != c.want {
				t.Errorf("peak %d, want %d", p.PeakLiveBytes, c.want)
			}
			if p.ArenaBytes < p.PeakLiveBytes || len(p.Unresolved) != 0 {
				t.Errorf("arena %d, unresolved %v", p.ArenaBytes, p.Unresolved)
			}
			checkPlacements(t, p.Placements, p.ArenaBytes)
		})
	}
}
