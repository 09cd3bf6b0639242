package measure

import (
	"fmt"
	"os"
	"path/filepath"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/onnx"
)

func TestNMSShapes(t *testing.T) {
	scalarI := func(name string, v int64) nnIn { return nnI64(name, []int64{v}, []int64{}...) }
	scalarF := func(name string, v float64) nnIn { return nnF32(name, []float64{v}, []int64{}...) }
	// Three unit boxes as [y1, x1, y2, x2]: the first two overlap, intersection 0.9, union
	// 1.1, IoU 0.82; the third is apart.
	boxes := nnF32("boxes", []float64{0, 0, 1, 1, 0, 0.1, 1, 1.1, 0, 5, 1, 6}, 1, 3, 4)
	scores := nnF32("scores", []float64{0.9, 0.8, 0.7}, 1, 1, 3)
	runNNCases(t, []nnCase{
		// hand-worked: IoU 0.82 > 0.5 suppresses box 1; boxes 0 and 2 stay
		{name: "suppress", op: "NonMaxSuppression", opset: 11, in: []nnIn{boxes, scores, scalarI("max", 10), scalarF("iou", 0.5)}, want: []string{"int64[2,3]"}},
		// hand-worked: at threshold 0.85 nothing overlaps enough
		{name: "keep all", op: "NonMaxSuppression", opset: 11, in: []nnIn{boxes, scores, scalarI("max", 10), scalarF("iou", 0.85)}, want: []string{"int64[3,3]"}},
		// hand-worked: the score threshold drops box 2 (0.7 < 0.75)
		{name: "score threshold", op: "NonMaxSuppression", opset: 11, in: []nnIn{boxes, scores, scalarI("max", 10), scalarF("iou", 0.85), scalarF("st", 0.75)}, want: []string{"int64[2,3]"}},
		// hand-worked: max_output_boxes_per_class caps the count
		{name: "limit", op: "NonMaxSuppression", opset: 11, in: []nnIn{boxes, scores, scalarI("max", 1), scalarF("iou", 0.85)}, want: []string{"int64[1,3]"}},
		// ONNX operator spec: max_output_boxes_per_class defaults to 0, no output
		{name: "default max", op: "NonMaxSuppression", opset: 11, in: []nnIn{boxes, scores}, want: []string{"int64[0,3]"}},
		// hand-worked: boxes as centre and size [xc, yc, w, h]: two unit boxes 0.1 apart overlap
		{name: "center_point_box", op: "NonMaxSuppression", opset: 11, in: []nnIn{
			nnF32("b", []float64{0.5, 0.5, 1, 1, 0.6, 0.5, 1, 1}, 1, 2, 4), nnF32("s", []float64{0.9, 0.8}, 1, 1, 2), scalarI("max", 5), scalarF("iou", 0.5)},
			attrs: []*model.Attr{atI("center_point_box", 1)}, want: []string{"int64[1,3]"}},
		// data-dependent: runtime boxes give a symbol named after the output
		{name: "runtime", op: "NonMaxSuppression", opset: 11, in: []nnIn{nnRT("b", f32, 1, "S", 4), nnRT("s", f32, 1, 80, "S"), scalarI("max", 100)}, want: []string{"int64[?out0[0],3]"}},
		{name: "boxes shape", op: "NonMaxSuppression", opset: 11, in: []nnIn{nnRT("b", f32, 1, 6, 5), nnRT("s", f32, 1, 1, 6)}, err: "needs [num_batches, spatial_dimension, 4]"},
		{name: "box count", op: "NonMaxSuppression", opset: 11, in: []nnIn{nnRT("b", f32, 1, 6, 4), nnRT("s", f32, 1, 1, 5)}, err: "boxes hold 6 boxes per batch, scores score 5"},
	})
}

// TestNMSCorpus runs NonMaxSuppression's backend test cases with every
// input baked in as a constant: the algorithm must select exactly as many
// boxes as the expected output holds.
func TestNMSCorpus(t *testing.T) {
	dir := corpus.Require(t)
	paths, _ := filepath.Glob(filepath.Join(dir, "node", "test_nonmaxsuppression_*", "model.onnx"))
	if len(paths) == 0 {
		corpus.Missing(t, "no NonMaxSuppression cases in the corpus")
	}
	for _, p := range paths {
		name := filepath.Base(filepath.Dir(p))
		t.Run(name, func(t *testing.T) {
			m, err := onnx.DecodeFile(p, onnx.Options{})
			if err != nil {
				t.Fatal(err)
			}
			data := filepath.Join(filepath.Dir(p), "test_data_set_0")
			g := m.Graph
			for i, in := range g.Inputs {
				tv := readPB(t, filepath.Join(data, fmt.Sprintf("input_%d.pb", i)))
				tv.Name = in.Name
				g.Initializers = append(g.Initializers, tv)
			}
			g.Inputs = nil
			want := readPB(t, filepath.Join(data, "output_0.pb")).Dims
			res, err := Infer(m, InferOptions{IgnoreDeclared: true})
			if err != nil {
				t.Fatal(err)
			}
			got := res.Values.Get(g.Outputs[0].Name)
			if d, ok := got.Type.Shape.Ints(); !ok || fmt.Sprint(d) != fmt.Sprint(want) {
				t.Errorf("inferred %v, expected %v (test_data_set_0/output_0.pb)", got, want)
			}
		})
	}
}

func readPB(t *testing.T, path string) *model.Tensor {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	tv, err := onnx.DecodeTensor(b)
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return tv
}
