package measure

import (
	"fmt"
	"sync/atomic"

	"github.com/loadline/loadline/model"
)

// Value is what shape inference knows about one value of a graph: its type
// and, when it is small and statically known, its contents. Contents are what
// lets exporter output such as Shape→Gather→Concat→Reshape resolve to numbers.
type Value struct {
	Type model.Type
	// contents is what is known of the value's elements, nil when
	// nothing is: the contents a rule found (setHeld; rules set them while
	// inference runs, one goroutine), or a stored tensor's, read only when
	// a rule asks for them (Const): most weights are never read element by
	// element, and converting each to float64s up front costs time and
	// memory for nothing. One field for both keeps a value at 64 bytes.
	contents *storedContents
	// seq is what is known of a sequence value's elements, nil when
	// nothing is: a pointer, as few values are sequences and a list and
	// flag in every value made each a quarter larger.
	seq *sequence
	// Weight marks a value that comes straight from an initializer or a
	// Constant node: stored in the model file, not computed at run time.
	Weight bool
	// Absent marks an optional value known to hold nothing.
	Absent bool
	// State marks a tensor that keeps its value from one invocation to
	// the next (a TFLite variable tensor): neither a weight nor an
	// activation; the runtime view counts it as persistent bytes.
	State bool
}

// sequence is what is known of the elements of a sequence value.
type sequence struct {
	items []*Value
	known bool // items lists every element
}

// Seq is the elements of a sequence value whose length is known.
func (v *Value) Seq() []*Value {
	if v.seq == nil {
		return nil
	}
	return v.seq.items
}

// SeqKnown reports that Seq lists every element of a sequence value.
func (v *Value) SeqKnown() bool { return v.seq != nil && v.seq.known }

// Data holds the contents of a small constant tensor in row-major order.
// Integer and bool tensors keep their elements as dims, so that a shape read
// from a tensor with symbolic dims ("batch") flows through folding as the
// symbol rather than being lost.
type Data struct {
	Ints    []model.Dim
	Floats  []float64
	Strings []string
}

// maxFoldElements bounds the tensors whose contents inference holds: shape
// arithmetic needs a handful of elements, and holding weights would cost
// memory for nothing.
const maxFoldElements = 1 << 16

// Len is the number of elements held.
func (d *Data) Len() int {
	switch {
	case d.Ints != nil:
		return len(d.Ints)
	case d.Floats != nil:
		return len(d.Floats)
	default:
		return len(d.Strings)
	}
}

// kind reports which slice is in use: 'i', 'f' or 's'.
func (d *Data) kind() byte {
	switch {
	case d.Ints != nil:
		return 'i'
	case d.Floats != nil:
		return 'f'
	case d.Strings != nil:
		return 's'
	}
	return 'i'
}

// take builds a Data from the elements at idx.
func (d *Data) take(idx []int) *Data {
	out := &Data{}
	switch d.kind() {
	case 'i':
		out.Ints = make([]model.Dim, len(idx))
		for i, j := range idx {
			out.Ints[i] = d.Ints[j]
		}
	case 'f':
		out.Floats = make([]float64, len(idx))
		for i, j := range idx {
			out.Floats[i] = d.Floats[j]
		}
	case 's':
		out.Strings = make([]string, len(idx))
		for i, j := range idx {
			out.Strings[i] = d.Strings[j]
		}
	}
	return out
}

// concatData joins contents of the same kind.
func concatData(parts []*Data) *Data {
	out := &Data{}
	for _, p := range parts {
		switch p.kind() {
		case 'i':
			if out.Ints == nil {
				out.Ints = []model.Dim{}
			}
			out.Ints = append(out.Ints, p.Ints...)
		case 'f':
			if out.Floats == nil {
				out.Floats = []float64{}
			}
			out.Floats = append(out.Floats, p.Floats...)
		case 's':
			if out.Strings == nil {
				out.Strings = []string{}
			}
			out.Strings = append(out.Strings, p.Strings...)
		}
	}
	return out
}

// KnownInts returns the contents as int64s when every element is known.
func (d *Data) KnownInts() ([]int64, bool) {
	if d == nil || d.Strings != nil {
		return nil, false
	}
	if d.Floats != nil {
		out := make([]int64, len(d.Floats))
		for i, f := range d.Floats {
			out[i] = int64(f)
		}
		return out, true
	}
	out := make([]int64, len(d.Ints))
	for i, v := range d.Ints {
		if !v.IsKnown() {
			return nil, false
		}
		out[i] = v.Value
	}
	return out, true
}

// AsFloats returns the contents as float64s when every element is known.
func (d *Data) AsFloats() ([]float64, bool) {
	if d == nil {
		return nil, false
	}
	if d.Floats != nil {
		return d.Floats, true
	}
	if d.Strings != nil {
		return nil, false
	}
	out := make([]float64, len(d.Ints))
	for i, v := range d.Ints {
		if !v.IsKnown() {
			return nil, false
		}
		out[i] = float64(v.Value)
	}
	return out, true
}

// intData wraps known int64s.
func intData(v ...int64) *Data {
	out := &Data{Ints: make([]model.Dim, len(v))}
	for i, x := range v {
		out.Ints[i] = model.Known(x)
	}
	return out
}

