package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestSignalShapes(t *testing.T) {
	x := nnRT("x", f32, 1, 10, 10, 1)
	scalar := func(name string, v int64) nnIn { return nnI64(name, []int64{v}, []int64{}...) }
	i32 := func(name string, v int64) nnIn { return nnInts(name, model.Int32, []int64{v}, []int64{}...) }
	runNNCases(t, []nnCase{
		// corpus test_dft: axis 1, real input becomes complex
		{name: "DFT", op: "DFT", opset: 17, in: []nnIn{x}, attrs: []*model.Attr{atI("axis", 1)}, want: []string{"float32[1,10,10,2]"}},
		// ONNX operator spec (DFT-17): axis 1 by default
		{name: "DFT default axis", op: "DFT", opset: 17, in: []nnIn{x}, want: []string{"float32[1,10,10,2]"}},
		// corpus test_dft_axis
		{name: "DFT axis 2", op: "DFT", opset: 17, in: []nnIn{x}, attrs: []*model.Attr{atI("axis", 2)}, want: []string{"float32[1,10,10,2]"}},
		// ONNX operator spec (DFT-17): onesided keeps floor(n/2)+1 bins
		{name: "DFT onesided", op: "DFT", opset: 17, in: []nnIn{x}, attrs: []*model.Attr{atI("onesided", 1)}, want: []string{"float32[1,6,10,2]"}},
		// ONNX operator spec (DFT-17): dft_length pads or cuts the signal
		{name: "DFT dft_length", op: "DFT", opset: 17, in: []nnIn{x, scalar("n", 16)}, want: []string{"float32[1,16,10,2]"}},
		// ONNX operator spec (DFT-20): axis is input 2, -2 (the last signal axis) by default
		{name: "DFT opset 20 default axis", op: "DFT", opset: 20, in: []nnIn{nnRT("x", f32, 2, 8, 6, 2)}, attrs: []*model.Attr{atI("onesided", 1)}, want: []string{"float32[2,8,4,2]"}},
		{name: "DFT opset 20 axis input", op: "DFT", opset: 20, in: []nnIn{nnRT("x", f32, 2, 8, 6, 2), nnSkip(), scalar("axis", 1)}, attrs: []*model.Attr{atI("onesided", 1)}, want: []string{"float32[2,5,6,2]"}},
		// hand-worked: symbolic signal length
		{name: "DFT symbolic", op: "DFT", opset: 17, in: []nnIn{nnRT("x", f32, "B", "T", 1)}, attrs: []*model.Attr{atI("onesided", 1)}, want: []string{"float32[B,(T/2)+1,2]"}},
		{name: "DFT last dim", op: "DFT", opset: 17, in: []nnIn{nnRT("x", f32, 1, 10, 3)}, err: "last dim is 3"},
		{name: "DFT axis range", op: "DFT", opset: 17, in: []nnIn{x}, attrs: []*model.Attr{atI("axis", 3)}, err: "axis 3 is out of range for rank 4"},
		{name: "DFT length at run time", op: "DFT", opset: 17, in: []nnIn{x, nnRT("n", model.Int64)}, err: `dft_length (input 1, "n") is computed at run time`},

		// corpus test_stft: (128-16)/8+1 = 15 frames, 16/2+1 = 9 bins
		{name: "STFT", op: "STFT", opset: 17, in: []nnIn{nnRT("x", f32, 1, 128, 1), scalar("step", 8), nnSkip(), scalar("len", 16)}, want: []string{"float32[1,15,9,2]"}},
		// corpus test_stft_with_window: frame length from the window
		{name: "STFT window", op: "STFT", opset: 17, in: []nnIn{nnRT("x", f32, 1, 128, 1), scalar("step", 8), nnRT("w", f32, 16)}, want: []string{"float32[1,15,9,2]"}},
		// ONNX operator spec (STFT-17): onesided=0 keeps frame_length bins
		{name: "STFT two-sided", op: "STFT", opset: 17, in: []nnIn{nnRT("x", f32, 2, 100, 2), scalar("step", 10), nnRT("w", f32, 20)}, attrs: []*model.Attr{atI("onesided", 0)}, want: []string{"float32[2,9,20,2]"}},
		{name: "STFT no frame", op: "STFT", opset: 17, in: []nnIn{nnRT("x", f32, 1, 128, 1), scalar("step", 8)}, err: "neither a window nor a frame_length"},
		{name: "STFT step at run time", op: "STFT", opset: 17, in: []nnIn{nnRT("x", f32, 1, 128, 1), nnRT("step", model.Int64), nnRT("w", f32, 16)}, err: `frame_step (input 1, "step") is computed at run time`},

		// corpus test_hannwindow: an int32 size
		{name: "HannWindow", op: "HannWindow", opset: 17, in: []nnIn{nnInts("n", model.Int32, []int64{10}, []int64{}...)}, want: []string{"float32[10]"}},
		// ONNX operator spec: output_datatype picks the type
		{name: "HammingWindow float64", op: "HammingWindow", opset: 17, in: []nnIn{scalar("n", 10)}, attrs: []*model.Attr{atI("output_datatype", int64(model.Float64)), atI("periodic", 0)}, want: []string{"float64[10]"}},
		{name: "BlackmanWindow", op: "BlackmanWindow", opset: 17, in: []nnIn{scalar("n", 7)}, want: []string{"float32[7]"}},
		{name: "window at run time", op: "HannWindow", opset: 17, in: []nnIn{nnRT("n", model.Int64)}, err: `size (input 0, "n") is computed at run time`},
		// corpus test_melweightmatrix: [16/2+1, 8] from int32 and float32 scalars
		{name: "MelWeightMatrix", op: "MelWeightMatrix", opset: 17, in: []nnIn{i32("bins", 8), i32("dft", 16), i32("sr", 8192), nnF32("lo", []float64{0}, []int64{}...), nnF32("hi", []float64{4096}, []int64{}...)}, want: []string{"float32[9,8]"}},
	})
}
