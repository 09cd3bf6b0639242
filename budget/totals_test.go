package budget

import (
	"fmt"
	"strings"
	"testing"
	"time"
)

// The device totals, hand-worked. Three models on one device (source:
// hand arithmetic in the comments):
//
//	a: flash 100,000 B, arena 40,000 B, persistent 0, latency 4 ms, every 20 ms
//	b: flash  60,000 B, arena 30,000 B, persistent 2,048 B, latency 10 ms, every 50 ms
//	c: flash  20,000 B, arena 50,000 B, persistent 0, latency 100 ms, every 500 ms
//
// a and b store one identical 16,384-byte constant (a shared first block),
// a parameter of both.
func totalsInputs() []DeviceInput {
	fig := func(file, arena, persist int64, latencyMS float64, digests ...ConstantDigest) *Figures {
		return &Figures{FileBytes: file, ParamBytes: file / 2,
			Memory:    MemoryFigures{Deployed: MemoryView{ArenaBytes: arena, PeakLiveBytes: arena}, PersistentBytes: persist},
			Target:    &TargetFigures{Name: "test", LatencyMS: latencyMS},
			Constants: digests}
	}
	block := ConstantDigest{Name: "stem.weight", Bytes: 16384, Digest: "d1", Weight: true}
	return []DeviceInput{
		{Path: "models/a.onnx", Every: 20 * time.Millisecond, Figures: fig(100_000, 40_000, 0, 4, block, ConstantDigest{Name: "head", Bytes: 4000, Digest: "d2"})},
		{Path: "models/b.onnx", Every: 50 * time.Millisecond, Figures: fig(60_000, 30_000, 2048, 10, ConstantDigest{Name: "backbone.0", Bytes: 16384, Digest: "d1", Weight: true})},
		{Path: "models/c.onnx", Every: 500 * time.Millisecond, Figures: fig(20_000, 50_000, 0, 100)},
	}
}

func TestDeviceTotalsHandWorked(t *testing.T) {
	dev := &Device{Name: "doorbell", Weights: WeightsFlash, Runs: RunsOneAtATime}
	tot, shares, shared := dev.Totals(totalsInputs())
	// flash: 100,000 + 60,000 + 20,000 = 180,000; the shared block's second
	// copy is 16,384 bytes, reported but not subtracted (shared_weights
	// not set).
	if tot.FlashBytes != 180_000 || tot.FlashSharedBytes != 16_384 {
		t.Errorf("flash %d, shared %d; want 180000, 16384", tot.FlashBytes, tot.FlashSharedBytes)
	}
	if len(shared) != 1 || shared[0].Bytes != 16384 || strings.Join(shared[0].Models, ",") != "models/a.onnx,models/b.onnx" {
		t.Errorf("shared %+v", shared)
	}
	// ram one at a time: the largest arena (c's 50,000) + persistent 2,048
	// = 52,048.
	if tot.RAMBytes != 52_048 {
		t.Errorf("ram one-at-a-time %d, want 52048", tot.RAMBytes)
	}
	// load: 4/20 + 10/50 + 100/500 = 0.2 + 0.2 + 0.2 = 0.6.
	if tot.Load == nil || *tot.Load < 0.5999999 || *tot.Load > 0.6000001 {
		t.Errorf("load %v, want 0.6", tot.Load)
	}
	if len(shares) != 3 || shares[1].Persist != 2048 || shares[2].Arena != 50_000 {
		t.Errorf("shares %+v", shares)
	}

	dev.Runs, dev.SharedWeights = RunsConcurrent, true
	tot, _, _ = dev.Totals(totalsInputs())
	// concurrent: 40,000 + 30,000 + 50,000 + 2,048 = 122,048; linked once,
	// flash is 180,000 − 16,384 = 163,616.
	if tot.RAMBytes != 122_048 || tot.FlashBytes != 163_616 {
		t.Errorf("concurrent ram %d, shared flash %d; want 122048, 163616", tot.RAMBytes, tot.FlashBytes)
	}

	// Weights in RAM add every model's param bytes (file/2 here): 50,000 +
	// 30,000 + 10,000 = 90,000, less the 16,384 linked once: 122,048 +
	// 73,616 = 195,664.
	dev.Weights = WeightsRAM
	tot, _, _ = dev.Totals(totalsInputs())
	if tot.RAMBytes != 195_664 {
		t.Errorf("ram with weights in RAM %d, want 195664", tot.RAMBytes)
	}
}

