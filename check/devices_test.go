package check

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// seededModel is build.ConvClassifier's network (16×16 input, a 3×3 conv
// of the given width, pool, a 4-way classifier) with weights drawn from
// seed: two models with one seed and width store identical weights.
func seededModel(t *testing.T, width int64, seed uint64) []byte {
	t.Helper()
	b := build.New("kws", 13, build.Seed(seed))
	x := b.Input("image", model.Float32, 1, 3, 16, 16)
	x = b.Conv("conv", x, build.Conv2D(width, 3, 1, 1).WithBias())
	x = b.Relu("relu", x)
	x = b.GlobalAveragePool("pool", x)
	x = b.Flatten("flat", x, 1)
	x = b.Gemm("fc", x, 4, true)
	b.Output(x)
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	data, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	return data
}

// deviceBudget runs two models concurrently on one device of 36 KiB of
// RAM; each model may take 30 KiB on its own.
const deviceBudget = `version: 1
devices:
  doorbell:
    ram: 36KiB
    flash: 1MiB
    runs: concurrent
    models:
      - {path: models/kws.onnx, every: 20ms}
      - models/vad.onnx
models:
  - path: "models/*.onnx"
    device: doorbell
    limits: {ram: 30KiB}
`

// TestDeviceTotalBreaksOnGrowth: a change grows one model of a device's
// set; the model stays within its own limit, but the device's RAM total
// does not, and the check fails on the total naming the model. The
// deployed arena of this network is its input (3·16·16·4 = 3,072 B) and
// the conv output (width·16·16·4 B) live together: 11,264 B at width 8,
// 27,648 B at width 24 (hand-worked; the test reads the shares and checks
// them against this arithmetic).
func TestDeviceTotalBreaksOnGrowth(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(deviceBudget))
	g.write("models/kws.onnx", seededModel(t, 8, 1))
	g.write("models/vad.onnx", seededModel(t, 8, 2))
	g.write("models/notes.txt", []byte("not a model"))
	g.commit("base")
	g.write("models/vad.onnx", seededModel(t, 24, 2))
	g.commit("wider vad")
	res, stats, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD"})
	if err != nil {
		t.Fatal(err)
	}
	for _, m := range res.Models {
		if m.Status != budget.Pass {
			t.Errorf("%s is %s on its own; want pass (27,648 B < 30 KiB)", m.Path, m.Status)
		}
	}
	if len(res.Devices) != 1 {
		t.Fatalf("%d devices judged, want 1", len(res.Devices))
	}
	d := res.Devices[0]
	arena := map[string]int64{}
	for _, s := range d.Models {
		arena[s.Path] = s.Arena
	}
	if arena["models/kws.onnx"] != 3072+1024*8 || arena["models/vad.onnx"] != 3072+1024*24 {
		t.Errorf("arenas %v, want kws 11264 and vad 27648", arena)
	}
	// Concurrent: 11,264 + 27,648 = 38,912 B > 36 KiB (36,864 B); the
	// base's total was 11,264 × 2 = 22,528 B.
	if d.Status != budget.Fail || res.Verdict != budget.Fail || d.RAMBytes != 38_912 || d.Base == nil || d.Base.RAMBytes != 22_528 {
		t.Fatalf("device %s, verdict %s, ram %d (base %+v)", d.Status, res.Verdict, d.RAMBytes, d.Base)
	}
	var reason string
	for _, c := range d.Checks {
		if c.Metric == budget.MetricRAM && c.Status == budget.Fail {
			reason = c.Reason
		}
	}
	if !strings.Contains(reason, "ram total of doorbell 38.0 KiB > doorbell's capacity 36.0 KiB") || !strings.Contains(reason, "models/vad.onnx grew by 16.0 KiB") {
		t.Errorf("reason %q", reason)
	}
	if stats.Measured.Load() != 3 {
		t.Errorf("measured %d models, want 3 (vad at both sides; kws unchanged, once)", stats.Measured.Load())
	}
	// The second check of the same change measures nothing.
	_, again, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD"})
	if err != nil {
		t.Fatal(err)
	}
	if again.Measured.Load() != 0 {
		t.Errorf("second check measured %d models, want 0", again.Measured.Load())
	}
}

