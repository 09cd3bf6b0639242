package measure

import (
	"testing"

	"github.com/loadline/loadline/model"
)

const f32 = model.Float32

func TestConvShapes(t *testing.T) {
	x5 := nnRT("x", f32, 1, 1, 5, 5)
	w3 := nnRT("w", f32, 1, 1, 3, 3)
	runNNCases(t, []nnCase{
		// corpus test_basic_conv_with_padding
		{name: "pads", op: "Conv", opset: 11, in: []nnIn{x5, w3}, attrs: []*model.Attr{atIs("kernel_shape", 3, 3), atIs("pads", 1, 1, 1, 1)}, want: []string{"float32[1,1,5,5]"}},
		// corpus test_basic_conv_without_padding
		{name: "no pads", op: "Conv", opset: 11, in: []nnIn{x5, w3}, attrs: []*model.Attr{atIs("kernel_shape", 3, 3), atIs("pads", 0, 0, 0, 0)}, want: []string{"float32[1,1,3,3]"}},
		// corpus test_conv_with_strides_and_asymmetric_padding: (7+1+1-3)/2+1 = 4, (5+0+0-3)/2+1 = 2
		{name: "strides asymmetric pads", op: "Conv", opset: 11, in: []nnIn{nnRT("x", f32, 1, 1, 7, 5), w3},
			attrs: []*model.Attr{atIs("kernel_shape", 3, 3), atIs("pads", 1, 0, 1, 0), atIs("strides", 2, 2)}, want: []string{"float32[1,1,4,2]"}},
		// corpus test_conv_with_autopad_same: ceil(5/2) = 3
		{name: "SAME_LOWER", op: "Conv", opset: 11, in: []nnIn{x5, w3}, attrs: []*model.Attr{atS("auto_pad", "SAME_LOWER"), atIs("kernel_shape", 3, 3), atIs("strides", 2, 2)}, want: []string{"float32[1,1,3,3]"}},
		// ONNX operator spec formula: VALID pads nothing, (5-3)/2+1 = 2
		{name: "VALID", op: "Conv", in: []nnIn{x5, w3}, attrs: []*model.Attr{atS("auto_pad", "VALID"), atIs("strides", 2, 2), atIs("pads", 9, 9, 9, 9)}, want: []string{"float32[1,1,2,2]"}},
		// hand-worked: dilation 2 makes the 3-kernel span 5; (7-5)/1+1 = 3
		{name: "dilations", op: "Conv", in: []nnIn{nnRT("x", f32, 1, 1, 7, 7), w3}, attrs: []*model.Attr{atIs("dilations", 2, 2)}, want: []string{"float32[1,1,3,3]"}},
		// hand-worked: MobileNet stem on symbolic input, (H+2-3)/2+1
		{name: "symbolic stride 2", op: "Conv", in: []nnIn{nnRT("x", f32, "N", 3, "H", "W"), nnRT("w", f32, 32, 3, 3, 3)},
			attrs: []*model.Attr{atIs("pads", 1, 1, 1, 1), atIs("strides", 2, 2)}, want: []string{"float32[N,32,((H-1)/2)+1,((W-1)/2)+1]"}},
		// hand-worked: 3×3 pad 1 stride 1 keeps the size, symbol unchanged
		{name: "symbolic same size", op: "Conv", in: []nnIn{nnRT("x", f32, "N", 3, "H", "W"), nnRT("w", f32, 8, 3, 3, 3)},
			attrs: []*model.Attr{atIs("pads", 1, 1, 1, 1)}, want: []string{"float32[N,8,H,W]"}},
		// ONNX operator spec formula: SAME_UPPER gives ceil(in/stride)
		{name: "symbolic SAME_UPPER", op: "Conv", in: []nnIn{nnRT("x", f32, "N", 3, "H", 9), nnRT("w", f32, 8, 3, 3, 3)},
			attrs: []*model.Attr{atS("auto_pad", "SAME_UPPER"), atIs("strides", 2, 2)}, want: []string{"float32[N,8,ceil(H/2),5]"}},
		// hand-worked: depthwise, 32 groups of one channel
		{name: "depthwise", op: "Conv", in: []nnIn{nnRT("x", f32, 1, 32, 112, 112), nnRT("w", f32, 32, 1, 3, 3)},
			attrs: []*model.Attr{atI("group", 32), atIs("pads", 1, 1, 1, 1)}, want: []string{"float32[1,32,112,112]"}},
		// corpus pytorch-converted test_Conv1d_dilated: (10-(3-1)*2-1)/1+1 = 6 (its weight and bias
		// are initializers; here graph inputs of the same shapes)
		{name: "1-D", op: "Conv", opset: 6, in: []nnIn{nnRT("x", f32, 2, 4, 10), nnRT("w", f32, 5, 4, 3), nnRT("b", f32, 5)},
			attrs: []*model.Attr{atIs("dilations", 2), atI("group", 1), atIs("kernel_shape", 3), atIs("pads", 0, 0), atIs("strides", 1)}, want: []string{"float32[2,5,6]"}},
		// hand-worked: kernel_shape attribute wins over symbolic weight dims
		{name: "kernel_shape attr", op: "Conv", in: []nnIn{nnRT("x", f32, 1, 1, 5, 5), nnRT("w", f32, 1, 1, "kh", "kw")}, attrs: []*model.Attr{atIs("kernel_shape", 3, 3)}, want: []string{"float32[1,1,3,3]"}},
		{name: "kernel unknown", op: "Conv", in: []nnIn{nnRT("x", f32, 1, 1, 5, 5), nnRT("w", f32, 1, 1, "kh", "kw")}, err: "kernel size is not known"},
		{name: "kernel too big", op: "Conv", in: []nnIn{nnRT("x", f32, 1, 1, 2, 2), w3}, err: "kernel 3 is larger than padded input 2 on spatial axis 0"},
		{name: "channels", op: "Conv", in: []nnIn{nnRT("x", f32, 1, 3, 8, 8), nnRT("w", f32, 4, 2, 3, 3)}, err: "input has 3 channels but weights expect 2"},
		{name: "rank", op: "Conv", in: []nnIn{nnRT("x", f32, 1, 3), nnRT("w", f32, 4, 3)}, err: "rank ≥ 3"},
		{name: "bad auto_pad", op: "Conv", in: []nnIn{x5, w3}, attrs: []*model.Attr{atS("auto_pad", "SAME")}, err: `auto_pad "SAME"`},
		{name: "bad strides", op: "Conv", in: []nnIn{x5, w3}, attrs: []*model.Attr{atIs("strides", 0, 1)}, err: "stride 0 on spatial axis 0 is not positive"},
		{name: "pads length", op: "Conv", in: []nnIn{x5, w3}, attrs: []*model.Attr{atIs("pads", 1, 1)}, err: "pads has 2 entries"},
		// the bias of unknown rank does not block the output
		{name: "bias unknown rank", op: "Conv", in: []nnIn{x5, w3, nnUnk("b", f32)}, want: []string{"float32[1,1,3,3]"}},

		// corpus test_basic_convinteger: int32 accumulator
		{name: "ConvInteger", op: "ConvInteger", opset: 10, in: []nnIn{nnRT("x", model.Uint8, 1, 1, 3, 3), nnRT("w", model.Uint8, 1, 1, 2, 2), nnRT("xz", model.Uint8)}, want: []string{"int32[1,1,2,2]"}},
		// corpus test_qlinearconv
		{name: "QLinearConv", op: "QLinearConv", opset: 10, in: []nnIn{
			nnRT("x", model.Uint8, 1, 1, 7, 7), nnRT("xs", f32), nnRT("xz", model.Uint8),
			nnRT("w", model.Uint8, 1, 1, 1, 1), nnRT("ws", f32, 1), nnRT("wz", model.Uint8, 1),
			nnRT("ys", f32), nnRT("yz", model.Uint8)}, want: []string{"uint8[1,1,7,7]"}},
		// hand-worked, after test_qlinearconv with an int8 y_zero_point: the output type is
		// y_zero_point's (ONNX operator spec, QLinearConv-10), not x's
		{name: "QLinearConv int8 output", op: "QLinearConv", opset: 10, in: []nnIn{
			nnRT("x", model.Uint8, 1, 1, 7, 7), nnRT("xs", f32), nnRT("xz", model.Uint8),
			nnRT("w", model.Uint8, 1, 1, 1, 1), nnRT("ws", f32, 1), nnRT("wz", model.Uint8, 1),
			nnRT("ys", f32), nnRT("yz", model.Int8)}, want: []string{"int8[1,1,7,7]"}},
		// ONNX operator spec (DeformConv-19): shaped as Conv; offset [N, 2*kh*kw, oh, ow]
		{name: "DeformConv", op: "DeformConv", opset: 19, in: []nnIn{nnRT("x", f32, 1, 1, 3, 3), nnRT("w", f32, 1, 1, 2, 2), nnRT("offset", f32, 1, 8, 2, 2)}, want: []string{"float32[1,1,2,2]"}},
	})
}