func TestJudgeDevice(t *testing.T) {
	ram := Quantity{Text: "120000", Kind: Bytes, Value: 120_000}
	dev := &Device{Name: "doorbell", Weights: WeightsFlash, Runs: RunsConcurrent, RAM: &ram,
		Limits: map[string]Setting{MetricLoad: {Quantity: Quantity{Text: "100%", Kind: Percent, Value: PercentScale}}}}
	in := totalsInputs()
	// c cannot finish within its period: 600 ms against 500 ms.
	in[2].Figures.Target.LatencyMS = 600
	// The base: b's arena was 20,000 B smaller.
	base := totalsInputs()
	base[1].Figures = &Figures{FileBytes: 60_000, ParamBytes: 30_000, Memory: MemoryFigures{
		Deployed: MemoryView{ArenaBytes: 10_000}, PersistentBytes: 2048}, Target: &TargetFigures{LatencyMS: 10}}
	r := dev.JudgeDevice(base, in)
	if r.Status != Fail {
		t.Fatalf("status %s, want fail", r.Status)
	}
	var ramCheck, periodCheck, loadCheck *Check
	for i := range r.Checks {
		c := &r.Checks[i]
		switch {
		case c.Metric == MetricRAM:
			ramCheck = c
		case c.Kind == "period" && c.Status == Fail:
			periodCheck = c
		case c.Metric == MetricLoad:
			loadCheck = c
		}
	}
	// ram concurrent 122,048 > capacity 120,000; base 102,048; b grew by
	// 20,000 B.
	if ramCheck == nil || ramCheck.Status != Fail || ramCheck.Value != 122_048 || *ramCheck.Base != 102_048 ||
		!strings.Contains(ramCheck.Reason, "models/b.onnx grew by 19.5 KiB") {
		t.Errorf("ram check %+v", ramCheck)
	}
	if periodCheck == nil || !strings.Contains(periodCheck.Reason, "models/c.onnx takes 600.0 ms, longer than its period of 500.0 ms") {
		t.Errorf("period check %+v", periodCheck)
	}
	// load 0.2 + 0.2 + 600/500 = 1.6 > the whole core.
	if loadCheck == nil || loadCheck.Status != Fail || loadCheck.Value != 1_600_000 {
		t.Errorf("load check %+v", loadCheck)
	}
}

