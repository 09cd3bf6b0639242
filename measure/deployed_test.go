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

// TestDeployedNoOpViews: x [1,2,8,8] → Conv c1 (1×1, 4 out) → Cast k (to
// float32, what it already is) → Relu r → Identity id → Dropout d
// (inference, no mask) → Conv y (1×1, 2 out), float32. x and y 512 B, the
// others 1024 B. Hand-worked:
//
// Graph view, lifetimes x 0..0, c1 0..1, k 1..2, r 2..3, id 3..4, d 4..5,
// y 5..5: steps 1536, 2048, 2048, 2048, 2048, 1536 → peak 2048.
//
// Deployed: the Cast copies nothing, so it is a view of c1; the Relu fuses
// through it into c1's Conv (r written at step 0); the Identity and the
// Dropout are views of r. Buffers x 0..0 (512), r 0..5 (1024), y 5..5
// (512): steps 1536, 1024, 1024, 1024, 1024, 1536 → peak 1536; greedy
// places r at 0, x and y at 1024 → arena 1536.
func TestDeployedNoOpViews(t *testing.T) {
	b := build.New("noop", 13, build.Declared())
	x := b.Input("x", model.Float32, 1, 2, 8, 8)
	y := b.Conv("c1", x, build.Conv2D(4, 1, 1, 0))
	y = b.Cast("k", y, model.Float32)
	y = b.Relu("r", y)
	y = b.Identity("id", y)
	y = b.Dropout("d", y, 0.5)
	b.Output(b.Conv("y", y, build.Conv2D(2, 1, 1, 0)))
	inf := inferBuilt(t, b)
	if g := PlanMemory(inf); !reflect.DeepEqual(g.LiveBytesByStep, []int64{1536, 2048, 2048, 2048, 2048, 1536}) { // hand-worked, above
		t.Errorf("graph view by step %v", g.LiveBytesByStep)
	}
	p := PlanDeployed(inf, DefaultDeployOptions())
	if want := []int64{1536, 1024, 1024, 1024, 1024, 1536}; !reflect.DeepEqual(p.LiveBytesByStep, want) { // hand-worked, above
		t.Errorf("deployed by step %v, want %v", p.LiveBytesByStep, want)
	}
	if p.PeakLiveBytes != 1536 || p.ArenaBytes != 1536 { // hand-worked: 512 + 1024
		t.Errorf("deployed peak %d, arena %d; want 1536, 1536", p.PeakLiveBytes, p.ArenaBytes)
	}
	checkPlacements(t, p.Placements, p.ArenaBytes)
	// A Cast that converts is a copy: with the Cast to float16 the view
	// chain breaks, and the Relu cannot fuse into the Conv.
	b = build.New("cast16", 13, build.Declared())
	x = b.Input("x", model.Float32, 1, 2, 8, 8)
	y = b.Conv("c1", x, build.Conv2D(4, 1, 1, 0))
	y = b.Cast("k", y, model.Float16)
	b.Output(b.Relu("r", y))
	p = PlanDeployed(inferBuilt(t, b), DefaultDeployOptions())
	// Hand-worked: x 512 + c1 1024 at step 0; c1 1024 + k 512 at step 1
	// (the Relu fuses into the Cast, k being the Cast's only reader).
	if want := []int64{1536, 1536, 512}; !reflect.DeepEqual(p.LiveBytesByStep, want) {
		t.Errorf("converting Cast: deployed by step %v, want %v", p.LiveBytesByStep, want)
	}
}

