package onnx

import (
	"github.com/loadline/loadline/model"
)

// TypeProto at nesting depth depth; off is the offset of the field holding
// it. Of the oneof value fields the last one present wins, as in protobuf.
func (d *decoder) typeProto(lo, hi, depth, off int) (model.Type, error) {
	if depth > d.maxDepth {
		return model.Type{}, d.errAt(off, "type protos nested more than %d deep (Options.MaxDepth)", d.maxDepth)
	}
	var t model.Type
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return t, err
		}
		if !ok {
			return t, nil
		}
		switch f.num {
		case 1:
			if err = d.msg(&f, "tensor_type"); err == nil {
				t, err = d.tensorType(f.lo, f.hi, model.KindTensor)
				err = within(err, "tensor_type")
			}
		case 8:
			if err = d.msg(&f, "sparse_tensor_type"); err == nil {
				t, err = d.tensorType(f.lo, f.hi, model.KindSparseTensor)
				err = within(err, "sparse_tensor_type")
			}
		case 4, 9:
			name, kind := "sequence_type", model.KindSequence
			if f.num == 9 {
				name, kind = "optional_type", model.KindOptional
			}
			if err = d.msg(&f, name); err == nil {
				t, err = d.elemType(f.lo, f.hi, depth, kind)
				err = within(err, name)
			}
		case 5:
			if err = d.msg(&f, "map_type"); err == nil {
				t, err = d.mapType(f.lo, f.hi, depth)
				err = within(err, "map_type")
			}
		case 6:
			err = d.skipBytes(&f, "denotation")
		}
		if err != nil {
			return t, err
		}
	}
}

// TypeProto.Tensor and TypeProto.SparseTensor. A missing shape field means
// the rank is unknown.
func (d *decoder) tensorType(lo, hi int, kind model.TypeKind) (model.Type, error) {
	t := model.Type{Kind: kind}
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return t, err
		}
		if !ok {
			return t, nil
		}
		switch f.num {
		case 1:
			var v int32
			v, err = d.int32(&f, "elem_type")
			t.DType = model.DType(v)
		case 2:
			if err = d.msg(&f, "shape"); err == nil {
				t.Shape, err = d.shape(f.lo, f.hi)
				t.RankKnown = true
				err = within(err, "shape")
			}
		}
		if err != nil {
			return t, err
		}
	}
}

// TypeProto.Sequence and TypeProto.Optional: one elem_type.
func (d *decoder) elemType(lo, hi, depth int, kind model.TypeKind) (model.Type, error) {
	t := model.Type{Kind: kind}
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return t, err
		}
		if !ok {
			break
		}
		if f.num == 1 {
			if err = d.msg(&f, "elem_type"); err == nil {
				var e model.Type
				e, err = d.typeProto(f.lo, f.hi, depth+1, f.off)
				t.Elem = &e
				err = within(err, "elem_type")
			}
		}
		if err != nil {
			return t, err
		}
	}
	if kind == model.KindSequence && t.Elem != nil && (t.Elem.Kind == model.KindTensor || t.Elem.Kind == model.KindSparseTensor) {
		t.DType = t.Elem.DType
	}
	return t, nil
}

// TypeProto.Map: the key type goes to DType, the value type to Elem.
func (d *decoder) mapType(lo, hi, depth int) (model.Type, error) {
	t := model.Type{Kind: model.KindMap}
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return t, err
		}
		if !ok {
			return t, nil
		}
		switch f.num {
		case 1:
			var v int32
			v, err = d.int32(&f, "key_type")
			t.DType = model.DType(v)
		case 2:
			if err = d.msg(&f, "value_type"); err == nil {
				var e model.Type
				e, err = d.typeProto(f.lo, f.hi, depth+1, f.off)
				t.Elem = &e
				err = within(err, "value_type")
			}
		}
		if err != nil {
			return t, err
		}
	}
}

// TensorShapeProto. Dims with neither a value nor a name get fresh symbols
// once the whole model is read (see nameFresh).
func (d *decoder) shape(lo, hi int) (model.Shape, error) {
	s := model.Shape{}
	var unnamed []int
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return s, err
		}
		if !ok {
			break
		}
		if f.num != 1 {
			continue
		}
		name := indexed("dim", len(s))
		if err = d.msg(&f, name); err != nil {
			return s, err
		}
		dim, set, err := d.dim(f.lo, f.hi)
		if err != nil {
			return s, within(err, name)
		}
		if !set {
			unnamed = append(unnamed, len(s))
		}
		s = append(s, dim)
	}
	for _, i := range unnamed {
		d.fresh = append(d.fresh, &s[i])
	}
	return s, nil
}

// TensorShapeProto.Dimension; set is false when it has neither a dim_value
// nor a non-empty dim_param.
func (d *decoder) dim(lo, hi int) (dim model.Dim, set bool, err error) {
	r := d.reader(lo, hi)
	var f field
	for {
		var ok bool
		ok, err = r.next(&f)
		if err != nil || !ok {
			return dim, set, err
		}
		switch f.num {
		case 1:
			var v int64
			v, err = d.int64(&f, "dim_value")
			// A negative size (some exporters write -1 for "unknown") is no size:
			// the dim becomes a fresh symbol, as an unset one does.
			dim, set = model.Known(v), v >= 0
		case 2:
			var s string
			s, err = d.str(&f, "dim_param")
			dim, set = model.Sym(s), s != ""
			if set {
				if d.params == nil {
					d.params = map[string]bool{}
				}
				d.params[s] = true
			}
		case 3:
			err = d.skipBytes(&f, "denotation")
		}
		if err != nil {
			return dim, set, err
		}
	}
}