func TestDeviceSetDecoding(t *testing.T) {
	f, err := Parse("loadline.yaml", []byte(`version: 1
devices:
  doorbell:
    ram: 512KiB
    flash: 2MiB
    runs: concurrent
    shared_weights: true
    limits: {ram: 90%, load: 70%}
    models:
      - {path: models/kws/*.tflite, every: 20ms}
      - {path: models/person.tflite, rate: 2Hz}
      - models/vad.onnx
`))
	if err != nil {
		t.Fatal(err)
	}
	d := f.Devices["doorbell"]
	if d.Runs != RunsConcurrent || !d.SharedWeights || len(d.Models) != 3 || d.Models[0].Every != 20*time.Millisecond ||
		d.Models[1].Every != 500*time.Millisecond || d.Models[2].Every != 0 || d.Limits[MetricLoad].Value != 700_000 {
		t.Errorf("decoded %+v", d)
	}
	if e, ok := d.RunsModel("models/kws/yes.tflite"); !ok || e.Every != 20*time.Millisecond {
		t.Errorf("RunsModel: %v %v", e, ok)
	}
	for _, c := range []struct{ yaml, want string }{
		{"runs: sometimes", `loadline.yaml:4:11: devices.d.runs: "sometimes": a device runs its models one-at-a-time or concurrent`},
		{"models: [{path: m.onnx, every: 0ms}]", `loadline.yaml:4:36: devices.d.models[0].every: "0ms": a period must be more than 0`},
		{"models: [{path: m.onnx, every: -5ms}]", `"-5ms": a period must be more than 0`},
		{"models: [{path: m.onnx, rate: 0Hz}]", `"0Hz": a rate must be a number of hertz above 0`},
		{"models: [{path: m.onnx, every: 20}]", `"20": not a period`},
		{"models: [{path: m.onnx, every: 20ms, rate: 50Hz}]", "give every or rate, not both"},
		{"models: [{every: 20ms}]", "a device's model entry needs a path"},
		{"limits: {ram: 90%}", `loadline.yaml:4:19: devices.d.limits.ram: "90%" is a share of the device's ram, and d gives none`},
		{"limits: {load: 5M}", `"5M": load is a share of the core's time`},
		{"limits: {rom: 5MiB}", `unknown device total "rom"`},
		{"shared_weights: often", `"often": shared_weights is true or false`},
	} {
		_, err := Parse("loadline.yaml", []byte("version: 1\ndevices:\n  d:\n    "+c.yaml+"\n"))
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s:\n got %v\nwant %s", c.yaml, err, c.want)
		}
	}
}

