package onnx

import (
	"errors"
	"fmt"

	"google.golang.org/protobuf/encoding/protowire"
)

// field is one decoded field of a message. Payloads are not copied: a
// length-delimited field is the range [lo, hi) of the decoder's input.
type field struct {
	num    protowire.Number
	typ    protowire.Type
	off    int    // offset of the field's tag in the input
	v      uint64 // the value of a varint, fixed32 or fixed64 field
	lo, hi int    // the payload of a length-delimited field; the value bytes of others
}

// reader walks the fields of one message, the range [pos, end) of the input.
type reader struct {
	d        *decoder
	pos, end int
	names    fieldNames // for error messages; may be nil
	top      bool       // the outermost message: the whole input
}

// fieldNames names a message's fields, as onnx.proto does.
type fieldNames map[protowire.Number]string

var (
	modelFields  = fieldNames{1: "ir_version", 2: "producer_name", 3: "producer_version", 4: "domain", 5: "model_version", 6: "doc_string", 7: "graph", 8: "opset_import", 14: "metadata_props", 20: "training_info", 25: "functions"}
	graphFields  = fieldNames{1: "node", 2: "name", 5: "initializer", 10: "doc_string", 11: "input", 12: "output", 13: "value_info", 14: "quantization_annotation", 15: "sparse_initializer", 16: "metadata_props"}
	nodeFields   = fieldNames{1: "input", 2: "output", 3: "name", 4: "op_type", 5: "attribute", 6: "doc_string", 7: "domain"}
	attrFields   = fieldNames{1: "name", 2: "f", 3: "i", 4: "s", 5: "t", 6: "g", 7: "floats", 8: "ints", 9: "strings", 10: "tensors", 11: "graphs", 13: "doc_string", 14: "tp", 15: "type_protos", 20: "type", 21: "ref_attr_name", 22: "sparse_tensor", 23: "sparse_tensors"}
	tensorFields = fieldNames{1: "dims", 2: "data_type", 3: "segment", 4: "float_data", 5: "int32_data", 6: "string_data", 7: "int64_data", 8: "name", 9: "raw_data", 10: "double_data", 11: "uint64_data", 12: "doc_string", 13: "external_data", 14: "data_location"}
)

func (d *decoder) reader(lo, hi int) reader {
	return reader{d: d, pos: lo, end: hi, top: lo == 0 && hi == len(d.data)}
}

// fieldName is "7 (graph)" when the field is known, else "7".
func (r *reader) fieldName(num protowire.Number) string {
	if name, ok := r.names[num]; ok {
		return fmt.Sprintf("%d (%s)", num, name)
	}
	return fmt.Sprint(num)
}

// next reads the next field into f. It returns false at the end of the
// message. Lengths are checked against what is left of the message, so a
// corrupt length never leads to a large allocation.
func (r *reader) next(f *field) (bool, error) {
	if r.pos >= r.end {
		return false, nil
	}
	b := r.d.data[r.pos:r.end]
	off := r.pos
	num, typ, n := protowire.ConsumeTag(b)
	if n < 0 {
		return false, r.d.errAt(off, "bad field tag: %v", protowire.ParseError(n))
	}
	*f = field{num: num, typ: typ, off: off}
	b = b[n:]
	var m int
	switch typ {
	case protowire.VarintType:
		f.v, m = protowire.ConsumeVarint(b)
		if m < 0 {
			return false, r.d.errAt(off, "bad varint in field %s: %v", r.fieldName(num), protowire.ParseError(m))
		}
		f.lo, f.hi = r.pos+n, r.pos+n+m
	case protowire.Fixed32Type:
		var v uint32
		v, m = protowire.ConsumeFixed32(b)
		if m < 0 {
			return false, r.d.errAt(off, "truncated fixed32 field %s", r.fieldName(num))
		}
		f.v = uint64(v)
		f.lo, f.hi = r.pos+n, r.pos+n+m
	case protowire.Fixed64Type:
		f.v, m = protowire.ConsumeFixed64(b)
		if m < 0 {
			return false, r.d.errAt(off, "truncated fixed64 field %s", r.fieldName(num))
		}
		f.lo, f.hi = r.pos+n, r.pos+n+m
	case protowire.BytesType:
		l, k := protowire.ConsumeVarint(b)
		if k < 0 {
			return false, r.d.errAt(off, "bad length of length-delimited field %s: %v", r.fieldName(num), protowire.ParseError(k))
		}
		if l > uint64(len(b)-k) {
			hint := ""
			if r.top {
				// Only the outermost message can run past a cut file; a
				// nested length that overruns its message is corruption.
				hint = "; the file may be truncated"
			}
			return false, r.d.errAt(off, "truncated length-delimited field %s: length %d, %d bytes left%s", r.fieldName(num), l, len(b)-k, hint)
		}
		f.lo = r.pos + n + k
		f.hi = f.lo + int(l)
		m = k + int(l)
	case protowire.StartGroupType:
		// Groups are obsolete and ONNX uses none; skip one as an unknown
		// field. protowire bounds the recursion.
		m = protowire.ConsumeFieldValue(num, typ, b)
		if m < 0 {
			return false, r.d.errAt(off, "bad group field %d: %v", num, protowire.ParseError(m))
		}
		f.lo, f.hi = r.pos+n, r.pos+n+m
	default:
		return false, r.d.errAt(off, "unexpected wire type %d for field %d", typ, num)
	}
	r.pos += n + m
	return true, nil
}

