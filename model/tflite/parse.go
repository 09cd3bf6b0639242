package tflite

import (
	"bytes"
	"fmt"
	"strings"
)

// DecodeError is a decoding failure: which file, where in it, and why.
// Its message reads like
//
//	model.tflite: subgraphs[0].tensors[12].quantization.scale: vector of … at byte 4711
//
// Field is a path of schema field names, with indexes into vectors;
// Offset is the byte offset of the offending data in the file.
type DecodeError struct {
	Path   string
	Field  string
	Offset int64
	Err    error
}

// Error formats the error as "path: field: problem at byte offset".
func (e *DecodeError) Error() string {
	var b strings.Builder
	if e.Path != "" {
		b.WriteString(e.Path)
		b.WriteString(": ")
	}
	if e.Field != "" {
		b.WriteString(e.Field)
		b.WriteString(": ")
	}
	if e.Err != nil {
		b.WriteString(e.Err.Error())
	}
	fmt.Fprintf(&b, " (at byte %d)", e.Offset)
	return b.String()
}

// Unwrap returns the underlying problem.
func (e *DecodeError) Unwrap() error { return e.Err }

// Identifier is the file identifier of a TFLite FlatBuffer, at bytes 4 to 7.
const Identifier = "TFL3"

// Parse reads the whole FlatBuffer of a TFLite file into its schema's
// tables. data stays owned by the caller and must not change while the
// result is in use: buffers and custom options are sub-slices of it. path
// names the file in errors.
func Parse(data []byte, path string) (*Model, error) {
	r := &reader{data: data, path: path}
	if len(data) < 8 {
		return nil, r.fail("", 0, "%d bytes are too few for a TFLite FlatBuffer", len(data))
	}
	if !bytes.Equal(data[4:8], []byte(Identifier)) {
		return nil, r.fail("", 4, "no %q file identifier: not a TFLite model", Identifier)
	}
	root, err := r.deref("", 0)
	if err != nil {
		return nil, err
	}
	t, err := r.table("", root)
	if err != nil {
		return nil, err
	}
	return r.model(t)
}

func (r *reader) model(t table) (*Model, error) {
	m := &Model{}
	var err error
	if m.Version, err = r.uint32(t, 0, "version", 0); err != nil {
		return nil, err
	}
	if _, err = r.tables(t, 1, "operator_codes", func(i int, e table) error {
		c, err := r.operatorCode(e)
		m.OperatorCodes = append(m.OperatorCodes, c)
		return err
	}); err != nil {
		return nil, err
	}
	if _, err = r.tables(t, 2, "subgraphs", func(i int, e table) error {
		sg, err := r.subgraph(e)
		m.Subgraphs = append(m.Subgraphs, sg)
		return err
	}); err != nil {
		return nil, err
	}
	if m.Description, err = r.string(t, 3, "description"); err != nil {
		return nil, err
	}
	if _, err = r.tables(t, 4, "buffers", func(i int, e table) error {
		b, err := r.buffer(e)
		m.Buffers = append(m.Buffers, b)
		return err
	}); err != nil {
		return nil, err
	}
	if m.MetadataBuffer, err = r.int32s(t, 5, "metadata_buffer"); err != nil {
		return nil, err
	}
	if _, err = r.tables(t, 6, "metadata", func(i int, e table) error {
		var md Metadata
		var err error
		if md.Name, err = r.string(e, 0, "name"); err != nil {
			return err
		}
		md.Buffer, err = r.uint32(e, 1, "buffer", 0)
		m.Metadata = append(m.Metadata, md)
		return err
	}); err != nil {
		return nil, err
	}
	if _, err = r.tables(t, 7, "signature_defs", func(i int, e table) error {
		s, err := r.signature(e)
		m.SignatureDefs = append(m.SignatureDefs, s)
		return err
	}); err != nil {
		return nil, err
	}
	return m, nil
}

func (r *reader) operatorCode(t table) (OperatorCode, error) {
	var c OperatorCode
	b, err := r.uint8(t, 0, "deprecated_builtin_code", 0)
	if err != nil {
		return c, err
	}
	c.DeprecatedBuiltinCode = int8(b)
	if c.CustomCode, err = r.string(t, 1, "custom_code"); err != nil {
		return c, err
	}
	if c.Version, err = r.int32(t, 2, "version", 1); err != nil {
		return c, err
	}
	c.BuiltinCode, err = r.int32(t, 3, "builtin_code", 0)
	return c, err
}

func (r *reader) subgraph(t table) (Subgraph, error) {
	var sg Subgraph
	var err error
	if _, err = r.tables(t, 0, "tensors", func(i int, e table) error {
		tn, err := r.tensor(e)
		sg.Tensors = append(sg.Tensors, tn)
		return err
	}); err != nil {
		return sg, err
	}
	if sg.Inputs, err = r.int32s(t, 1, "inputs"); err != nil {
		return sg, err
	}
	if sg.Outputs, err = r.int32s(t, 2, "outputs"); err != nil {
		return sg, err
	}
	if _, err = r.tables(t, 3, "operators", func(i int, e table) error {
		op, err := r.operator(e)
		sg.Operators = append(sg.Operators, op)
		return err
	}); err != nil {
		return sg, err
	}
	sg.Name, err = r.string(t, 4, "name")
	return sg, err
}