func inferBuilt(t *testing.T, b *build.Builder) *Inference {
	t.Helper()
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	inf, err := Infer(m, InferOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if len(inf.Unresolved) != 0 {
		t.Fatalf("unresolved: %v", inf.Unresolved)
	}
	return inf
}

// withNoOps rewrites a QDQ model as some exporters write it: a Cast to
// float32 before every QuantizeLinear, and a Cast to int8 then an Identity
// between every QuantizeLinear and the DequantizeLinear nodes reading it.
// None of them changes a value.
func withNoOps(m *model.Model) int {
	g := m.Graph
	var nodes []*model.Node
	added := 0
	rename := map[string]string{}
	for _, n := range g.Nodes {
		for j, in := range n.Inputs {
			if r, ok := rename[in]; ok {
				n.Inputs[j] = r
			}
		}
		if n.Op != "QuantizeLinear" {
			nodes = append(nodes, n)
			continue
		}
		pre := &model.Node{Name: n.Name + "_precast", Op: "Cast", Inputs: []string{n.Inputs[0]}, Outputs: []string{n.Name + "_precast"},
			Attrs: []*model.Attr{{Name: "to", Kind: model.AttrInt, Int: int64(model.Float32)}}}
		n.Inputs[0] = pre.Outputs[0]
		q := n.Outputs[0]
		cast := &model.Node{Name: q + "_cast", Op: "Cast", Inputs: []string{q}, Outputs: []string{q + "_cast"},
			Attrs: []*model.Attr{{Name: "to", Kind: model.AttrInt, Int: int64(model.Int8)}}}
		id := &model.Node{Name: q + "_id", Op: "Identity", Inputs: []string{cast.Outputs[0]}, Outputs: []string{q + "_id"}}
		rename[q] = id.Outputs[0]
		nodes = append(nodes, pre, n, cast, id)
		added += 3
	}
	g.Nodes = nodes
	return added
}

// TestDeployedMobileNetV2NoOps: the int8 QDQ MobileNetV2 with a Cast before
// every QuantizeLinear and a Cast and an Identity between every
// QuantizeLinear and its DequantizeLinear plans exactly as without them:
// 112·112·96 + 56·56·96 = 1,505,280 B without in-place depthwise (derived,
// as in TestDeployedMobileNetV2), 112·112·16 + 112·112·96 = 1,404,928 B
// with it (MCUNetV2, Lin et al. 2021, Fig. 1: 1372 kB; arithmetic derived).
func TestDeployedMobileNetV2NoOps(t *testing.T) {
	inPlace := DefaultDeployOptions()
	inPlace.InPlaceDepthwise = true
	for _, c := range []struct {
		opts       DeployOptions
		peak, want int64
	}{
		{DefaultDeployOptions(), 112*112*96 + 56*56*96, 1505280}, // derived
		{inPlace, 112*112*16 + 112*112*96, 1404928},              // MCUNetV2 Fig. 1, derived
	} {
		if c.peak != c.want {
			t.Fatalf("arithmetic: %d != %d", c.peak, c.want)
		}
		m, err := build.MobileNetV2QDQ(build.Options{Declared: true})
		if err != nil {
			t.Fatal(err)
		}
		plain, err := Infer(m, InferOptions{})
		if err != nil {
			t.Fatal(err)
		}
		ref := PlanDeployed(plain, c.opts)
		m2, err := build.MobileNetV2QDQ(build.Options{Declared: true})
		if err != nil {
			t.Fatal(err)
		}
		if n := withNoOps(m2); n < 100 {
			t.Fatalf("only %d no-op nodes inserted", n)
		}
		inf, err := Infer(m2, InferOptions{})
		if err != nil {
			t.Fatal(err)
		}
		p := PlanDeployed(inf, c.opts)
		if p.PeakLiveBytes != c.want || ref.PeakLiveBytes != c.want {
			t.Errorf("in place %v: peak %d with no-ops, %d without; want %d", c.opts.InPlaceDepthwise, p.PeakLiveBytes, ref.PeakLiveBytes, c.want)
		}
		if p.ArenaBytes != ref.ArenaBytes || len(p.Placements) != len(ref.Placements) {
			t.Errorf("in place %v: arena %d B in %d buffers with no-ops, %d B in %d without", c.opts.InPlaceDepthwise, p.ArenaBytes, len(p.Placements), ref.ArenaBytes, len(ref.Placements))
		}
		checkPlacements(t, p.Placements, p.ArenaBytes)
	}
}

// TestDeployedDecomposedActivations: x [1,2,8,8] → Conv a (3×3, pad 1, 4
// out) → an activation written as several nodes → Conv y (1×1, 2 out),
// float32: x and y 512 B, a and every tensor of the activation 1024 B.
// Each decomposition fuses into the Conv as the one HardSwish node does:
// buffers x 0..0, the activation's result 0..last, y at the last step.
// Hand-worked: steps 512 + 1024 = 1536, then 1024 at each of the k
// activation nodes' steps, then 1024 + 512 = 1536 → peak 1536, arena 1536.
func TestDeployedDecomposedActivations(t *testing.T) {
	f32 := func(b *build.Builder, name string, v float64) build.Value {
		return b.ConstFloats(name, model.Float32, nil, []float64{v})
	}
	cases := []struct {
		name string
		act  func(b *build.Builder, a build.Value) build.Value
		k    int
	}{
		{"HardSwish node", func(b *build.Builder, a build.Value) build.Value { return b.HardSwish("hs", a) }, 1},
		{"SiLU x*Sigmoid(x)", func(b *build.Builder, a build.Value) build.Value { return b.Mul("m", a, b.Sigmoid("s", a)) }, 2},
		{"hard-swish x*HardSigmoid(x)", func(b *build.Builder, a build.Value) build.Value {
			return b.Mul("m", a, b.HardSigmoid("hs", a, 1.0/6, 0.5))
		}, 2},
		{"hard-swish x*Relu6(x+3)/6", func(b *build.Builder, a build.Value) build.Value {
			r := b.Relu6("r6", b.Add("p3", a, f32(b, "three", 3)))
			return b.Div("d6", b.Mul("m", a, r), f32(b, "six", 6))
		}, 4},
		{"hard-swish x*(Relu6(x+3)*(1/6))", func(b *build.Builder, a build.Value) build.Value {
			r := b.Relu6("r6", b.Add("p3", f32(b, "three", 3), a))
			return b.Mul("m", a, b.Mul("s6", r, f32(b, "sixth", 1.0/6)))
		}, 4},
		{"GELU 0.5x(1+Erf(x/√2))", func(b *build.Builder, a build.Value) build.Value {
			e := b.Erf("erf", b.Div("dv", a, f32(b, "sqrt2", 1.4142135)))
			return b.Mul("m2", b.Mul("m1", a, f32(b, "half", 0.5)), b.Add("p1", e, f32(b, "one", 1)))
		}, 5},
		{"GELU tanh approximation", func(b *build.Builder, a build.Value) build.Value {
			c := b.Mul("c3", b.Pow("cube", a, f32(b, "three", 3)), f32(b, "k", 0.044715))
			t := b.Tanh("th", b.Mul("sc", b.Add("in", a, c), f32(b, "s2p", 0.7978845608)))
			return b.Mul("m2", b.Mul("m1", a, f32(b, "half", 0.5)), b.Add("p1", t, f32(b, "one", 1)))
		}, 8},
		{"Mish x*Tanh(Softplus(x))", func(b *build.Builder, a build.Value) build.Value {
			return b.Mul("m", a, b.Tanh("th", b.Softplus("sp", a)))
		}, 3},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			b := build.New("act", 14, build.Declared())
			x := b.Input("x", model.Float32, 1, 2, 8, 8)
			a := b.Conv("a", x, build.Conv2D(4, 3, 1, 1))
			b.Output(b.Conv("y", c.act(b, a), build.Conv2D(2, 1, 1, 0)))
			inf := inferBuilt(t, b)
			p := PlanDeployed(inf, DefaultDeployOptions())
			want := []int64{1536} // hand-worked, above
			for range c.k {
				want = append(want, 1024)
			}
			want = append(want, 1536)
			if !reflect.DeepEqual(p.LiveBytesByStep, want) || p.PeakLiveBytes != 1536 || p.ArenaBytes != 1536 {
				t.Errorf("deployed by step %v (peak %d, arena %d), want %v, 1536, 1536", p.LiveBytesByStep, p.PeakLiveBytes, p.ArenaBytes, want)
			}
			checkPlacements(t, p.Placements, p.ArenaBytes)
			off := DefaultDeployOptions()
			off.FuseActivations = false
			if q := PlanDeployed(inf, off); c.k > 1 && q.PeakLiveBytes <= 1536 {
				t.Errorf("with fusion off the peak is %d, want more than 1536", q.PeakLiveBytes)
			}
		})
	}
	// The Conv's output read by something else too (here: it is also a
	// graph output) is stored, so the SiLU is not fused. Hand-worked, a
	// live 0..3: step 0 x + a = 1536; step 1 a + s = 2048; step 2 a + s +
	// m = 3072; step 3 a + m + y = 2560 → peak 3072.
	b := build.New("act", 14, build.Declared())
	x := b.Input("x", model.Float32, 1, 2, 8, 8)
	a := b.Conv("a", x, build.Conv2D(4, 3, 1, 1))
	b.Output(b.Conv("y", b.Mul("m", a, b.Sigmoid("s", a)), build.Conv2D(2, 1, 1, 0)))
	b.Output(a)
	p := PlanDeployed(inferBuilt(t, b), DefaultDeployOptions())
	if want := []int64{1536, 2048, 3072, 2560}; !reflect.DeepEqual(p.LiveBytesByStep, want) {
		t.Errorf("shared producer output: deployed by step %v, want %v", p.LiveBytesByStep, want)
	}
}

