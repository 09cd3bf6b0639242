package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestResizeShapes(t *testing.T) {
	x := nnRT("x", f32, 1, 1, 2, 4)
	roi := nnSkip()
	nearest := atS("mode", "nearest")
	runNNCases(t, []nnCase{
		// corpus test_resize_upsample_scales_nearest: [1,1,2,2] × [1,1,2,3]
		{name: "scales up", op: "Resize", opset: 13, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), roi, nnF32("s", []float64{1, 1, 2, 3})}, attrs: []*model.Attr{nearest}, want: []string{"float32[1,1,4,6]"}},
		// corpus test_resize_downsample_scales_nearest: floor(2×0.6) = 1, floor(4×0.6) = 2
		{name: "scales down", op: "Resize", opset: 13, in: []nnIn{x, roi, nnF32("s", []float64{1, 1, 0.6, 0.6})}, attrs: []*model.Attr{nearest}, want: []string{"float32[1,1,1,2]"}},
		// hand-worked: float32 arithmetic, 10 × 0.7f rounds to 7.0 (float64 would floor 6.99999988 to 6)
		{name: "scales float32", op: "Resize", opset: 13, in: []nnIn{nnRT("x", f32, 1, 1, 10, 10), roi, nnF32("s", []float64{1, 1, 0.7, 0.7})}, want: []string{"float32[1,1,7,7]"}},
		// corpus test_resize_downsample_sizes_nearest
		{name: "sizes", op: "Resize", opset: 13, in: []nnIn{x, roi, nnSkip(), nnI64("sz", []int64{1, 1, 1, 3})}, attrs: []*model.Attr{nearest}, want: []string{"float32[1,1,1,3]"}},
		// corpus test_resize_downsample_sizes_nearest_tf_half_pixel_for_nn (opset 11): empty scales next to
		// sizes (the case makes its empty roi and scales with Constant nodes; here empty initializers)
		{name: "opset 11 empty scales", op: "Resize", opset: 11, in: []nnIn{nnRT("x", f32, 1, 1, 4, 4), nnF32("roi", []float64{}), nnF32("s", []float64{}), nnI64("sz", []int64{1, 1, 3, 2})},
			attrs: []*model.Attr{atS("coordinate_transformation_mode", "tf_half_pixel_for_nn"), nearest}, want: []string{"float32[1,1,3,2]"}},
		// ONNX operator spec (Resize-10): scales is input 1
		{name: "opset 10", op: "Resize", opset: 10, in: []nnIn{x, nnF32("s", []float64{1, 1, 2, 2})}, want: []string{"float32[1,1,4,8]"}},
		// hand-worked: symbolic sizes scale as expressions
		{name: "symbolic", op: "Resize", opset: 13, in: []nnIn{nnRT("x", f32, "N", 3, "H", "W"), roi, nnF32("s", []float64{1, 1, 2, 0.5})}, want: []string{"float32[N,3,H*2,W/2]"}},
		// ONNX operator spec (Resize-18): axes says which axes sizes covers
		{name: "axes", op: "Resize", opset: 18, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), roi, nnSkip(), nnI64("sz", []int64{7, 8})}, attrs: []*model.Attr{atIs("axes", 2, 3)}, want: []string{"float32[1,1,7,8]"}},
		// ONNX repository, onnx/backend/test/case/node/resize.py (newer than Debian's
		// libonnx-testdata 1.12), export_resize_upsample_sizes_nearest_not_larger: scale min(7/2, 8/2) = 3.5
		{name: "not_larger", op: "Resize", opset: 18, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), roi, nnSkip(), nnI64("sz", []int64{7, 8})},
			attrs: []*model.Attr{atIs("axes", 2, 3), atS("keep_aspect_ratio_policy", "not_larger"), nearest}, want: []string{"float32[1,1,7,7]"}},
		// ONNX repository, onnx/backend/test/case/node/resize.py (newer than Debian's
		// libonnx-testdata 1.12), export_resize_upsample_sizes_nearest_not_smaller: scale max(3.5, 4) = 4
		{name: "not_smaller", op: "Resize", opset: 18, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), roi, nnSkip(), nnI64("sz", []int64{7, 8})},
			attrs: []*model.Attr{atIs("axes", 2, 3), atS("keep_aspect_ratio_policy", "not_smaller"), nearest}, want: []string{"float32[1,1,8,8]"}},
		// ONNX repository, onnx/backend/test/case/node/resize.py (newer than Debian's
		// libonnx-testdata 1.12), export_resize_downsample_sizes_nearest_not_larger: [1,1,2,4] to at most 1×3: scale min(1/2, 3/4) → [1,1,1,2]
		{name: "not_larger down", op: "Resize", opset: 18, in: []nnIn{x, roi, nnSkip(), nnI64("sz", []int64{1, 3})},
			attrs: []*model.Attr{atIs("axes", 2, 3), atS("keep_aspect_ratio_policy", "not_larger"), nearest}, want: []string{"float32[1,1,1,2]"}},
		{name: "scales at run time", op: "Resize", opset: 13, in: []nnIn{x, roi, nnRT("s", f32, 4)}, err: `scales (input 2, "s") is computed at run time`},
		{name: "sizes at run time", op: "Resize", opset: 13, in: []nnIn{x, roi, nnSkip(), nnRT("sz", model.Int64, 4)}, err: `sizes (input 3, "sz") is computed at run time`},
		{name: "neither", op: "Resize", opset: 13, in: []nnIn{x, roi}, err: "neither scales nor sizes"},
		{name: "scales length", op: "Resize", opset: 13, in: []nnIn{x, roi, nnF32("s", []float64{2, 2})}, err: "scales has 2 entries for 4 axes"},
		{name: "bad scale", op: "Resize", opset: 13, in: []nnIn{x, roi, nnF32("s", []float64{1, 1, 0, 1})}, err: "axis 2: scale 0 is not a positive finite number"},

		// corpus test_upsample_nearest (opset 9, scales input)
		{name: "Upsample 9", op: "Upsample", opset: 9, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), nnF32("s", []float64{1, 1, 2, 3})}, attrs: []*model.Attr{nearest}, want: []string{"float32[1,1,4,6]"}},
		// ONNX operator spec (Upsample-7): scales attribute
		{name: "Upsample 7", op: "Upsample", opset: 7, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2)}, attrs: []*model.Attr{atFs("scales", 1, 1, 2, 2)}, want: []string{"float32[1,1,4,4]"}},
		// ONNX operator spec (Upsample-1): height_scale and width_scale on NCHW
		{name: "Upsample 1", op: "Upsample", opset: 1, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2)}, attrs: []*model.Attr{atF("height_scale", 2), atF("width_scale", 3)}, want: []string{"float32[1,1,4,6]"}},
		{name: "Upsample scales at run time", op: "Upsample", opset: 9, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), nnRT("s", f32, 4)}, err: "computed at run time"},

		// corpus test_gridsample_bilinear: grid [1,2,4,2] sets the output's spatial size
		{name: "GridSample", op: "GridSample", opset: 16, in: []nnIn{nnRT("x", f32, 1, 1, 3, 2), nnRT("g", f32, 1, 2, 4, 2)}, attrs: []*model.Attr{atS("mode", "bilinear")}, want: []string{"float32[1,1,2,4]"}},
		// ONNX operator spec (GridSample-20): volumetric grid [N, D, H, W, 3]
		{name: "GridSample 3-D", op: "GridSample", opset: 20, in: []nnIn{nnRT("x", f32, "N", 4, 8, 8, 8), nnRT("g", f32, "N", 2, 3, 5, 3)}, want: []string{"float32[N,4,2,3,5]"}},
		{name: "GridSample coords", op: "GridSample", in: []nnIn{nnRT("x", f32, 1, 1, 3, 2), nnRT("g", f32, 1, 2, 4, 3)}, err: "grid's last dim is 3"},
		// ONNX operator spec (AffineGrid-20): size (N, C, H, W) gives [N, H, W, 2]
		{name: "AffineGrid 2-D", op: "AffineGrid", opset: 20, in: []nnIn{nnRT("theta", f32, 2, 2, 3), nnI64("size", []int64{2, 3, 5, 7})}, want: []string{"float32[2,5,7,2]"}},
		{name: "AffineGrid 3-D", op: "AffineGrid", opset: 20, in: []nnIn{nnRT("theta", f32, 2, 3, 4), nnI64("size", []int64{2, 3, 4, 5, 7})}, want: []string{"float32[2,4,5,7,3]"}},
		{name: "AffineGrid size at run time", op: "AffineGrid", opset: 20, in: []nnIn{nnRT("theta", f32, 2, 2, 3), nnRT("size", model.Int64, 4)}, err: `size (input 1, "size") is computed at run time`},
		// ONNX operator spec (CenterCropPad-18) example: crop 20×10 to 10×20 on axes 0, 1
		{name: "CenterCropPad", op: "CenterCropPad", opset: 18, in: []nnIn{nnRT("x", f32, 20, 10, 3), nnI64("shape", []int64{10, 20})}, attrs: []*model.Attr{atIs("axes", 0, 1)}, want: []string{"float32[10,20,3]"}},
		{name: "CenterCropPad all axes", op: "CenterCropPad", opset: 18, in: []nnIn{nnRT("x", f32, 20, 10, 3), nnI64("shape", []int64{10, 7, 3})}, want: []string{"float32[10,7,3]"}},
		{name: "CenterCropPad length", op: "CenterCropPad", opset: 18, in: []nnIn{nnRT("x", f32, 20, 10, 3), nnI64("shape", []int64{10, 7})}, err: "shape has 2 entries for 3 axes"},
	})
}