// dataFromTensor reads a small constant's contents; nil when it is too big,
// declared without values, or unreadable (inference then knows its shape only).
func dataFromTensor(t *model.Tensor) *Data {
	n := t.Elements()
	if n < 0 || n > maxFoldElements || !t.HasData() {
		return nil
	}
	switch {
	case t.DType == model.String:
		if t.Data.Encoding != model.EncodingStrings || int64(len(t.Data.Segments)) < n {
			return nil
		}
		out := &Data{Strings: make([]string, n)}
		for i := range out.Strings {
			out.Strings[i] = string(t.Data.Segments[i])
		}
		return out
	case t.DType.IsFloat() || t.DType == model.Complex64 || t.DType == model.Complex128:
		if t.DType == model.Complex64 || t.DType == model.Complex128 {
			return nil
		}
		f, err := t.Float64s(-1)
		if err != nil {
			return nil
		}
		if f == nil {
			f = []float64{}
		}
		return &Data{Floats: f}
	default:
		v, err := t.Int64s(-1)
		if err != nil {
			return nil
		}
		return intData(v...)
	}
}

// tensorValue is the Value of a constant tensor.
func tensorValue(t *model.Tensor) *Value {
	return &Value{
		Type:     model.TensorType(t.DType, t.Shape()),
		contents: &storedContents{tensor: t},
		Weight:   true,
	}
}

// storedContents is a value's contents: a stored tensor's, read on first
// use, or those a rule found (tensor nil, data set: heldContents). Values
// that re-view the tensor (shareContents) share it, so it is read once,
// and the passes after inference, which may run side by side (Measure),
// read it without a lock on the way once it is read. Two passes asking at
// once may both convert it (the conversion is the same); the first to
// finish is kept, so every caller sees one Data. No sync.Once: a large
// model has tens of thousands of these, and it made each twice the size.
type storedContents struct {
	tensor *model.Tensor
	data   atomic.Pointer[Data] // nil until read; noContents when unreadable or too large
}

// noContents marks stored contents read and found unreadable or too large.
var noContents = &Data{}

// heldContents holds d, contents a rule found; nil for none.
func heldContents(d *Data) *storedContents {
	if d == nil {
		return nil
	}
	s := &storedContents{}
	s.data.Store(d)
	return s
}

// setHeld makes d, contents a rule found, v's contents.
func (v *Value) setHeld(d *Data) { v.contents = heldContents(d) }

// read is the contents, read on the first call.
func (s *storedContents) read() *Data {
	d := s.data.Load()
	if d == nil {
		if d = dataFromTensor(s.tensor); d == nil {
			d = noContents
		}
		s.data.CompareAndSwap(nil, d)
		d = s.data.Load()
	}
	return s.loaded(d)
}

// loaded is d, a stored contents' data, with noContents as nil.
func (s *storedContents) loaded(d *Data) *Data {
	if d == noContents {
		return nil
	}
	return d
}

// Const is the known contents of v: nil when unknown or too large to hold
// (more than maxFoldElements). A stored tensor's contents are read on the
// first call.
func (v *Value) Const() *Data {
	if v.contents == nil {
		return nil
	}
	return v.contents.read()
}

// heldData is the contents of v a rule has found or read so far, without
// reading a stored tensor's: what inference work counts (work.go).
func (v *Value) heldData() *Data {
	if v.contents == nil {
		return nil
	}
	return v.contents.loaded(v.contents.data.Load())
}

// shareContents makes v's contents those of src, in the same element order,
// without reading them.
func (v *Value) shareContents(src *Value) {
	v.contents = src.contents
}

// String prints the type and, for small known contents, the values.
func (v *Value) String() string {
	if v == nil {
		return "<none>"
	}
	s := v.Type.String()
	if v.Const() != nil && v.Const().Len() <= 8 {
		switch v.Const().kind() {
		case 'i':
			s += fmt.Sprint(model.Shape(v.Const().Ints))
		case 'f':
			s += fmt.Sprint(v.Const().Floats)
		}
	}
	return s
}

// rank returns the rank and whether it is known.
func (v *Value) rank() (int, bool) {
	if v == nil || !v.Type.RankKnown {
		return 0, false
	}
	return len(v.Type.Shape), true
}

// shapeKnown reports whether the value is a tensor of known rank.
func (v *Value) shapeKnown() bool { return v != nil && v.Type.RankKnown }

// dataEqual reports whether two contents hold the same elements.
func dataEqual(a, b *Data) bool {
	if a == nil || b == nil || a.kind() != b.kind() || a.Len() != b.Len() {
		return false
	}
	switch a.kind() {
	case 'i':
		for i := range a.Ints {
			if a.Ints[i] != b.Ints[i] {
				return false
			}
		}
	case 'f':
		for i := range a.Floats {
			if a.Floats[i] != b.Floats[i] && !(a.Floats[i] != a.Floats[i] && b.Floats[i] != b.Floats[i]) {
				return false
			}
		}
	case 's':
		for i := range a.Strings {
			if a.Strings[i] != b.Strings[i] {
				return false
			}
		}
	}
	return true
}
