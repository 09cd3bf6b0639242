package target

import (
	"math"
	"math/rand"
	"strings"
	"testing"
)

func near(a, b float64) bool { return math.Abs(a-b) <= 1e-9*math.Max(1, math.Abs(b)) }

// handTarget is a made-up target with round numbers for hand-worked tests.
func handTarget() *Target {
	return &Target{Name: "hand", Runtime: "tflite-micro", ClockHz: 100e6, PowerMW: 50,
		FlashBytesPerCycle: 1, RAMBytesPerCycle: 4,
		Classes: map[Class]ClassCost{Conv: {PerUnit: 2, Fixed: 100}, Elementwise: {PerUnit: 1, Fixed: 100}}}
}

func TestRooflineHandWorked(t *testing.T) {
	// Hand-worked. Target: 100 MHz, conv 2 cycles/MAC + 100, elementwise
	// 1 cycle/element + 100, flash 1 B/cycle, RAM 4 B/cycle, 50 mW.
	//
	// Layer 0, a convolution: 10,000 MACs, 2,000 weight bytes (flash),
	// 4,000 activation bytes. compute = 100 + 2 × 10,000 = 20,100 cycles;
	// memory = 2,000 / 1 + 4,000 / 4 = 3,000 cycles: compute-bound, 20,100.
	//
	// Layer 1, an Add of 1,000 elements with a 16,000-byte constant:
	// compute = 100 + 1 × 1,000 = 1,100; memory = 16,000 / 1 + 8,000 / 4
	// = 18,000: memory-bound, 18,000 cycles.
	//
	// Total 38,100 cycles at 100 MHz = 0.381 ms; energy 50 mW × 0.381 ms
	// = 19.05 µJ.
	nodes := []Node{
		{Step: 0, Name: "c", Op: "Conv", MACs: 10000, InElements: 1000, OutElements: 1000, WeightBytes: 2000, ActivationBytes: 4000},
		{Step: 1, Name: "a", Op: "Add", InElements: 1000, OutElements: 1000, WeightBytes: 16000, ActivationBytes: 8000},
	}
	e := handTarget().Cost(nodes, WeightsFlash)
	if len(e.Layers) != 2 {
		t.Fatalf("layers %+v", e.Layers)
	}
	if l := e.Layers[0]; l.Cycles != 20100 || l.Bound != ComputeBound || l.MemoryCycles != 3000 {
		t.Errorf("conv layer %+v, want 20,100 cycles, compute-bound, memory 3,000", l)
	}
	if l := e.Layers[1]; l.Cycles != 18000 || l.Bound != MemoryBound || l.ComputeCycles != 1100 {
		t.Errorf("add layer %+v, want 18,000 cycles, memory-bound, compute 1,100", l)
	}
	if e.Cycles != 38100 || !near(e.LatencyMS, 0.381) || !near(e.EnergyUJ, 19.05) {
		t.Errorf("total %v cycles, %v ms, %v µJ; want 38,100, 0.381, 19.05", e.Cycles, e.LatencyMS, e.EnergyUJ)
	}
	// With weights in RAM (4 B/cycle) the Add reads its constant at RAM
	// speed: memory = 16,000/4 + 8,000/4 = 6,000, still above compute
	// 1,100; the conv's memory falls to 500 + 1,000 = 1,500.
	e = handTarget().Cost(nodes, WeightsRAM)
	if e.Layers[1].Cycles != 6000 || e.Layers[0].MemoryCycles != 1500 {
		t.Errorf("weights in RAM: %+v", e.Layers)
	}
}