// TestDiffDeviceSet: what a device runs together is part of the budget
// diff, loosened where the head lets the totals take more.
func TestDiffDeviceSet(t *testing.T) {
	base := `version: 1
devices:
  d:
    ram: 512KiB
    runs: concurrent
    limits: {ram: 90%, load: 60%}
    models:
      - {path: a.onnx, every: 20ms}
      - b.onnx
`
	head := `version: 1
devices:
  d:
    ram: 512KiB
    runs: one-at-a-time
    shared_weights: true
    limits: {ram: 95%}
    models:
      - {path: a.onnx, every: 40ms}
      - c.onnx
`
	bf, err := Parse("base.yaml", []byte(base))
	if err != nil {
		t.Fatal(err)
	}
	hf, err := Parse("head.yaml", []byte(head))
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, c := range Diff(bf, hf) {
		got = append(got, fmt.Sprintf("%s %s→%s %v", c.Key, c.Old, c.New, c.Loosened))
	}
	want := []string{
		"devices.d.runs concurrent→one-at-a-time true",
		"devices.d.shared_weights false→true true",
		"devices.d.models a.onnx every 20ms→a.onnx every 40ms true",
		"devices.d.models b.onnx→ true",
		"devices.d.models →c.onnx false",
		"devices.d.limits.ram 90%→95% true",
		"devices.d.limits.load 60%→ true",
	}
	if strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("diff:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
}

// TestLoadTimeWeightsInRAM: weights computed at load time
// (GeneratedParamBytes) are in RAM wherever the device keeps its weights,
// in the model's ram and in the device total. Hand-worked: arena 32,768 B
// + generated 67,108,864 B = 67,141,632 B with weights in flash; with
// weights in RAM, param bytes 67,109,864 (1,000 stored + the generated
// ones) + 32,768 = 67,142,632 B.
func TestLoadTimeWeightsInRAM(t *testing.T) {
	fig := &Figures{FileBytes: 1181, ParamBytes: 67_109_864, GeneratedParamBytes: 67_108_864,
		Memory: MemoryFigures{Deployed: MemoryView{ArenaBytes: 32_768, PeakLiveBytes: 32_768}}}
	for _, tc := range []struct {
		weights string
		want    int64
	}{{WeightsFlash, 67_141_632}, {WeightsRAM, 67_142_632}} {
		dev := &Device{Name: "board", Weights: tc.weights, Runs: RunsOneAtATime}
		if got := dev.Deploy(fig).RAM; got != tc.want {
			t.Errorf("weights: %s: ram %d, want %d", tc.weights, got, tc.want)
		}
		tot, shares, _ := dev.Totals([]DeviceInput{{Path: "w.onnx", Figures: fig}})
		if tot.RAMBytes != tc.want || len(shares) != 1 || shares[0].Weights != tc.want-32_768 {
			t.Errorf("weights: %s: total ram %d (shares %+v), want %d", tc.weights, tot.RAMBytes, shares, tc.want)
		}
	}
}

// TestDeviceSharedCountsModelsNotCopies: a constant is shared across the
// models of a device, each model one copy however often its own file holds
// it, and the RAM total with weights: ram takes off only the copies that
// were in the weights sum (hand-worked):
//
//	a: file 10,000 B, params 6,000 B; stores "g" (1,024 B, a parameter)
//	   twice (two layers' identical gains) and "s" (512 B, not a parameter)
//	b: file 8,000 B, params 3,000 B; stores "g" once as a parameter and "s"
//	   once, as a parameter this time (read as a weight)
//	c: file 4,000 B, params 2,000 B; stores "s" once, not a parameter
//
// flash_shared = g 1,024 × (2 models − 1) + s 512 × (3 − 1) = 2,048 B (a's
// second g is in a's own file, as a's flash counts it). Linked once: flash
// 22,000 − 2,048 = 19,952. ram one at a time, arenas 1,000 / 2,000 /
// 3,000, weights in RAM: 3,000 + 11,000 − g 1,024 × (2 − 1) − s 512 ×
// (1 − 1) = 12,976 (s is a parameter of b alone: one copy in RAM).
func TestDeviceSharedCountsModelsNotCopies(t *testing.T) {
	fig := func(file, params, arena int64, ds ...ConstantDigest) *Figures {
		return &Figures{FileBytes: file, ParamBytes: params,
			Memory: MemoryFigures{Deployed: MemoryView{ArenaBytes: arena, PeakLiveBytes: arena}}, Constants: ds}
	}
	g := func(name string) ConstantDigest {
		return ConstantDigest{Name: name, Bytes: 1024, Digest: "g", Weight: true}
	}
	s := func(name string, weight bool) ConstantDigest {
		return ConstantDigest{Name: name, Bytes: 512, Digest: "s", Weight: weight}
	}
	in := []DeviceInput{
		{Path: "a.onnx", Figures: fig(10_000, 6_000, 1_000, g("l1.gain"), s("shape", false), g("l2.gain"))},
		{Path: "b.onnx", Figures: fig(8_000, 3_000, 2_000, g("gain"), s("table", true))},
		{Path: "c.onnx", Figures: fig(4_000, 2_000, 3_000, s("shape", false))},
	}
	dev := &Device{Name: "board", Weights: WeightsRAM, Runs: RunsOneAtATime, SharedWeights: true}
	tot, _, shared := dev.Totals(in)
	if tot.FlashSharedBytes != 2_048 || tot.FlashBytes != 19_952 {
		t.Errorf("flash %d, shared %d; want 19952, 2048", tot.FlashBytes, tot.FlashSharedBytes)
	}
	if tot.RAMBytes != 12_976 {
		t.Errorf("ram %d, want 12976", tot.RAMBytes)
	}
	if len(shared) != 2 || strings.Join(shared[0].Models, ",") != "a.onnx,b.onnx" || strings.Join(shared[0].Names, ",") != "l1.gain,gain" ||
		strings.Join(shared[1].Models, ",") != "a.onnx,b.onnx,c.onnx" {
		t.Errorf("shared %+v", shared)
	}
	// One model alone shares nothing with itself.
	tot, _, shared = dev.Totals(in[:1])
	if tot.FlashSharedBytes != 0 || len(shared) != 0 || tot.FlashBytes != 10_000 || tot.RAMBytes != 7_000 {
		t.Errorf("one model: flash %d, shared %d %+v, ram %d; want 10000, 0, none, 7000", tot.FlashBytes, tot.FlashSharedBytes, shared, tot.RAMBytes)
	}
}
