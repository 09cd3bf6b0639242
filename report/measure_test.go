package report

import (
	"bytes"
	"strings"
	"testing"

	"github.com/loadline/loadline/measure"
)

// TestMeasureTextLayers renders the text form of `loadline measure
// --layers` for a hand-made three-node chain and reads back each part: a
// row per node (an output outside the arena shows offset "-"), the top
// contributors to MACs (nodes with none left out) and to live memory, and
// the peak with what is live there.
func TestMeasureTextLayers(t *testing.T) {
	// The figures are the renderer's input, hand-made for a Conv 3→8, 3×3,
	// pads 1, on a float32 1×3×8×8 image: 512 outputs × 3 × 9 = 13,824 MACs;
	// its output 1×8×8×8×4 = 2,048 B, live with the 768 B input: 2,816 B.
	m := &measure.Metrics{
		Path: "chain.onnx", Format: "onnx", Nodes: 3, Opsets: map[string]int64{"": 13}, Sparsity: -1,
		Inputs: []measure.IOInfo{}, Outputs: []measure.IOInfo{}, Unresolved: []measure.Unresolved{},
		Layers: []measure.Layer{
			{Step: 0, Node: "conv", Op: "Conv", Shape: "float32[1,8,8,8]", MACs: 13824, Bytes: 2048, LiveBytes: 2816, Offset: 0,
				Views: map[string]measure.LayerView{"deployed": {LiveBytes: 2816, Bytes: 2048, Offset: 0}}},
			{Step: 1, Node: "relu", Op: "Relu", Shape: "float32[1,8,8,8]", Bytes: 2048, LiveBytes: 4096, Offset: 2048,
				Views: map[string]measure.LayerView{"deployed": {LiveBytes: 2048, Offset: 0}}},
			{Step: 2, Node: "flat", Op: "Flatten", Shape: "float32[1,512]", MACs: 0, Bytes: 0, LiveBytes: 2048, Offset: -1,
				Views: map[string]measure.LayerView{"deployed": {LiveBytes: 2048, Offset: 0}}},
		},
	}
	// Deployed, the Relu fuses into the Conv: one 2,048 B buffer r from
	// step 0, beside the input at step 0: 2,816 B.
	m.Memory.Graph.PeakLiveBytes = 4096
	m.MemoryDetail.PeakStep = 1
	m.MemoryDetail.LiveAtPeak = []string{"c", "r"}
	m.MemoryDetail.Judged = "deployed"
	m.MemoryDetail.Views = map[string]measure.ViewDetail{
		"graph":    {PeakStep: 1, PeakLiveBytes: 4096, LiveAtPeak: []measure.LiveTensor{{Name: "c", Bytes: 2048, Offset: 0}, {Name: "r", Bytes: 2048, Offset: 2048}}},
		"deployed": {PeakStep: 0, PeakLiveBytes: 2816, LiveAtPeak: []measure.LiveTensor{{Name: "image", Bytes: 768, Offset: 2048}, {Name: "r", Bytes: 2048, Offset: 0}}},
	}
	var b bytes.Buffer
	if err := MeasureText(&b, []*measure.Metrics{m}); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	rows := map[string]string{}
	for _, line := range strings.Split(out, "\n") {
		if f := strings.Fields(line); len(f) >= 8 && (f[1] == "conv" || f[1] == "relu" || f[1] == "flat") {
			rows[f[0]] = strings.Join(f, " ")
		}
	}
	for step, want := range map[string]string{
		"0": "0 conv Conv float32[1,8,8,8] 13.8 k 2.00 KiB 2.75 KiB 0 2.75 KiB 0",
		"1": "1 relu Relu float32[1,8,8,8] 0 2.00 KiB 4.00 KiB 2048 2.00 KiB 0",
		"2": "2 flat Flatten float32[1,512] 0 0 B 2.00 KiB - 2.00 KiB 0",
	} {
		if rows[step] != want {
			t.Errorf("row %s: %q, want %q\n%s", step, rows[step], want, out)
		}
	}
	for _, want := range []string{
		"\n  layers (schedule = file order; live = bytes live at the step; offset = arena offset of the node's output; deployed = the view ram is judged on)\n",
		"\n  top MACs\n    13.8 k     conv (Conv, step 0)\n\n",
		"\n  top live memory (graph view)\n    4.00 KiB   relu (Relu, step 1)\n    2.75 KiB   conv (Conv, step 0)\n    2.00 KiB   flat (Flatten, step 2)\n",
		"\n  graph-view peak 4.00 KiB at step 1; live there:\n    2.00 KiB   at 0          c\n    2.00 KiB   at 2048       r\n",
		"\n  deployed-view peak 2.75 KiB at step 0, judged; live there:\n    768 B      at 2048       image\n    2.00 KiB   at 0          r\n",
		"\n  top activations (each node's output, own bytes)\n    2.00 KiB   conv (Conv, step 0)\n    2.00 KiB   relu (Relu, step 1)\n\n",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("missing %q in:\n%s", want, out)
		}
	}
}

// TestMeasureTextLoadTimeWeights: the text form says how much of the
// parameter bytes the file does not store (hand-made figures: a 4096 ×
// 4096 float32 weight computed at load time, 67,108,864 B = 64.0 MiB), and
// says nothing of it when there is none.
func TestMeasureTextLoadTimeWeights(t *testing.T) {
	m := &measure.Metrics{Path: "w.onnx", Format: "onnx", FileBytes: 181, Params: 16_777_216, ParamBytes: 67_108_864,
		GeneratedParamBytes: 67_108_864, Sparsity: -1, Inputs: []measure.IOInfo{}, Outputs: []measure.IOInfo{}, Unresolved: []measure.Unresolved{}}
	var buf bytes.Buffer
	if err := MeasureText(&buf, []*measure.Metrics{m}); err != nil {
		t.Fatal(err)
	}
	if want := "64.0 MiB  (64.0 MiB of them computed at load time"; !strings.Contains(buf.String(), want) {
		t.Errorf("text lacks %q:\n%s", want, buf.String())
	}
	m.GeneratedParamBytes = 0
	buf.Reset()
	if err := MeasureText(&buf, []*measure.Metrics{m}); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(buf.String(), "load time") {
		t.Errorf("text speaks of load time without such weights:\n%s", buf.String())
	}
}