func TestClockScalingHandWorked(t *testing.T) {
	// Hand-worked: a compute-bound conv of 10,000 MACs costs 20,100 cycles
	// (see above): 0.201 ms at 100 MHz, 0.402 ms at 50 MHz, the clock
	// ratio 2. Power scales with the clock (50 mW → 25 mW), so the energy
	// stays 50 × 0.201 = 25 × 0.402 = 10.05 µJ.
	nodes := []Node{{Name: "c", Op: "Conv", MACs: 10000, WeightBytes: 2000, ActivationBytes: 4000}}
	fast := handTarget().Cost(nodes, WeightsFlash)
	slow := handTarget().WithClock(50e6).Cost(nodes, WeightsFlash)
	if !near(fast.LatencyMS, 0.201) || !near(slow.LatencyMS, 0.402) {
		t.Errorf("latency %v ms at 100 MHz, %v ms at 50 MHz; want 0.201 and 0.402", fast.LatencyMS, slow.LatencyMS)
	}
	if !near(slow.PowerMW, 25) || !near(fast.EnergyUJ, 10.05) || !near(slow.EnergyUJ, 10.05) {
		t.Errorf("power %v mW, energy %v and %v µJ; want 25 mW and 10.05 µJ both", slow.PowerMW, fast.EnergyUJ, slow.EnergyUJ)
	}
	// Lookup's NAME@CLOCK is the same scaling.
	a, err := Lookup("m4-reference@60MHz")
	if err != nil {
		t.Fatal(err)
	}
	if a.ClockHz != 60e6 || !near(a.PowerMW, Builtin["m4-reference"].PowerMW/2) {
		t.Errorf("m4-reference@60MHz: %v Hz, %v mW", a.ClockHz, a.PowerMW)
	}
	for _, bad := range []string{"m4-reference@fast", "m4-reference@0MHz", "m5-reference", "m4-reference@12 parsecs"} {
		if _, err := Lookup(bad); err == nil {
			t.Errorf("Lookup(%q) accepted", bad)
		}
	}
}

func TestUncostedNodes(t *testing.T) {
	nodes := []Node{
		{Name: "x", Op: "MyOp", Domain: "com.example"},
		{Name: "y", Op: "Relu", InElements: 10, OutElements: 10},
		{Name: "z", Op: "MaxPool", InElements: 40, OutElements: 10},
	}
	e := handTarget().Cost(nodes, "")
	if len(e.Uncosted) != 2 || !strings.Contains(e.Uncosted[0].Reason, "com.example:MyOp") || !strings.Contains(e.Uncosted[1].Reason, "no cost for class pooling") {
		t.Errorf("uncosted %+v", e.Uncosted)
	}
	if len(e.Layers) != 1 || e.Layers[0].Cycles != 110 {
		t.Errorf("layers %+v, want the Relu at 100 + 10 cycles", e.Layers)
	}
}

func TestClassify(t *testing.T) {
	for _, c := range []struct {
		domain, op string
		dw         bool
		want       Class
		ok         bool
	}{
		{"", "Conv", false, Conv, true},
		{"", "Conv", true, Depthwise, true},
		{"ai.onnx", "Gemm", false, Dense, true},
		{"tflite", "DEPTHWISE_CONV_2D", false, Depthwise, true},
		{"tflite", "SVDF", false, Recurrent, true},
		{"tflite", "AVERAGE_POOL_2D", false, Pooling, true},
		{"tflite", "RESHAPE", false, Movement, true},
		{"tflite", "Conv", false, "", false},
		{"tflite.custom", "MyOp", false, "", false},
		{"", "If", false, "", false},
	} {
		got, ok := Classify(c.domain, c.op, c.dw)
		if got != c.want || ok != c.ok {
			t.Errorf("Classify(%q, %q, %v) = %q, %v; want %q, %v", c.domain, c.op, c.dw, got, ok, c.want, c.ok)
		}
	}
}

// bruteNNLS solves NNLS by trying every support set: the oracle for small
// problems.
func bruteNNLS(A [][]float64, b []float64) float64 {
	n := len(A[0])
	best := math.Inf(1)
	for mask := 0; mask < 1<<n; mask++ {
		passive := make([]bool, n)
		for j := range passive {
			passive[j] = mask&(1<<j) != 0
		}
		x := lsq(A, b, passive)
		ok := true
		for _, v := range x {
			if v < -1e-9 {
				ok = false
			}
		}
		if ok {
			best = math.Min(best, norm(residual(A, x, b)))
		}
	}
	return best
}

