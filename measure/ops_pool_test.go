package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

func TestPoolShapes(t *testing.T) {
	x32 := nnRT("x", f32, 1, 3, 32, 32)
	k2s2 := []*model.Attr{atIs("kernel_shape", 2, 2), atIs("strides", 2, 2)}
	runNNCases(t, []nnCase{
		// ONNX operator spec formula: (32-2)/2+1 = 16; Indices int64 alongside
		{name: "MaxPool", op: "MaxPool", in: []nnIn{x32}, attrs: k2s2, want: []string{"float32[1,3,16,16]", "int64[1,3,16,16]"}},
		// corpus test_maxpool_2d_ceil: ceil((4-3)/2)+1 = 2
		{name: "MaxPool ceil", op: "MaxPool", opset: 12, in: []nnIn{nnRT("x", f32, 1, 1, 4, 4)},
			attrs: []*model.Attr{atIs("kernel_shape", 3, 3), atIs("strides", 2, 2), atI("ceil_mode", 1)}, want: []string{"float32[1,1,2,2]"}},
		// hand-worked: kernel 1 stride 3 over 5 samples: ceil(4/3)+1 = 3 windows, but the third
		// would start at 6, past the input, and is dropped (onnxruntime, PyTorch, ONNX ≥ 1.16)
		{name: "MaxPool ceil drops window in padding", op: "MaxPool", in: []nnIn{nnRT("x", f32, 1, 1, 5)},
			attrs: []*model.Attr{atIs("kernel_shape", 1), atIs("strides", 3), atI("ceil_mode", 1)}, want: []string{"float32[1,1,2]"}},
		// corpus test_maxpool_2d_dilations: (4-((2-1)*2+1))/1+1 = 2
		{name: "MaxPool dilations", op: "MaxPool", opset: 12, in: []nnIn{nnRT("x", f32, 1, 1, 4, 4)},
			attrs: []*model.Attr{atIs("dilations", 2, 2), atIs("kernel_shape", 2, 2), atIs("strides", 1, 1)}, want: []string{"float32[1,1,2,2]"}},
		// corpus test_maxpool_2d_same_lower: SAME keeps ceil(32/1)
		{name: "MaxPool SAME_LOWER", op: "MaxPool", opset: 12, in: []nnIn{x32}, attrs: []*model.Attr{atIs("kernel_shape", 2, 2), atS("auto_pad", "SAME_LOWER")}, want: []string{"float32[1,3,32,32]"}},
		// corpus test_maxpool_2d_uint8: MaxPool keeps the input type
		{name: "MaxPool uint8", op: "MaxPool", opset: 12, in: []nnIn{nnRT("x", model.Uint8, 1, 1, 5, 5)},
			attrs: []*model.Attr{atIs("kernel_shape", 5, 5), atIs("pads", 2, 2, 2, 2)}, want: []string{"uint8[1,1,5,5]"}},
		// hand-worked: ResNet stem pool on a symbolic image, (H+2-3)/2+1
		{name: "MaxPool symbolic", op: "MaxPool", in: []nnIn{nnRT("x", f32, "N", 64, "H", 112)},
			attrs: []*model.Attr{atIs("kernel_shape", 3, 3), atIs("strides", 2, 2), atIs("pads", 1, 1, 1, 1)}, want: []string{"float32[N,64,((H-1)/2)+1,56]"}},
		// hand-worked: ceil_mode on a symbol
		{name: "AveragePool symbolic ceil", op: "AveragePool", in: []nnIn{nnRT("x", f32, 1, 8, "L")},
			attrs: []*model.Attr{atIs("kernel_shape", 3), atIs("strides", 2), atI("ceil_mode", 1)}, want: []string{"float32[1,8,(ceil((L-3)/2))+1]"}},
		// corpus test_averagepool_2d_pads_count_include_pad: 28+2+2-3+1 = 30
		{name: "AveragePool pads", op: "AveragePool", opset: 11, in: []nnIn{nnRT("x", f32, 1, 3, 28, 28)},
			attrs: []*model.Attr{atIs("kernel_shape", 3, 3), atIs("pads", 2, 2, 2, 2), atI("count_include_pad", 1)}, want: []string{"float32[1,3,30,30]"}},
		// corpus test_averagepool_2d_same_upper
		{name: "AveragePool SAME_UPPER", op: "AveragePool", opset: 11, in: []nnIn{x32}, attrs: []*model.Attr{atIs("kernel_shape", 2, 2), atS("auto_pad", "SAME_UPPER")}, want: []string{"float32[1,3,32,32]"}},
		// ONNX operator spec formula (LpPool-18 has strides, pads, ceil_mode)
		{name: "LpPool", op: "LpPool", opset: 18, in: []nnIn{x32}, attrs: append(k2s2, atI("p", 2)), want: []string{"float32[1,3,16,16]"}},
		{name: "no kernel", op: "MaxPool", in: []nnIn{x32}, err: "no kernel_shape attribute"},
		{name: "rank 2", op: "AveragePool", in: []nnIn{nnRT("x", f32, 1, 3)}, attrs: k2s2, err: "rank ≥ 3"},
		{name: "kernel too big", op: "MaxPool", in: []nnIn{nnRT("x", f32, 1, 1, 3, 3)}, attrs: []*model.Attr{atIs("kernel_shape", 2, 4)}, err: "kernel 4 is larger than padded input 3 on spatial axis 1"},
		{name: "kernel rank", op: "MaxPool", in: []nnIn{x32}, attrs: []*model.Attr{atIs("kernel_shape", 2)}, err: "kernel_shape has 1 entries, the input has 2 spatial axes"},

		// corpus test_globalaveragepool
		{name: "GlobalAveragePool", op: "GlobalAveragePool", opset: 1, in: []nnIn{nnRT("x", f32, 1, 3, 5, 5)}, want: []string{"float32[1,3,1,1]"}},
		// hand-worked, after test_globalaveragepool: symbolic spatial dims all become 1
		{name: "GlobalAveragePool symbolic", op: "GlobalAveragePool", in: []nnIn{nnRT("x", f32, "N", 3, "H", "W")}, want: []string{"float32[N,3,1,1]"}},
		{name: "GlobalMaxPool 3-D", op: "GlobalMaxPool", in: []nnIn{nnRT("x", f32, 1, 3, 5, 5, 5)}, want: []string{"float32[1,3,1,1,1]"}},
		{name: "GlobalLpPool", op: "GlobalLpPool", in: []nnIn{nnRT("x", f32, 2, 3, 5)}, want: []string{"float32[2,3,1]"}},

		// ONNX operator spec: (num_rois, C, pooled_shape[0], pooled_shape[1])
		{name: "MaxRoiPool", op: "MaxRoiPool", in: []nnIn{x32, nnRT("rois", f32, "R", 5)}, attrs: []*model.Attr{atIs("pooled_shape", 7, 7)}, want: []string{"float32[R,3,7,7]"}},
		{name: "MaxRoiPool no shape", op: "MaxRoiPool", in: []nnIn{x32, nnRT("rois", f32, "R", 5)}, err: "pooled_shape"},
		// corpus test_roialign_aligned_false
		{name: "RoiAlign", op: "RoiAlign", opset: 16, in: []nnIn{nnRT("x", f32, 1, 1, 10, 10), nnRT("rois", f32, 3, 4), nnRT("bi", model.Int64, 3)},
			attrs: []*model.Attr{atS("coordinate_transformation_mode", "output_half_pixel"), atI("output_height", 5), atI("output_width", 5), atI("sampling_ratio", 2), atF("spatial_scale", 1)},
			want:  []string{"float32[3,1,5,5]"}},
		// ONNX operator spec: output_height and output_width default to 1
		{name: "RoiAlign defaults", op: "RoiAlign", in: []nnIn{x32, nnRT("rois", f32, "R", 4), nnRT("bi", model.Int64, "R")}, want: []string{"float32[R,3,1,1]"}},
		{name: "RoiAlign mismatch", op: "RoiAlign", in: []nnIn{x32, nnRT("rois", f32, 3, 4), nnRT("bi", model.Int64, 2)}, err: "rois hold 3 regions but batch_indices has 2"},

		// corpus test_maxunpool_export_without_output_shape: (2-1)*2+2 = 4
		{name: "MaxUnpool", op: "MaxUnpool", opset: 11, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), nnRT("i", model.Int64, 1, 1, 2, 2)}, attrs: k2s2, want: []string{"float32[1,1,4,4]"}},
		// corpus test_maxunpool_export_with_output_shape
		{name: "MaxUnpool output_shape", op: "MaxUnpool", opset: 11, in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), nnRT("i", model.Int64, 1, 1, 2, 2), nnI64("os", []int64{1, 1, 5, 5})}, attrs: k2s2, want: []string{"float32[1,1,5,5]"}},
		{name: "MaxUnpool output_shape at run time", op: "MaxUnpool", in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), nnRT("i", model.Int64, 1, 1, 2, 2), nnRT("os", model.Int64, 4)}, attrs: k2s2,
			err: `output_shape (input 2, "os") is computed at run time`},
		// hand-worked: symbolic, (H-1)*2+2
		{name: "MaxUnpool symbolic", op: "MaxUnpool", in: []nnIn{nnRT("x", f32, 1, 1, "H", 2), nnRT("i", model.Int64, 1, 1, "H", 2)}, attrs: k2s2, want: []string{"float32[1,1,((H-1)*2)+2,4]"}},

		// ONNX operator spec example (Col2Im-18), also onnx/backend/test/case/node/col2im.py
		// export (test_col2im): [1, 5, 5] with image 5×5, block 1×5 → [1, 1, 5, 5]
		{name: "Col2Im", op: "Col2Im", opset: 18, in: []nnIn{nnRT("x", f32, 1, 5, 5), nnI64("image", []int64{5, 5}), nnI64("block", []int64{1, 5})}, want: []string{"float32[1,1,5,5]"}},
		// ONNX repository, onnx/backend/test/case/node/col2im.py, export_col2im_pads (newer
		// than Debian's libonnx-testdata 1.12): pads 0,1,0,1 give 5×3 = 15 blocks
		{name: "Col2Im pads", op: "Col2Im", opset: 18, in: []nnIn{nnRT("x", f32, 1, 5, 15), nnI64("image", []int64{5, 5}), nnI64("block", []int64{1, 5})},
			attrs: []*model.Attr{atIs("pads", 0, 1, 0, 1)}, want: []string{"float32[1,1,5,5]"}},
		// hand-worked: 2 channels of 2×2 blocks over a 4×4 image, stride 2: 4 blocks
		{name: "Col2Im strides", op: "Col2Im", opset: 18, in: []nnIn{nnRT("x", f32, 1, 8, 4), nnI64("image", []int64{4, 4}), nnI64("block", []int64{2, 2})},
			attrs: []*model.Attr{atIs("strides", 2, 2)}, want: []string{"float32[1,2,4,4]"}},
		{name: "Col2Im blocks mismatch", op: "Col2Im", opset: 18, in: []nnIn{nnRT("x", f32, 1, 5, 6), nnI64("image", []int64{5, 5}), nnI64("block", []int64{1, 5})}, err: "input holds 6 blocks"},
		{name: "Col2Im image at run time", op: "Col2Im", opset: 18, in: []nnIn{nnRT("x", f32, 1, 5, 5), nnRT("image", model.Int64, 2), nnI64("block", []int64{1, 5})}, err: "image_shape (input 1"},
	})
}
