package measure

import (
	"fmt"

	"github.com/loadline/loadline/model"
)

// Convolutions: Conv, ConvInteger, QLinearConv, DeformConv and
// ConvTranspose. Every form slides a kernel over the spatial axes of an
// [N, C, D1, ..., Dn] input; the sliding-window geometry (kernel, strides,
// dilations, pads, auto_pad, ceil_mode) is shared with pooling
// (ops_pool.go) through window and window.outDim.

var convOps = map[string]opRule{
	// rankFree: the rules read the ranks they need (X and W) themselves, so
	// an optional input of unknown rank (a bias, a zero point) does not keep
	// the output unresolved.
	"Conv":          {infer: inferConv, rankFree: true},
	"ConvInteger":   {infer: inferConvInteger, rankFree: true},
	"QLinearConv":   {infer: inferQLinearConv, rankFree: true},
	"DeformConv":    {infer: inferConv, rankFree: true},
	"ConvTranspose": {infer: inferConvTranspose, rankFree: true},
}

// window is the sliding-window geometry of a convolution or pooling node
// over n spatial axes.
type window struct {
	kernel    []int64
	strides   []int64
	dilations []int64
	pads      []int64 // begins of every axis, then ends: [x1_begin, x2_begin, ..., x1_end, x2_end, ...]
	autoPad   string  // NOTSET, SAME_UPPER, SAME_LOWER or VALID
	ceil      bool    // pooling's ceil_mode
}

// readWindow reads the window attributes of c's node for n spatial axes.
// kernel is the kernel size per axis (from kernel_shape or the weights).
func readWindow(c *ctx, n int, kernel []int64) (*window, error) {
	w := &window{kernel: kernel, autoPad: c.attrString("auto_pad", "NOTSET")}
	if len(kernel) != n {
		return nil, fmt.Errorf("kernel_shape has %d entries, the input has %d spatial axes", len(kernel), n)
	}
	for i, k := range kernel {
		if k <= 0 {
			return nil, fmt.Errorf("kernel size %d on spatial axis %d is not positive", k, i)
		}
	}
	var err error
	if w.strides, err = perAxis(c, "strides", n, 1); err != nil {
		return nil, err
	}
	if w.dilations, err = perAxis(c, "dilations", n, 1); err != nil {
		return nil, err
	}
	for i := 0; i < n; i++ {
		if w.strides[i] <= 0 {
			return nil, fmt.Errorf("stride %d on spatial axis %d is not positive", w.strides[i], i)
		}
		if w.dilations[i] <= 0 {
			return nil, fmt.Errorf("dilation %d on spatial axis %d is not positive", w.dilations[i], i)
		}
	}
	switch w.autoPad {
	case "", "NOTSET":
		w.autoPad = "NOTSET"
		if p, ok := c.attrInts("pads"); ok {
			if len(p) != 2*n {
				return nil, fmt.Errorf("pads has %d entries; %d spatial axes need %d (begins, then ends)", len(p), n, 2*n)
			}
			for i, v := range p {
				if v < 0 {
					return nil, fmt.Errorf("pad %d at position %d is negative", v, i)
				}
			}
			w.pads = p
		} else {
			w.pads = make([]int64, 2*n)
		}
	case "VALID", "SAME_UPPER", "SAME_LOWER":
		// auto_pad decides the padding; a pads attribute next to it is
		// ignored, as runtimes do.
		w.pads = make([]int64, 2*n)
	default:
		return nil, fmt.Errorf("auto_pad %q is not one of NOTSET, SAME_UPPER, SAME_LOWER, VALID", w.autoPad)
	}
	return w, nil
}

// perAxis reads an ints attribute with one entry per spatial axis, or the
// default for every axis when it is absent.
func perAxis(c *ctx, name string, n int, def int64) ([]int64, error) {
	v, ok := c.attrInts(name)
	if !ok || len(v) == 0 {
		out := make([]int64, n)
		for i := range out {
			out[i] = def
		}
		return out, nil
	}
	if len(v) != n {
		return nil, fmt.Errorf("%s has %d entries, the input has %d spatial axes", name, len(v), n)
	}
	return v, nil
}

// effKernel is the extent of the dilated kernel on axis i.
func (w *window) effKernel(i int) int64 { return (w.kernel[i]-1)*w.dilations[i] + 1 }