// TestDeviceSharedBackbone: a change that rebuilds one model from the
// other's weights (same seed and width) shows the flash the shared
// constants save. Shared: conv.weight 16·3·3·3·4 = 1,728 B and fc.weight
// 4·16·4 = 256 B; the biases (64 B and 16 B) are under MinSharedBytes.
func TestDeviceSharedBackbone(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(strings.Replace(deviceBudget, "runs: concurrent", "runs: concurrent\n    shared_weights: true", 1)))
	g.write("models/kws.onnx", seededModel(t, 16, 1))
	g.write("models/vad.onnx", seededModel(t, 16, 2))
	g.commit("base")
	g.write("models/vad.onnx", seededModel(t, 16, 1))
	g.commit("vad from the kws backbone")
	res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD"})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Devices) != 1 {
		t.Fatalf("%d devices", len(res.Devices))
	}
	d := res.Devices[0]
	if d.Base == nil || d.Base.FlashSharedBytes != 0 || d.FlashSharedBytes != 1728+256 {
		t.Fatalf("shared flash %d (base %+v), want 1984 (base 0)", d.FlashSharedBytes, d.Base)
	}
	var sum int64
	for _, s := range d.Models {
		sum += s.Flash
	}
	if d.FlashBytes != sum-1984 || len(d.Shared) != 2 {
		t.Errorf("flash %d, models' sum %d, shared %+v; want the sum less 1,984 B", d.FlashBytes, sum, d.Shared)
	}
}

// TestDeviceLoadOnTarget: a device whose target is the M4 reference kernels
// at 120 MHz runs the MLPerf Tiny keyword spotter once a second and the
// anomaly detector every 50 ms. The load is Σ latency ÷ period over the
// estimates (asserted exactly from the shares), and within 15 % of the
// same sum over the published latencies, 181.9/1000 + 10.05/50 = 0.383
// (MLPerf Tiny v0.5, closed/reference, Nucleo-L4R5ZI; the shipped target
// estimates each within 15 %). With the spotter every 150 ms it cannot
// finish before its next run (published 181.9 ms; the estimate is at least
// 0.85 × 181.9 = 154.6 ms), and the device fails on that period.
func TestDeviceLoadOnTarget(t *testing.T) {
	shared := corpus.TFLiteDir(t)
	read := func(name string) []byte {
		data, err := os.ReadFile(filepath.Join(shared, name))
		if err != nil {
			t.Fatal(err)
		}
		return data
	}
	budgetText := `version: 1
devices:
  sensor-board:
    ram: 640KiB
    flash: 2MiB
    target: m4-reference@120MHz
    models:
      - {path: models/kws.tflite, every: KWS}
      - {path: models/ad.tflite, rate: 20Hz}
models:
  - path: "models/*.tflite"
    device: sensor-board
`
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(strings.Replace(budgetText, "KWS", "1s", 1)))
	g.write("models/kws.tflite", read("kws_ref_model.tflite"))
	g.write("models/ad.tflite", read("ad01_int8.tflite"))
	g.commit("two models on one board")
	r, err := OpenRepo(g.dir)
	if err != nil {
		t.Fatal(err)
	}
	res, _, err := Audit(r, "HEAD", Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Devices) != 1 || res.Devices[0].Load == nil {
		t.Fatalf("devices %+v", res.Devices)
	}
	d := res.Devices[0]
	var sum float64
	for _, s := range d.Models {
		if s.Latency <= 0 {
			t.Fatalf("%s has no latency estimate: %+v", s.Path, s)
		}
		sum += s.Latency / s.EveryMS
	}
	if diff := *d.Load - sum; diff > 1e-9 || diff < -1e-9 {
		t.Errorf("load %v, Σ latency ÷ period over the shares %v", *d.Load, sum)
	}
	if published := 181.9/1000 + 10.05/50; *d.Load < 0.85*published || *d.Load > 1.15*published {
		t.Errorf("load %.3f, want within 15 %% of the published %.3f", *d.Load, published)
	}
	if d.Status != budget.Pass {
		t.Errorf("device %s: %+v", d.Status, d.Checks)
	}

	g.write("loadline.yaml", []byte(strings.Replace(budgetText, "KWS", "150ms", 1)))
	g.commit("spotter every 150 ms")
	res, _, err = Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", TrustHeadBudget: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Devices) != 1 || res.Devices[0].Status != budget.Fail || res.Verdict != budget.Fail {
		t.Fatalf("devices %+v, verdict %s", res.Devices, res.Verdict)
	}
	found := false
	for _, c := range res.Devices[0].Checks {
		if c.Kind == "period" && c.Status == budget.Fail && strings.Contains(c.Reason, "models/kws.tflite takes") && strings.Contains(c.Reason, "longer than its period of 150.0 ms") {
			found = true
		}
	}
	if !found {
		t.Errorf("no failing period check for the spotter: %+v", res.Devices[0].Checks)
	}
}