func wireName(t protowire.Type) string {
	switch t {
	case protowire.VarintType:
		return "varint"
	case protowire.Fixed32Type:
		return "fixed32"
	case protowire.Fixed64Type:
		return "fixed64"
	case protowire.BytesType:
		return "length-delimited"
	case protowire.StartGroupType:
		return "group"
	case protowire.EndGroupType:
		return "end-group"
	}
	return fmt.Sprintf("wire type %d", t)
}

// errAt returns a *DecodeError at byte off; the field path is filled in by
// the callers as the error travels up.
func (d *decoder) errAt(off int, format string, args ...any) error {
	return &DecodeError{Path: d.path, Offset: off, Err: fmt.Errorf(format, args...)}
}

// wrongType reports a known field whose wire type does not match onnx.proto.
func (d *decoder) wrongType(f *field, name string, want protowire.Type) error {
	return &DecodeError{Path: d.path, Field: name, Offset: f.off,
		Err: fmt.Errorf("wire type %s, want %s", wireName(f.typ), wireName(want))}
}

func (d *decoder) payload(f *field) []byte { return d.data[f.lo:f.hi:f.hi] }

// str returns a string field's value.
func (d *decoder) str(f *field, name string) (string, error) {
	if f.typ != protowire.BytesType {
		return "", d.wrongType(f, name, protowire.BytesType)
	}
	return d.keepString(d.data[f.lo:f.hi]), nil
}

// maxSlabString is the longest string keepString carves from a slab;
// longer ones are copied on their own.
const maxSlabString = 256

// keepString copies b into a string. Short ones (names) are carved from
// one 16 KiB slab after another: a graph of 100,000 nodes names some
// 300,000 values, and a string each was a tenth of decoding's
// allocations. A strings.Builder never changes bytes it has written, so a
// string it returned stays as it was while the slab fills.
func (d *decoder) keepString(b []byte) string {
	if len(b) == 0 || len(b) > maxSlabString {
		return string(b)
	}
	if d.slab.Cap()-d.slab.Len() < len(b) {
		d.slab.Reset()
		d.slab.Grow(16 << 10)
	}
	start := d.slab.Len()
	d.slab.Write(b)
	return d.slab.String()[start:]
}

// skipBytes checks that a length-delimited field we do not keep has the
// right wire type.
func (d *decoder) skipBytes(f *field, name string) error {
	if f.typ != protowire.BytesType {
		return d.wrongType(f, name, protowire.BytesType)
	}
	return nil
}

// msg checks that f holds an embedded message.
func (d *decoder) msg(f *field, name string) error { return d.skipBytes(f, name) }

// varint returns a varint field's value.
func (d *decoder) varint(f *field, name string) (uint64, error) {
	if f.typ != protowire.VarintType {
		return 0, d.wrongType(f, name, protowire.VarintType)
	}
	return f.v, nil
}

func (d *decoder) int64(f *field, name string) (int64, error) {
	v, err := d.varint(f, name)
	return int64(v), err
}

// int32 decodes an int32 or enum field: negative values are sign-extended
// to ten bytes on the wire, so the low 32 bits hold the value.
func (d *decoder) int32(f *field, name string) (int32, error) {
	v, err := d.varint(f, name)
	return int32(v), err
}

// countVarints checks that b is a sequence of well-formed varints and
// returns how many it holds.
func countVarints(b []byte) (int, error) {
	n := 0
	for len(b) > 0 {
		_, k := protowire.ConsumeVarint(b)
		if k < 0 {
			return n, errors.New("bad varint in packed field: " + protowire.ParseError(k).Error())
		}
		b = b[k:]
		n++
	}
	return n, nil
}

// appendInt64s appends the values of a repeated int64 field, packed or not.
func (d *decoder) appendInt64s(dst []int64, f *field, name string) ([]int64, error) {
	switch f.typ {
	case protowire.VarintType:
		return append(dst, int64(f.v)), nil
	case protowire.BytesType:
		b := d.data[f.lo:f.hi]
		n, err := countVarints(b)
		if err != nil {
			return dst, &DecodeError{Path: d.path, Field: name, Offset: f.off, Err: err}
		}
		if dst == nil {
			dst = make([]int64, 0, n)
		}
		for len(b) > 0 {
			v, k := protowire.ConsumeVarint(b)
			dst = append(dst, int64(v))
			b = b[k:]
		}
		return dst, nil
	}
	return dst, d.wrongType(f, name, protowire.VarintType)
}