// outDim is the output size on spatial axis i for an input of size in, by
// the formulas of the ONNX Conv and pooling specs:
//
//	NOTSET/VALID: floor((in + pad_begin + pad_end - ((k-1)*d+1)) / s) + 1   (ceil with ceil_mode)
//	SAME_*:       ceil(in / s)
func (w *window) outDim(in model.Dim, i int) (model.Dim, error) {
	s := w.strides[i]
	ek := w.effKernel(i)
	if w.autoPad == "SAME_UPPER" || w.autoPad == "SAME_LOWER" {
		// The padding is whatever makes ceil(in/s) windows fit, so the
		// kernel size does not enter the output size. (With ceil_mode,
		// ONNX 1.12's infer_shapes can count one window more, one that
		// starts past the input; see the ceil_mode rule below.)
		return dimCeilDiv(in, model.Known(s)), nil
	}
	pb, pe := w.pads[i], w.pads[i+len(w.kernel)]
	if !in.IsKnown() {
		// (in + pads - ek) / s + 1, kept readable for the common stride 1.
		if s == 1 {
			return dimAdd(in, model.Known(pb+pe-ek+1)), nil
		}
		num := dimAdd(in, model.Known(pb+pe-ek))
		if w.ceil {
			return dimAdd(dimCeilDiv(num, model.Known(s)), model.Known(1)), nil
		}
		return dimAdd(dimFloorDiv(num, model.Known(s)), model.Known(1)), nil
	}
	padded := in.Value + pb + pe
	if padded < ek {
		if w.dilations[i] > 1 {
			return model.Dim{}, fmt.Errorf("dilated kernel %d (size %d, dilation %d) is larger than padded input %d on spatial axis %d", ek, w.kernel[i], w.dilations[i], padded, i)
		}
		return model.Dim{}, fmt.Errorf("kernel %d is larger than padded input %d on spatial axis %d", ek, padded, i)
	}
	if !w.ceil {
		return model.Known((padded-ek)/s + 1), nil
	}
	out := -floorDiv(-(padded-ek), s) + 1
	// With ceil_mode a last window that would start inside the end padding
	// is dropped: "sliding windows that would start in the right padded
	// region are ignored" (pooling specs since ONNX 1.16, onnx/onnx#5741,
	// matching PyTorch). ONNX 1.12's infer_shapes still counts it.
	if (out-1)*s >= in.Value+pb {
		out--
	}
	return model.Known(out), nil
}

// kernelFrom returns the kernel size per spatial axis: kernel_shape when
// set, else the spatial dims of the weights (which must be known).
func kernelFrom(c *ctx, ws model.Shape, n int) ([]int64, error) {
	if k, ok := c.attrInts("kernel_shape"); ok && len(k) > 0 {
		return k, nil
	}
	if len(ws) != n+2 {
		return nil, fmt.Errorf("weights have rank %d; %d spatial axes need rank %d", len(ws), n, n+2)
	}
	k, ok := ws[2:].Ints()
	if !ok {
		return nil, fmt.Errorf("kernel size is not known: weights %v have symbolic spatial dims and kernel_shape is not set", ws)
	}
	return k, nil
}

// convShape computes the output shape of a convolution whose data is input
// xi and whose weights are input wi: [N, M, out1, ..., outn] with M the
// number of filters (W's first dim).
func convShape(c *ctx, xi, wi int) (model.Shape, error) {
	xs, err := c.shape(xi)
	if err != nil {
		return nil, err
	}
	ws, err := c.shape(wi)
	if err != nil {
		return nil, err
	}
	if len(xs) < 3 {
		return nil, fmt.Errorf("input X has rank %d; convolution needs [N, C, spatial...] (rank ≥ 3)", len(xs))
	}
	if len(ws) != len(xs) {
		return nil, fmt.Errorf("weights W have rank %d, input X has rank %d; they must match", len(ws), len(xs))
	}
	group := c.attrInt("group", 1)
	if group <= 0 {
		return nil, fmt.Errorf("group %d is not positive", group)
	}
	if xs[1].IsKnown() && ws[1].IsKnown() {
		if xs[1].Value != ws[1].Value*group {
			return nil, fmt.Errorf("input has %d channels but weights expect %d (W's dim 1 is %d, group %d)", xs[1].Value, ws[1].Value*group, ws[1].Value, group)
		}
	}
	if ws[0].IsKnown() && ws[0].Value%group != 0 {
		return nil, fmt.Errorf("%d filters cannot be split into %d groups", ws[0].Value, group)
	}
	n := len(xs) - 2
	kernel, err := kernelFrom(c, ws, n)
	if err != nil {
		return nil, err
	}
	w, err := readWindow(c, n, kernel)
	if err != nil {
		return nil, err
	}
	out := model.Shape{xs[0], ws[0]}
	for i := 0; i < n; i++ {
		d, err := w.outDim(xs[2+i], i)
		if err != nil {
			return nil, err
		}
		out = append(out, d)
	}
	return out, nil
}