// sharedStemModel builds the model of TestDeviceRAMSharedWeightsOnlyParams:
// x [1,64,4,4] float32 → Conv "stem" 64→64 1×1 (no bias) →
// BatchNormalization "bn" → Relu → Conv head 64→out 1×1 → Gather on axis 1
// by a stored [64] int64 index vector "idx" (0…7 eight times). Weights are
// drawn from the seed and their names, so two models built here share
// stem.weight, bn.* and idx byte for byte and differ in their heads.
func sharedStemModel(t *testing.T, head string, out int64) *measure.Metrics {
	t.Helper()
	b := build.New("stem", 13, build.Seed(7))
	x := b.Input("x", model.Float32, 1, 64, 4, 4)
	x = b.Conv("stem", x, build.Conv2D(64, 1, 1, 0))
	x = b.BatchNormalization("bn", x, 0)
	x = b.Relu("relu", x)
	x = b.Conv(head, x, build.Conv2D(out, 1, 1, 0))
	idx := make([]int64, 64)
	for i := range idx {
		idx[i] = int64(i % 8)
	}
	iv := b.Int64s("idx", idx...)
	b.Output(x)
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	g := m.Graph
	g.Nodes = append(g.Nodes, &model.Node{Op: "Gather", Name: "pick", Inputs: []string{x.Name, iv.Name}, Outputs: []string{"picked"},
		Attrs: []*model.Attr{{Name: "axis", Kind: model.AttrInt, Int: 1}}})
	g.Outputs = []*model.ValueInfo{{Name: "picked"}}
	data, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	met, err := measure.Measure(m, int64(len(data)), measure.Options{Digests: true})
	if err != nil {
		t.Fatal(err)
	}
	return met
}

// TestDeviceRAMSharedWeightsOnlyParams: with weights: ram and
// shared_weights: true, the RAM total takes off only the shared constants
// that are parameters, the ones each model's weights in RAM counted; flash
// takes off every shared constant, since flash counts the whole file.
// Hand-worked for two models built by sharedStemModel, heads a (64→8) and
// b (64→16), every tensor float32 but idx:
//
//	shared, parameters: stem.weight 64·64·4 = 16,384 B, bn.weight and
//	  bn.bias 64·4 = 256 B each: 16,896 B
//	shared, not parameters: bn.running_mean and bn.running_var 256 B each
//	  (statistics), idx 64·8 = 512 B (Gather's indices): 1,024 B
//	param_bytes a = 16,384 + 512 + 8·64·4 (2,048) = 18,944 B;
//	            b = 16,384 + 512 + 16·64·4 (4,096) = 20,992 B
//	deployed arena, each: x 64·4·4·4 = 4,096 B and the stem's output
//	  (BatchNormalization folded, Relu fused) 4,096 B live together:
//	  8,192 B; later steps hold less (4,096 + 512 or 1,024, then + 4,096
//	  for the Gather after the stem's output is freed, in its place)
//
// ram one at a time = 8,192 + 18,944 + 20,992 − 16,896 = 31,232 B (taking
// off all 17,920 shared bytes gave 30,208 B, 1,024 B short: bytes that were
// never in the weights sum). flash = file a + file b − 17,920 B.
func TestDeviceRAMSharedWeightsOnlyParams(t *testing.T) {
	a, b := sharedStemModel(t, "head_a", 8), sharedStemModel(t, "head_b", 16)
	if a.ParamBytes != 18_944 || b.ParamBytes != 20_992 {
		t.Fatalf("param_bytes %d and %d, want 18944 and 20992", a.ParamBytes, b.ParamBytes)
	}
	if a.Memory.Deployed.ArenaBytes != 8192 || b.Memory.Deployed.ArenaBytes != 8192 {
		t.Fatalf("deployed arenas %d and %d, want 8192", a.Memory.Deployed.ArenaBytes, b.Memory.Deployed.ArenaBytes)
	}
	in := []budget.DeviceInput{{Path: "a.onnx", Figures: Figures(a)}, {Path: "b.onnx", Figures: Figures(b)}}
	dev := &budget.Device{Name: "board", Weights: budget.WeightsRAM, Runs: budget.RunsOneAtATime, SharedWeights: true}
	tot, _, shared := dev.Totals(in)
	if tot.RAMBytes != 31_232 {
		t.Errorf("ram %d, want 31232 (8192 + 18944 + 20992 − 16896)", tot.RAMBytes)
	}
	if tot.FlashSharedBytes != 17_920 || len(shared) != 6 {
		t.Errorf("flash shared %d in %d constants, want 17920 in 6: %+v", tot.FlashSharedBytes, len(shared), shared)
	}
	if want := a.FileBytes + b.FileBytes - 17_920; tot.FlashBytes != want {
		t.Errorf("flash %d, want %d (files %d + %d − 17920)", tot.FlashBytes, want, a.FileBytes, b.FileBytes)
	}
	// Weights in flash: RAM holds the arena only (no weight is computed at
	// load time), whatever is shared.
	dev.Weights = budget.WeightsFlash
	if tot, _, _ = dev.Totals(in); tot.RAMBytes != 8192 {
		t.Errorf("ram with weights in flash %d, want 8192", tot.RAMBytes)
	}
}