// TestResizeSymbolicSizes feeds Resize, CenterCropPad and TopK sizes whose
// contents are symbols (as a Shape of a symbolic tensor gives them): the
// symbols must reach the output rather than the node going unresolved.
func TestResizeSymbolicSizes(t *testing.T) {
	sym := func(dims ...model.Dim) *Value {
		return &Value{Type: model.TensorType(model.Int64, model.KnownShape(int64(len(dims)))), contents: heldContents(&Data{Ints: dims})}
	}
	x := &Value{Type: model.TensorType(f32, model.Shape{model.Sym("N"), model.Known(3), model.Known(8), model.Known(8)})}
	n, h := model.Sym("N"), model.Sym("H")
	cases := []struct {
		name string
		rule func(*ctx) ([]*Value, error)
		in   []*Value
		want string
	}{
		// hand-worked: sizes = [N, 3, H, 16]
		{"Resize", inferResize, []*Value{x, nil, nil, sym(n, model.Known(3), h, model.Known(16))}, "float32[N,3,H,16]"},
		// hand-worked: crop axis 2 to H
		{"CenterCropPad", inferCenterCropPad, []*Value{x, sym(n, model.Known(3), h, model.Known(4))}, "float32[N,3,H,4]"},
		// hand-worked: K = min(N, 5) kept on the last axis
		{"TopK", inferTopK, []*Value{{Type: model.TensorType(f32, model.Shape{model.Known(2), model.Sym("N")})}, sym(model.Sym("min(N,5)"))}, "float32[2,min(N,5)]"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			node := &model.Node{Op: tc.name, Inputs: []string{"x", "a", "b", "c"}}
			out, err := tc.rule(&ctx{node: node, in: tc.in, opset: 13})
			if err != nil {
				t.Fatal(err)
			}
			if got := out[0].Type.String(); got != tc.want {
				t.Errorf("got %s, want %s", got, tc.want)
			}
		})
	}
}
