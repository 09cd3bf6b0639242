package build

import "github.com/loadline/loadline/model"

// The builder's own shape arithmetic: just enough to size weights and to
// type graph outputs. Anything it cannot work out becomes a fresh symbol;
// package measure does real inference.

// broadcast applies the multidirectional (numpy) broadcasting rule.
func (b *Builder) broadcast(op, name string, x, y model.Shape) (model.Shape, bool) {
	n := max(len(x), len(y))
	out := make(model.Shape, n)
	for i := range n {
		var dx, dy model.Dim = model.Known(1), model.Known(1)
		if j := i - (n - len(x)); j >= 0 {
			dx = x[j]
		}
		if j := i - (n - len(y)); j >= 0 {
			dy = y[j]
		}
		switch {
		case dx == dy:
			out[i] = dx
		case dx.IsKnown() && dx.Value == 1:
			out[i] = dy
		case dy.IsKnown() && dy.Value == 1:
			out[i] = dx
		case dx.IsKnown() && dy.IsKnown():
			b.fail("%s %q: shapes %s and %s do not broadcast", op, name, x, y)
			return nil, false
		case dx.IsKnown():
			out[i] = dx
		case dy.IsKnown():
			out[i] = dy
		default:
			out[i] = b.unknownDim()
		}
	}
	return out, true
}

// window is the geometry of a convolution or pooling window along each
// spatial axis.
type window struct {
	kernel, strides, pads, dilations []int64
	ceil                             bool
}

// fill completes defaults and checks lengths against the spatial rank.
func (b *Builder) fillWindow(op, name string, w *window, spatial int) bool {
	if len(w.kernel) != spatial {
		b.fail("%s %q: kernel %v has %d dims, the input has %d spatial dims", op, name, w.kernel, len(w.kernel), spatial)
		return false
	}
	if w.strides == nil {
		w.strides = ones(spatial)
	}
	if w.dilations == nil {
		w.dilations = ones(spatial)
	}
	if w.pads == nil {
		w.pads = make([]int64, 2*spatial)
	}
	if len(w.strides) != spatial || len(w.dilations) != spatial || len(w.pads) != 2*spatial {
		b.fail("%s %q: strides %v, dilations %v or pads %v do not match %d spatial dims", op, name, w.strides, w.dilations, w.pads, spatial)
		return false
	}
	for i := range spatial {
		if w.kernel[i] < 1 || w.strides[i] < 1 || w.dilations[i] < 1 || w.pads[i] < 0 || w.pads[i+spatial] < 0 {
			b.fail("%s %q: kernel %v, strides %v, dilations %v and pads %v must be positive", op, name, w.kernel, w.strides, w.dilations, w.pads)
			return false
		}
	}
	return true
}

// slide is the output extent along each spatial axis of a window sliding
// over in, by the formula of ONNX's Conv and pooling specs (ceil_mode
// rounds up; the spec has no PyTorch-style correction for a last window
// that starts in the right padding).
func (b *Builder) slide(op, name string, in model.Shape, w window) (model.Shape, bool) {
	spatial := len(w.kernel)
	out := make(model.Shape, spatial)
	for i := range spatial {
		d := in[i]
		if !d.IsKnown() {
			out[i] = b.unknownDim()
			continue
		}
		span := d.Value + w.pads[i] + w.pads[i+spatial] - w.dilations[i]*(w.kernel[i]-1) - 1
		if span < 0 {
			b.fail("%s %q: window %v is larger than the padded input %s", op, name, w.kernel, in)
			return nil, false
		}
		n := span/w.strides[i] + 1
		if w.ceil && span%w.strides[i] != 0 {
			n++
		}
		out[i] = model.Known(n)
	}
	return out, true
}

func ones(n int) []int64 {
	s := make([]int64, n)
	for i := range s {
		s[i] = 1
	}
	return s
}

// axis normalises a possibly negative axis against rank r.
func (b *Builder) axis(op, name string, a int64, r int) (int, bool) {
	if a < -int64(r) || a >= int64(r) {
		b.fail("%s %q: axis %d is out of range for rank %d", op, name, a, r)
		return 0, false
	}
	if a < 0 {
		a += int64(r)
	}
	return int(a), true
}

// product multiplies dims; ok is false when one is symbolic.
func product(s model.Shape) (int64, bool) { return s.Elements() }
