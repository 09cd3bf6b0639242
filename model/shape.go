package model

import (
	"strconv"
	"strings"
)

// Dim is one dimension of a shape: a known size, or a symbol. A symbol is a
// name from the model file ("batch"), an expression over such names that
// shape inference derived ("batch*3"), or a fresh name for a size nobody can
// know statically ("?3").
type Dim struct {
	Value  int64  // the size, when Symbol is empty
	Symbol string // non-empty for a symbolic dimension
}

// Known returns the dimension of known size v.
func Known(v int64) Dim { return Dim{Value: v} }

// Sym returns the symbolic dimension named s.
func Sym(s string) Dim { return Dim{Symbol: s} }

// IsKnown reports whether the dimension has a known size.
func (d Dim) IsKnown() bool { return d.Symbol == "" }

// String prints the size or the symbol.
func (d Dim) String() string {
	if d.Symbol != "" {
		return d.Symbol
	}
	return strconv.FormatInt(d.Value, 10)
}

// Shape is a list of dimensions, outermost first. A nil Shape in a Type whose
// RankKnown is false means even the rank is unknown; an empty, rank-known
// Shape is a scalar.
type Shape []Dim

// KnownShape builds a Shape of known sizes.
func KnownShape(dims ...int64) Shape {
	s := make(Shape, len(dims))
	for i, v := range dims {
		s[i] = Known(v)
	}
	return s
}

// AllKnown reports whether every dimension has a known size.
func (s Shape) AllKnown() bool {
	for _, d := range s {
		if !d.IsKnown() {
			return false
		}
	}
	return true
}

// Ints returns the sizes of a fully known shape; ok is false otherwise.
func (s Shape) Ints() (dims []int64, ok bool) {
	dims = make([]int64, len(s))
	for i, d := range s {
		if !d.IsKnown() {
			return nil, false
		}
		dims[i] = d.Value
	}
	return dims, true
}

// Elements is the product of the dimensions of a fully known shape. ok is
// false when a dimension is symbolic or the product overflows int64.
func (s Shape) Elements() (n int64, ok bool) {
	n = 1
	for _, d := range s {
		if !d.IsKnown() || d.Value < 0 {
			return 0, false
		}
		if d.Value != 0 && n > (1<<63-1)/d.Value {
			return 0, false
		}
		n *= d.Value
	}
	return n, true
}

// Equal reports whether two shapes have the same rank and the same
// dimensions, symbols compared by name.
func (s Shape) Equal(o Shape) bool {
	if len(s) != len(o) {
		return false
	}
	for i := range s {
		if s[i] != o[i] {
			return false
		}
	}
	return true
}

// Clone returns a copy that shares nothing with s.
func (s Shape) Clone() Shape {
	if s == nil {
		return nil
	}
	return append(Shape{}, s...)
}

// String prints the shape as [1,3,224,224] or [batch,1000].
func (s Shape) String() string {
	var b strings.Builder
	b.WriteByte('[')
	for i, d := range s {
		if i > 0 {
			b.WriteByte(',')
		}
		b.WriteString(d.String())
	}
	b.WriteByte(']')
	return b.String()
}

// TypeKind says what kind of value a Type describes.
type TypeKind uint8

// The kinds of value a graph carries. Deployable models use tensors; the
// others exist so that a graph using them still decodes and reports sensibly.
const (
	KindUnknown TypeKind = iota
	KindTensor
	KindSequence
	KindMap
	KindOptional
	KindSparseTensor
)

func (k TypeKind) String() string {
	return [...]string{"unknown", "tensor", "sequence", "map", "optional", "sparse_tensor"}[k]
}

// Type is the type of a value flowing through a graph.
type Type struct {
	Kind      TypeKind
	RankKnown bool  // beside Kind, so that the small fields pack in 8 bytes
	DType     DType // element type of a tensor, or of a sequence's tensors
	Shape     Shape // meaningful when RankKnown
	Elem      *Type // element type of a sequence or optional
}

// TensorType returns a tensor type of known rank.
func TensorType(dt DType, shape Shape) Type {
	return Type{Kind: KindTensor, DType: dt, Shape: shape, RankKnown: true}
}

// String prints the type as float32[1,3,224,224].
func (t Type) String() string {
	switch t.Kind {
	case KindTensor, KindSparseTensor:
		if !t.RankKnown {
			return t.DType.String() + "[?]"
		}
		return t.DType.String() + t.Shape.String()
	case KindSequence, KindOptional:
		if t.Elem != nil {
			return t.Kind.String() + "<" + t.Elem.String() + ">"
		}
	}
	return t.Kind.String()
}