// inferConv covers Conv and DeformConv (whose offset and mask inputs do not
// change the output shape).
func inferConv(c *ctx) ([]*Value, error) {
	s, err := convShape(c, 0, 1)
	if err != nil {
		return nil, err
	}
	return []*Value{tensor(c.dtype(0), s)}, nil
}

// inferConvInteger: the output accumulates in int32.
func inferConvInteger(c *ctx) ([]*Value, error) {
	s, err := convShape(c, 0, 1)
	if err != nil {
		return nil, err
	}
	return []*Value{tensor(model.Int32, s)}, nil
}

// inferQLinearConv: inputs x, x_scale, x_zero_point, w, w_scale,
// w_zero_point, y_scale, y_zero_point, B; the output takes y_zero_point's
// type.
func inferQLinearConv(c *ctx) ([]*Value, error) {
	s, err := convShape(c, 0, 3)
	if err != nil {
		return nil, err
	}
	dt := c.dtype(7)
	if dt == model.Undefined {
		dt = c.dtype(0)
	}
	return []*Value{tensor(dt, s)}, nil
}

// inferConvTranspose follows the ConvTranspose spec:
//
//	out[i] = stride*(in-1) + output_padding + ((k-1)*d+1) - pad_begin - pad_end
//
// or in*stride with SAME_* auto_pad, or the output_shape attribute when set.
// Output channels are W's dim 1 times group. For SAME_*, ONNX 1.12's
// infer_shapes pads by max(0, kernel-stride) instead, which departs from
// in*stride when the kernel is smaller than the stride or output_padding
// is set; the spec, its reference implementation and onnxruntime give
// in*stride, and so does this rule.
func inferConvTranspose(c *ctx) ([]*Value, error) {
	xs, err := c.shape(0)
	if err != nil {
		return nil, err
	}
	ws, err := c.shape(1)
	if err != nil {
		return nil, err
	}
	if len(xs) < 3 {
		return nil, fmt.Errorf("input X has rank %d; ConvTranspose needs [N, C, spatial...] (rank ≥ 3)", len(xs))
	}
	if len(ws) != len(xs) {
		return nil, fmt.Errorf("weights W have rank %d, input X has rank %d; they must match", len(ws), len(xs))
	}
	group := c.attrInt("group", 1)
	if group <= 0 {
		return nil, fmt.Errorf("group %d is not positive", group)
	}
	if xs[1].IsKnown() && ws[0].IsKnown() && xs[1].Value != ws[0].Value {
		return nil, fmt.Errorf("input has %d channels but weights W's dim 0 is %d; they must match", xs[1].Value, ws[0].Value)
	}
	n := len(xs) - 2
	kernel, err := kernelFrom(c, ws, n)
	if err != nil {
		return nil, err
	}
	w, err := readWindow(c, n, kernel)
	if err != nil {
		return nil, err
	}
	out := model.Shape{xs[0], dimMul(ws[1], model.Known(group))}
	if os, ok := c.attrInts("output_shape"); ok && len(os) > 0 {
		// The spec gives the spatial sizes; some exporters write the full
		// shape [N, C, spatial...]. Either way the last n entries count.
		if len(os) != n && len(os) != n+2 {
			return nil, fmt.Errorf("output_shape has %d entries; %d spatial axes need %d", len(os), n, n)
		}
		for _, v := range os[len(os)-n:] {
			if v <= 0 {
				return nil, fmt.Errorf("output_shape %v has a non-positive size", os)
			}
			out = append(out, model.Known(v))
		}
		return []*Value{tensor(c.dtype(0), out)}, nil
	}
	outPad, err := perAxis(c, "output_padding", n, 0)
	if err != nil {
		return nil, err
	}
	for i := 0; i < n; i++ {
		in := xs[2+i]
		s := model.Known(w.strides[i])
		var d model.Dim
		if w.autoPad == "SAME_UPPER" || w.autoPad == "SAME_LOWER" {
			d = dimMul(in, s)
		} else {
			extra := outPad[i] + w.effKernel(i) - w.pads[i] - w.pads[i+n]
			d = dimAdd(dimMul(s, dimSub(in, model.Known(1))), model.Known(extra))
		}
		if d.IsKnown() && d.Value <= 0 {
			return nil, fmt.Errorf("output size %d on spatial axis %d is not positive (input %d, stride %d, kernel %d, pads %d+%d)", d.Value, i, in.Value, w.strides[i], w.effKernel(i), w.pads[i], w.pads[i+n])
		}
		out = append(out, d)
	}
	return []*Value{tensor(c.dtype(0), out)}, nil
}
