package check

import (
	"reflect"
	"testing"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
)

// TestDetailOfViews: the detail section lists the largest activations by
// their own bytes, never the live total at their step, and carries both
// memory views, the deployed one marked as judged. x [1,2,8,8] → Conv a
// (4 out, 3×3, pad 1) → Relu r → Conv y (1 out, 1×1), float32 → Reshape
// to [1,64] (its shape a constant). Hand-worked own bytes: a and r 4·64·4
// = 1,024 B, y 1·64·4 = 256 B, the reshaped output 256 B; the live totals
// at their steps would be 1,536, 2,048 and 1,280 B.
func TestDetailOfViews(t *testing.T) {
	b := build.New("d", 13, build.Declared())
	x := b.Input("x", model.Float32, 1, 2, 8, 8)
	y := b.Relu("r", b.Conv("a", x, build.Conv2D(4, 3, 1, 1)))
	b.Output(b.Reshape("flat", b.Conv("y", y, build.Conv2D(1, 1, 1, 0)), 1, 64))
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	met, err := measure.Measure(m, 0, measure.Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	d := DetailOf(met)
	want := []budget.Layer{{Node: "a", Op: "Conv", Value: 1024}, {Node: "r", Op: "Relu", Value: 1024}, {Node: "y", Op: "Conv", Value: 256}, {Node: "flat", Op: "Reshape", Value: 256}} // hand-worked
	if !reflect.DeepEqual(d.TopMemory, want) {
		t.Errorf("largest activations %v, want %v", d.TopMemory, want)
	}
	if len(d.Views) != 2 || d.Views[0].Name != "graph" || d.Views[0].Judged || d.Views[1].Name != "deployed" || !d.Views[1].Judged {
		t.Fatalf("views %+v, want graph then deployed (judged)", d.Views)
	}
	// Deployed: the Relu fuses into a, the Reshape aliases y. Hand-worked:
	// step 0 x 512 + r 1024 = 1,536 (the peak); step 2 r + y = 1,280.
	if dv := d.Views[1]; dv.PeakBytes != 1536 || dv.PeakStep != 0 || len(dv.AtPeak) != 2 || len(dv.LiveBytes) != 4 {
		t.Errorf("deployed view %+v", dv)
	}
}

// TestLoadTimeWeightsJudged: a weight the file does not store, computed at
// load time (W = ConstantOfShape([4096, 4096], 0.01) read by a MatMul),
// cannot dodge the weights and ram budgets. Hand-worked: 4096 × 4096 × 4 B
// = 67,108,864 B of weights (64 MiB > the 1 MiB limit); the arena is x and
// y, 1 × 4096 × 4 B each = 32,768 B, so ram = 32,768 + 67,108,864 =
// 67,141,632 B on a device that keeps weights in flash (the weight is in
// no flash: it is computed into RAM), and the same with weights in RAM.
func TestLoadTimeWeightsJudged(t *testing.T) {
	shape := &model.Tensor{Name: "shape", DType: model.Int64, Dims: []int64{2},
		Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{{0, 16, 0, 0, 0, 0, 0, 0, 0, 16, 0, 0, 0, 0, 0, 0}}}} // 4096, 4096
	fill := &model.Tensor{Name: "value", DType: model.Float32, Dims: []int64{1},
		Data: model.TensorData{Encoding: model.EncodingRaw, Segments: [][]byte{{0x0a, 0xd7, 0x23, 0x3c}}}} // 0.01
	g := &model.Graph{
		Inputs: []*model.ValueInfo{{Name: "x", Type: model.TensorType(model.Float32, model.KnownShape(1, 4096))}},
		Nodes: []*model.Node{
			{Op: "Constant", Name: "s", Outputs: []string{"shape"}, Attrs: []*model.Attr{{Name: "value", Kind: model.AttrTensor, Tensor: shape}}},
			{Op: "ConstantOfShape", Name: "w", Inputs: []string{"shape"}, Outputs: []string{"w"}, Attrs: []*model.Attr{{Name: "value", Kind: model.AttrTensor, Tensor: fill}}},
			{Op: "MatMul", Name: "mm", Inputs: []string{"x", "w"}, Outputs: []string{"y"}},
		},
		Outputs: []*model.ValueInfo{{Name: "y"}},
	}
	met, err := measure.Measure(&model.Model{Format: "onnx", IRVersion: 8, Opsets: map[string]int64{"": 13}, Graph: g}, 181, measure.Options{})
	if err != nil {
		t.Fatal(err)
	}
	f, err := budget.Parse("loadline.yaml", []byte(`version: 1
devices:
  board-flash: {ram: 1MiB, flash: 1MiB}
  board-ram: {ram: 1MiB, flash: 1MiB, weights: ram}
models:
  - path: flash/*.onnx
    device: board-flash
    limits: {weights: 1MiB, ram: 100%}
  - path: ram/*.onnx
    device: board-ram
    limits: {weights: 1MiB, ram: 100%}
`))
	if err != nil {
		t.Fatal(err)
	}
	fig := Figures(met)
	res := f.Evaluate([]budget.Input{
		{Path: "flash/w.onnx", Change: budget.Added, Head: fig},
		{Path: "ram/w.onnx", Change: budget.Added, Head: fig},
	}, budget.EvalOptions{})
	for _, mr := range res.Models {
		judged := 0
		for _, c := range mr.Checks {
			want := map[string]int64{budget.MetricWeights: 67_108_864, budget.MetricRAM: 67_141_632}[c.Metric]
			if c.Kind != "limit" || want == 0 {
				continue
			}
			judged++
			if c.Status != budget.Fail || c.Value != want {
				t.Errorf("%s: %s %s %d, want fail at %d (%s)", mr.Path, c.Metric, c.Status, c.Value, want, c.Reason)
			}
		}
		if mr.Status != budget.Fail || judged != 2 {
			t.Errorf("%s: %s with checks %+v, want fail on weights and ram", mr.Path, mr.Status, mr.Checks)
		}
	}
}