// TestLayerViews: the per-layer view carries the deployed view beside the
// graph view, on TestDeployedConvBNReluFlatten's model (hand-worked there):
// deployed buffers r at offset 0 (256 B, written at step 0 by the Conv
// with BatchNormalization and Relu folded in, read through the Flatten),
// x at 256 (128 B) and y at 256 (40 B, step 4). Every node of the Conv's
// group and the Flatten hold their values in r's buffer.
func TestLayerViews(t *testing.T) {
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
	met, err := Measure(m, 0, Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	want := []LayerView{{384, 256, 0}, {256, 0, 0}, {256, 0, 0}, {256, 0, 0}, {296, 40, 256}} // hand-worked, above
	for i, l := range met.Layers {
		if got := l.Views[ViewDeployed]; got != want[i] {
			t.Errorf("step %d (%s): deployed %+v, want %+v", i, l.Node, got, want[i])
		}
		if g := l.Views[ViewGraph]; g.LiveBytes != l.LiveBytes || g.Offset != l.Offset || g.Bytes != l.Bytes {
			t.Errorf("step %d: graph view %+v differs from the layer's own fields %d/%d/%d", i, g, l.LiveBytes, l.Offset, l.Bytes)
		}
	}
	d := met.MemoryDetail.Views[ViewDeployed]
	if met.MemoryDetail.Judged != ViewDeployed || d.PeakStep != 0 || d.PeakLiveBytes != 384 ||
		!reflect.DeepEqual(d.LiveAtPeak, []LiveTensor{{"x", 128, 256}, {"r", 256, 0}}) { // hand-worked: 128 + 256 at step 0
		t.Errorf("deployed detail %+v", d)
	}
}