func (r *reader) tensor(t table) (Tensor, error) {
	var tn Tensor
	var err error
	if tn.Shape, err = r.int32s(t, 0, "shape"); err != nil {
		return tn, err
	}
	ty, err := r.uint8(t, 1, "type", 0)
	if err != nil {
		return tn, err
	}
	tn.Type = TensorType(int8(ty))
	if tn.Buffer, err = r.uint32(t, 2, "buffer", 0); err != nil {
		return tn, err
	}
	if tn.Name, err = r.string(t, 3, "name"); err != nil {
		return tn, err
	}
	if q, ok, err := r.child(t, 4, "quantization"); err != nil {
		return tn, err
	} else if ok {
		if tn.Quantization, err = r.quantization(q); err != nil {
			return tn, err
		}
	}
	if tn.IsVariable, err = r.bool(t, 5, "is_variable"); err != nil {
		return tn, err
	}
	if s, ok, err := r.child(t, 6, "sparsity"); err != nil {
		return tn, err
	} else if ok {
		if tn.Sparsity, err = r.sparsity(s); err != nil {
			return tn, err
		}
	}
	if tn.ShapeSignature, err = r.int32s(t, 7, "shape_signature"); err != nil {
		return tn, err
	}
	tn.HasRank, err = r.bool(t, 8, "has_rank")
	return tn, err
}

func (r *reader) quantization(t table) (*Quantization, error) {
	q := &Quantization{}
	var err error
	if q.Min, err = r.float32s(t, 0, "min"); err != nil {
		return nil, err
	}
	if q.Max, err = r.float32s(t, 1, "max"); err != nil {
		return nil, err
	}
	if q.Scale, err = r.float32s(t, 2, "scale"); err != nil {
		return nil, err
	}
	if q.ZeroPoint, err = r.int64s(t, 3, "zero_point"); err != nil {
		return nil, err
	}
	if q.DetailsType, err = r.uint8(t, 4, "details_type", 0); err != nil {
		return nil, err
	}
	if q.QuantizedDimension, err = r.int32(t, 6, "quantized_dimension", 0); err != nil {
		return nil, err
	}
	return q, nil
}

func (r *reader) sparsity(t table) (*Sparsity, error) {
	s := &Sparsity{}
	var err error
	if s.TraversalOrder, err = r.int32s(t, 0, "traversal_order"); err != nil {
		return nil, err
	}
	if s.BlockMap, err = r.int32s(t, 1, "block_map"); err != nil {
		return nil, err
	}
	_, err = r.tables(t, 2, "dim_metadata", func(i int, e table) error {
		var d DimensionMetadata
		f, err := r.uint8(e, 0, "format", 0)
		if err != nil {
			return err
		}
		d.Format = int8(f)
		if d.DenseSize, err = r.int32(e, 1, "dense_size", 0); err != nil {
			return err
		}
		if d.SegmentsType, d.Segments, err = r.indexVector(e, 2, "array_segments"); err != nil {
			return err
		}
		if d.IndicesType, d.Indices, err = r.indexVector(e, 4, "array_indices"); err != nil {
			return err
		}
		s.DimMetadata = append(s.DimMetadata, d)
		return nil
	})
	return s, err
}

// indexVector reads a SparseIndexVector union (type at field id, value at
// id+1): one of Int32Vector, Uint16Vector, Uint8Vector, each a table with
// one vector field, values. It returns the union type and the length.
func (r *reader) indexVector(t table, id int, name string) (uint8, int, error) {
	ty, err := r.uint8(t, id, name+"_type", 0)
	if err != nil || ty == 0 {
		return 0, 0, err
	}
	sizes := map[uint8]int64{1: 4, 2: 2, 3: 1}
	size, ok := sizes[ty]
	if !ok {
		p, _ := r.at(t, id, 1, name+"_type")
		return 0, 0, r.fail(sub(t.field, name+"_type"), p, "unknown SparseIndexVector type %d", ty)
	}
	v, ok, err := r.child(t, id+1, name)
	if err != nil || !ok {
		return ty, 0, err
	}
	_, n, err := r.vector(v, 0, size, "values")
	return ty, max(n, 0), err
}