func TestNNLS(t *testing.T) {
	// Hand-worked: identity, b = (1, −1): the best x ≥ 0 is (1, 0).
	x, err := NNLS([][]float64{{1, 0}, {0, 1}}, []float64{1, -1})
	if err != nil || !near(x[0], 1) || x[1] != 0 {
		t.Errorf("NNLS identity: %v %v, want [1 0]", x, err)
	}
	// Hand-worked: an exact non-negative solution is found: A·(2, 3).
	A := [][]float64{{1, 2}, {3, 1}, {1, 1}}
	x, _ = NNLS(A, []float64{8, 9, 5})
	if !near(x[0], 2) || !near(x[1], 3) {
		t.Errorf("NNLS exact: %v, want [2 3]", x)
	}
	// Against the brute-force oracle on random small problems.
	r := rand.New(rand.NewSource(1))
	for trial := 0; trial < 300; trial++ {
		m, n := 2+r.Intn(4), 1+r.Intn(4)
		A := make([][]float64, m)
		b := make([]float64, m)
		for i := range A {
			A[i] = make([]float64, n)
			for j := range A[i] {
				A[i][j] = r.NormFloat64()
			}
			b[i] = r.NormFloat64()
		}
		x, err := NNLS(A, b)
		if err != nil {
			t.Fatal(err)
		}
		for _, v := range x {
			if v < 0 {
				t.Fatalf("negative entry %v", x)
			}
		}
		got, want := norm(residual(A, x, b)), bruteNNLS(A, b)
		if got > want+1e-7*(1+want) {
			t.Fatalf("trial %d: residual %v, the best is %v (A %v b %v x %v)", trial, got, want, A, b, x)
		}
	}
	if _, err := NNLS([][]float64{{math.NaN()}}, []float64{1}); err == nil {
		t.Error("NaN accepted")
	}
	if _, err := NNLS(nil, nil); err == nil {
		t.Error("empty system accepted")
	}
}

func TestCalibrateRecoversKnownTarget(t *testing.T) {
	// Three synthetic models timed by a known target: calibration from the
	// hand target's fixed numbers must give back conv 3 and dense 5
	// cycles/MAC exactly, with zero error.
	truth := handTarget()
	truth.Classes[Conv] = ClassCost{PerUnit: 3, Fixed: 100}
	truth.Classes[Dense] = ClassCost{PerUnit: 5, Fixed: 100}
	mk := func(conv, dense int64) []Node {
		return []Node{{Op: "Conv", MACs: conv}, {Op: "Gemm", MACs: dense}}
	}
	var samples []Sample
	for i, m := range [][2]int64{{1e6, 1e5}, {2e5, 8e5}, {5e5, 5e5}} {
		n := mk(m[0], m[1])
		samples = append(samples, Sample{Name: string(rune('a' + i)), Nodes: n, LatencyMS: truth.Cost(n, "").LatencyMS, EnergyUJ: truth.Cost(n, "").EnergyUJ})
	}
	base := handTarget()
	base.Classes[Dense] = ClassCost{PerUnit: 1, Fixed: 100}
	base.PowerMW = 1
	fit, err := Calibrate(base, samples, nil, "")
	if err != nil {
		t.Fatal(err)
	}
	if !near(fit.Target.Classes[Conv].PerUnit, 3) || !near(fit.Target.Classes[Dense].PerUnit, 5) || !near(fit.Target.PowerMW, 50) {
		t.Errorf("fit %+v power %v, want conv 3, dense 5, 50 mW", fit.Target.Classes, fit.Target.PowerMW)
	}
	if fit.Underdetermined != "" || MaxAbsError(fit.Samples, false) > 1e-6 || MaxAbsError(fit.LeaveOneOut, false) > 1e-6 {
		t.Errorf("errors %+v loo %+v under %q", fit.Samples, fit.LeaveOneOut, fit.Underdetermined)
	}
	// One model cannot tell two classes apart.
	fit, err = Calibrate(base, samples[:1], nil, "")
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(fit.Underdetermined, "2 numbers (conv, dense) from 1 measurement") {
		t.Errorf("one model, two classes: %q", fit.Underdetermined)
	}
	// Two models with the same mix cannot either.
	same := []Sample{samples[0], {Name: "twice", Nodes: mk(2e6, 2e5), LatencyMS: 2 * samples[0].LatencyMS}}
	fit, _ = Calibrate(base, same, nil, "")
	if !strings.Contains(fit.Underdetermined, "too alike") {
		t.Errorf("proportional mixes: %q", fit.Underdetermined)
	}
	if _, err := Calibrate(base, []Sample{{Name: "x", LatencyMS: 0}}, nil, ""); err == nil {
		t.Error("a 0 ms measurement accepted")
	}
}