func TestConvTransposeShapes(t *testing.T) {
	x3 := nnRT("x", f32, 1, 1, 3, 3)
	w := nnRT("w", f32, 1, 2, 3, 3)
	runNNCases(t, []nnCase{
		// corpus test_convtranspose: 1*(3-1)+3 = 5
		{name: "default", op: "ConvTranspose", opset: 11, in: []nnIn{x3, w}, want: []string{"float32[1,2,5,5]"}},
		// corpus test_convtranspose_pad: 3*(3-1)+1+3 = 10, 2*(3-1)+1+3 = 8
		{name: "output_padding", op: "ConvTranspose", opset: 11, in: []nnIn{x3, w}, attrs: []*model.Attr{atIs("strides", 3, 2), atIs("output_padding", 1, 1)}, want: []string{"float32[1,2,10,8]"}},
		// corpus test_convtranspose_output_shape
		{name: "output_shape", op: "ConvTranspose", opset: 11, in: []nnIn{x3, w}, attrs: []*model.Attr{atIs("strides", 3, 2), atIs("output_shape", 10, 8)}, want: []string{"float32[1,2,10,8]"}},
		// hand-worked: the full [N, C, H, W] form some exporters write
		{name: "output_shape full", op: "ConvTranspose", in: []nnIn{x3, w}, attrs: []*model.Attr{atIs("output_shape", 1, 2, 10, 8)}, want: []string{"float32[1,2,10,8]"}},
		// corpus test_convtranspose_autopad_same: 3*2 = 6
		{name: "SAME_UPPER", op: "ConvTranspose", opset: 11, in: []nnIn{x3, w}, attrs: []*model.Attr{atS("auto_pad", "SAME_UPPER"), atIs("strides", 2, 2)}, want: []string{"float32[1,2,6,6]"}},
		// ONNX operator spec formula: SAME gives in*stride even with output_padding or a kernel
		// smaller than the stride (ONNX 1.12's infer_shapes says 11 and 13 here)
		{name: "SAME output_padding", op: "ConvTranspose", in: []nnIn{nnRT("x", f32, 1, 1, 5), nnRT("w", f32, 1, 1, 5)},
			attrs: []*model.Attr{atS("auto_pad", "SAME_UPPER"), atIs("strides", 2), atIs("output_padding", 1), atIs("dilations", 3)}, want: []string{"float32[1,1,10]"}},
		{name: "SAME small kernel", op: "ConvTranspose", in: []nnIn{nnRT("x", f32, 1, 1, 7), nnRT("w", f32, 1, 1, 1)},
			attrs: []*model.Attr{atS("auto_pad", "SAME_LOWER"), atIs("strides", 2)}, want: []string{"float32[1,1,14]"}},
		// corpus test_convtranspose_pads: 3*(3-1)+3-1-1 = 7, 2*(3-1)+3-2-2 = 3
		{name: "pads", op: "ConvTranspose", opset: 11, in: []nnIn{x3, w}, attrs: []*model.Attr{atIs("strides", 3, 2), atIs("pads", 1, 2, 1, 2)}, want: []string{"float32[1,2,7,3]"}},
		// corpus test_convtranspose_dilations: (3-1)+(2-1)*2+1 = 5
		{name: "dilations", op: "ConvTranspose", opset: 11, in: []nnIn{x3, nnRT("w", f32, 1, 1, 2, 2)}, attrs: []*model.Attr{atIs("dilations", 2, 2)}, want: []string{"float32[1,1,5,5]"}},
		// hand-worked: DCGAN-style 4×4 stride 2 pad 1 upsampling doubles a symbolic size
		{name: "symbolic", op: "ConvTranspose", in: []nnIn{nnRT("x", f32, "N", 8, "H", 4), nnRT("w", f32, 8, 3, 4, 4)},
			attrs: []*model.Attr{atIs("strides", 2, 2), atIs("pads", 1, 1, 1, 1), atI("group", 2)}, want: []string{"float32[N,6,(2*(H-1))+2,8]"}},
		{name: "channels", op: "ConvTranspose", in: []nnIn{nnRT("x", f32, 1, 4, 3, 3), w}, err: "input has 4 channels but weights W's dim 0 is 1"},
		{name: "non-positive", op: "ConvTranspose", in: []nnIn{x3, w}, attrs: []*model.Attr{atIs("pads", 3, 3, 3, 3)}, err: "output size -1 on spatial axis 0 is not positive"},
	})
}