func (r *reader) operator(t table) (Operator, error) {
	var op Operator
	var err error
	if op.OpcodeIndex, err = r.uint32(t, 0, "opcode_index", 0); err != nil {
		return op, err
	}
	if op.Inputs, err = r.int32s(t, 1, "inputs"); err != nil {
		return op, err
	}
	if op.Outputs, err = r.int32s(t, 2, "outputs"); err != nil {
		return op, err
	}
	if op.OptionsType, err = r.uint8(t, 3, "builtin_options_type", 0); err != nil {
		return op, err
	}
	if spec, known := optionTables[op.OptionsType]; known {
		if o, ok, err := r.child(t, 4, "builtin_options"); err != nil {
			return op, err
		} else if ok {
			if op.Options, err = r.options(o, spec); err != nil {
				return op, err
			}
		} else {
			// An absent table: every field takes its default.
			if op.Options, err = r.options(table{}, spec); err != nil {
				return op, err
			}
		}
	}
	if op.CustomOptions, err = r.bytes(t, 5, "custom_options"); err != nil {
		return op, err
	}
	f, err := r.uint8(t, 6, "custom_options_format", 0)
	if err != nil {
		return op, err
	}
	op.CustomOptionsFormat = int8(f)
	if mv, err := r.bytes(t, 7, "mutating_variable_inputs"); err != nil {
		return op, err
	} else if mv != nil {
		if err := r.spend(sub(t.field, "mutating_variable_inputs"), t.pos, int64(len(mv))); err != nil {
			return op, err
		}
		op.MutatingVariableInputs = make([]bool, len(mv))
		for i, b := range mv {
			op.MutatingVariableInputs[i] = b != 0
		}
	}
	if op.Intermediates, err = r.int32s(t, 8, "intermediates"); err != nil {
		return op, err
	}
	if op.LargeCustomOptionsOff, err = r.uint64(t, 9, "large_custom_options_offset"); err != nil {
		return op, err
	}
	op.LargeCustomOptionsSize, err = r.uint64(t, 10, "large_custom_options_size")
	return op, err
}

// options decodes an option table's fields by spec. A zero table (an
// absent options table) gives every field its default.
func (r *reader) options(t table, spec optionTable) ([]Option, error) {
	out := make([]Option, 0, len(spec.fields))
	present := t.vtLen > 0
	for id, f := range spec.fields {
		o := Option{Name: f.name, Kind: f.kind}
		switch f.kind {
		case OptInts:
			if present {
				v, err := r.int32s(t, id, f.name)
				if err != nil {
					return nil, err
				}
				o.Ints = v
			}
		case OptFloat:
			if present {
				v, err := r.float32(t, id, f.name, 0)
				if err != nil {
					return nil, err
				}
				o.Float = v
			}
		default:
			o.Int = f.def
			if present {
				var v int64
				if f.size == 1 {
					b, err := r.uint8(t, id, f.name, uint8(f.def))
					if err != nil {
						return nil, err
					}
					v = int64(int8(b))
				} else {
					x, err := r.int32(t, id, f.name, int32(f.def))
					if err != nil {
						return nil, err
					}
					v = int64(x)
				}
				o.Int = v
			}
			if f.kind == OptEnum {
				if o.Int < 0 || o.Int >= int64(len(f.enums)) {
					p, _ := r.at(t, id, 1, f.name)
					return nil, r.fail(sub(t.field, f.name), p, "unknown %s value %d", f.name, o.Int)
				}
				o.Enum = f.enums[o.Int]
			}
		}
		out = append(out, o)
	}
	return out, nil
}

func (r *reader) buffer(t table) (Buffer, error) {
	var b Buffer
	var err error
	if b.Data, err = r.bytes(t, 0, "data"); err != nil {
		return b, err
	}
	if b.Offset, err = r.uint64(t, 1, "offset"); err != nil {
		return b, err
	}
	if b.Size, err = r.uint64(t, 2, "size"); err != nil {
		return b, err
	}
	// Files larger than 2 GiB keep buffers after the FlatBuffer, located
	// by offset (from the start of the file) and size; an offset of 0 or
	// 1 means the buffer is not stored that way.
	if b.Offset > 1 {
		end := b.Offset + b.Size
		if end < b.Offset || end > uint64(len(r.data)) {
			p, _ := r.at(t, 1, 8, "offset")
			return b, r.fail(sub(t.field, "offset"), p, "buffer of %d bytes at offset %d lies outside the %d-byte file", b.Size, b.Offset, len(r.data))
		}
		if b.Data != nil {
			p, _ := r.at(t, 0, 4, "data")
			return b, r.fail(sub(t.field, "data"), p, "buffer has both inline data and an offset")
		}
		b.Data = r.data[b.Offset:end:end]
	}
	return b, nil
}

func (r *reader) signature(t table) (SignatureDef, error) {
	var s SignatureDef
	maps := func(id int, name string, dst *[]TensorMap) error {
		_, err := r.tables(t, id, name, func(i int, e table) error {
			var m TensorMap
			var err error
			if m.Name, err = r.string(e, 0, "name"); err != nil {
				return err
			}
			m.TensorIndex, err = r.uint32(e, 1, "tensor_index", 0)
			*dst = append(*dst, m)
			return err
		})
		return err
	}
	if err := maps(0, "inputs", &s.Inputs); err != nil {
		return s, err
	}
	if err := maps(1, "outputs", &s.Outputs); err != nil {
		return s, err
	}
	var err error
	if s.SignatureKey, err = r.string(t, 2, "signature_key"); err != nil {
		return s, err
	}
	s.SubgraphIndex, err = r.uint32(t, 4, "subgraph_index", 0)
	return s, err
}
