package tflite

import (
	"encoding/binary"
	"fmt"
	"math"
	"sort"
)

// The encoder writes a Model as a TFLite FlatBuffer, for tests and the
// demo. It writes front to back: a table, then the tables and vectors it
// refers to after it (uoffsets count forward), each table's vtable just
// before it. Scalars equal to their schema default are still written; a
// reader cannot tell the difference.

// EncodeOptions steer the encoder.
type EncodeOptions struct {
	// OutsideBuffers writes every non-empty buffer after the FlatBuffer,
	// located by offset and size, as converters do for models over 2 GiB.
	OutsideBuffers bool
}

// Encode writes m as a TFLite file.
func Encode(m *Model) ([]byte, error) { return EncodeWith(m, EncodeOptions{}) }

// EncodeWith writes m as a TFLite file with the given options.
func EncodeWith(m *Model, o EncodeOptions) ([]byte, error) {
	w := &writer{opts: o}
	w.b = append(w.b, 0, 0, 0, 0)
	w.b = append(w.b, Identifier...)
	root, err := w.model(m)
	if err != nil {
		return nil, err
	}
	binary.LittleEndian.PutUint32(w.b[0:], uint32(root))
	for _, p := range w.outside {
		w.align(16)
		off := int64(len(w.b))
		w.b = append(w.b, p.data...)
		binary.LittleEndian.PutUint64(w.b[p.offsetAt:], uint64(off))
	}
	return w.b, nil
}

type writer struct {
	b       []byte
	opts    EncodeOptions
	outside []pending
	err     error
}

// pending is a buffer to write after the FlatBuffer, whose offset field is
// at offsetAt.
type pending struct {
	offsetAt int64
	data     []byte
}

func (w *writer) align(n int) {
	for len(w.b)%n != 0 {
		w.b = append(w.b, 0)
	}
}

// field is one field of a table to write: a scalar (size bytes of bits) or
// a reference written after the table by ref, which returns the position
// the uoffset must point at.
type field struct {
	id   int
	size int
	bits uint64
	ref  func() int64
}

func scalar(id, size int, bits uint64) field { return field{id: id, size: size, bits: bits} }
func ref(id int, f func() int64) field       { return field{id: id, size: 4, ref: f} }

// table writes a table with fields and returns its position; after is
// called with the position of each scalar field that needs patching.
func (w *writer) table(fields []field, at func(id int, pos int64)) int64 {
	maxID := -1
	for _, f := range fields {
		maxID = max(maxID, f.id)
	}
	// Lay the inline fields out, largest first, each aligned to its size.
	order := make([]int, len(fields))
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return fields[order[a]].size > fields[order[b]].size })
	offs := make([]int, len(fields))
	end := 4
	for _, i := range order {
		s := fields[i].size
		for end%s != 0 {
			end++
		}
		offs[i] = end
		end += s
	}
	vtLen := 4 + 2*(maxID+1)
	for (len(w.b)+vtLen)%8 != 0 {
		w.b = append(w.b, 0)
	}
	vt := len(w.b)
	w.b = append(w.b, make([]byte, vtLen)...)
	binary.LittleEndian.PutUint16(w.b[vt:], uint16(vtLen))
	binary.LittleEndian.PutUint16(w.b[vt+2:], uint16(end))
	for i, f := range fields {
		binary.LittleEndian.PutUint16(w.b[vt+4+2*f.id:], uint16(offs[i]))
	}
	pos := len(w.b)
	w.b = append(w.b, make([]byte, end)...)
	binary.LittleEndian.PutUint32(w.b[pos:], uint32(int32(pos-vt)))
	for i, f := range fields {
		p := pos + offs[i]
		switch f.size {
		case 1:
			w.b[p] = byte(f.bits)
		case 2:
			binary.LittleEndian.PutUint16(w.b[p:], uint16(f.bits))
		case 4:
			binary.LittleEndian.PutUint32(w.b[p:], uint32(f.bits))
		case 8:
			binary.LittleEndian.PutUint64(w.b[p:], f.bits)
		}
		if at != nil {
			at(f.id, int64(p))
		}
	}
	for i, f := range fields {
		if f.ref != nil {
			p := pos + offs[i]
			target := f.ref()
			binary.LittleEndian.PutUint32(w.b[p:], uint32(target-int64(p)))
		}
	}
	return int64(pos)
}

// vector writes a vector of n elements of size bytes each, aligned to
// elemAlign, filled by put; it returns the count's position.
func (w *writer) vector(n, size, elemAlign int, put func(b []byte)) int64 {
	for (len(w.b)+4)%elemAlign != 0 || len(w.b)%4 != 0 {
		w.b = append(w.b, 0)
	}
	pos := len(w.b)
	w.b = binary.LittleEndian.AppendUint32(w.b, uint32(n))
	start := len(w.b)
	w.b = append(w.b, make([]byte, n*size)...)
	put(w.b[start:])
	return int64(pos)
}

func (w *writer) str(s string) int64 {
	p := w.vector(len(s), 1, 1, func(b []byte) { copy(b, s) })
	w.b = append(w.b, 0)
	return p
}

func (w *writer) int32s(v []int32) int64 {
	return w.vector(len(v), 4, 4, func(b []byte) {
		for i, x := range v {
			binary.LittleEndian.PutUint32(b[4*i:], uint32(x))
		}
	})
}

func (w *writer) float32s(v []float32) int64 {
	return w.vector(len(v), 4, 4, func(b []byte) {
		for i, x := range v {
			binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
		}
	})
}

func (w *writer) int64s(v []int64) int64 {
	return w.vector(len(v), 8, 8, func(b []byte) {
		for i, x := range v {
			binary.LittleEndian.PutUint64(b[8*i:], uint64(x))
		}
	})
}

// tables writes a vector of n tables, each written by put(i).
func (w *writer) tables(n int, put func(i int) int64) int64 {
	pos := w.vector(n, 4, 4, func([]byte) {})
	for i := 0; i < n; i++ {
		slot := pos + 4 + 4*int64(i)
		t := put(i)
		binary.LittleEndian.PutUint32(w.b[slot:], uint32(t-slot))
	}
	return pos
}

func b2u(b bool) uint64 {
	if b {
		return 1
	}
	return 0
}

func (w *writer) model(m *Model) (int64, error) {
	fs := []field{scalar(0, 4, uint64(m.Version))}
	fs = append(fs, ref(1, func() int64 {
		return w.tables(len(m.OperatorCodes), func(i int) int64 {
			c := m.OperatorCodes[i]
			f := []field{scalar(0, 1, uint64(uint8(c.DeprecatedBuiltinCode))), scalar(2, 4, uint64(uint32(c.Version))), scalar(3, 4, uint64(uint32(c.BuiltinCode)))}
			if c.CustomCode != "" {
				f = append(f, ref(1, func() int64 { return w.str(c.CustomCode) }))
			}
			return w.table(f, nil)
		})
	}))
	fs = append(fs, ref(2, func() int64 {
		return w.tables(len(m.Subgraphs), func(i int) int64 { return w.subgraph(&m.Subgraphs[i]) })
	}))
	if m.Description != "" {
		fs = append(fs, ref(3, func() int64 { return w.str(m.Description) }))
	}
	fs = append(fs, ref(4, func() int64 {
		return w.tables(len(m.Buffers), func(i int) int64 { return w.buffer(&m.Buffers[i]) })
	}))
	if m.MetadataBuffer != nil {
		fs = append(fs, ref(5, func() int64 { return w.int32s(m.MetadataBuffer) }))
	}
	if m.Metadata != nil {
		fs = append(fs, ref(6, func() int64 {
			return w.tables(len(m.Metadata), func(i int) int64 {
				md := m.Metadata[i]
				return w.table([]field{ref(0, func() int64 { return w.str(md.Name) }), scalar(1, 4, uint64(md.Buffer))}, nil)
			})
		}))
	}
	if m.SignatureDefs != nil {
		fs = append(fs, ref(7, func() int64 {
			return w.tables(len(m.SignatureDefs), func(i int) int64 { return w.signature(&m.SignatureDefs[i]) })
		}))
	}
	pos := w.table(fs, nil)
	return pos, w.err
}

func (w *writer) subgraph(sg *Subgraph) int64 {
	fs := []field{
		ref(0, func() int64 {
			return w.tables(len(sg.Tensors), func(i int) int64 { return w.tensor(&sg.Tensors[i]) })
		}),
		ref(1, func() int64 { return w.int32s(sg.Inputs) }),
		ref(2, func() int64 { return w.int32s(sg.Outputs) }),
		ref(3, func() int64 {
			return w.tables(len(sg.Operators), func(i int) int64 { return w.operator(&sg.Operators[i]) })
		}),
	}
	if sg.Name != "" {
		fs = append(fs, ref(4, func() int64 { return w.str(sg.Name) }))
	}
	return w.table(fs, nil)
}

func (w *writer) tensor(t *Tensor) int64 {
	fs := []field{
		ref(0, func() int64 { return w.int32s(t.Shape) }),
		scalar(1, 1, uint64(uint8(t.Type))),
		scalar(2, 4, uint64(t.Buffer)),
		scalar(5, 1, b2u(t.IsVariable)),
		scalar(8, 1, b2u(t.HasRank)),
	}
	if t.Name != "" {
		fs = append(fs, ref(3, func() int64 { return w.str(t.Name) }))
	}
	if q := t.Quantization; q != nil {
		fs = append(fs, ref(4, func() int64 {
			f := []field{scalar(4, 1, uint64(q.DetailsType)), scalar(6, 4, uint64(uint32(q.QuantizedDimension)))}
			if q.Min != nil {
				f = append(f, ref(0, func() int64 { return w.float32s(q.Min) }))
			}
			if q.Max != nil {
				f = append(f, ref(1, func() int64 { return w.float32s(q.Max) }))
			}
			if q.Scale != nil {
				f = append(f, ref(2, func() int64 { return w.float32s(q.Scale) }))
			}
			if q.ZeroPoint != nil {
				f = append(f, ref(3, func() int64 { return w.int64s(q.ZeroPoint) }))
			}
			return w.table(f, nil)
		}))
	}
	if s := t.Sparsity; s != nil {
		fs = append(fs, ref(6, func() int64 { return w.sparsity(s) }))
	}
	if t.ShapeSignature != nil {
		fs = append(fs, ref(7, func() int64 { return w.int32s(t.ShapeSignature) }))
	}
	return w.table(fs, nil)
}

func (w *writer) sparsity(s *Sparsity) int64 {
	fs := []field{
		ref(0, func() int64 { return w.int32s(s.TraversalOrder) }),
		ref(1, func() int64 { return w.int32s(s.BlockMap) }),
		ref(2, func() int64 {
			return w.tables(len(s.DimMetadata), func(i int) int64 {
				d := s.DimMetadata[i]
				f := []field{scalar(0, 1, uint64(uint8(d.Format))), scalar(1, 4, uint64(uint32(d.DenseSize)))}
				index := func(id int, ty uint8, n int) {
					if ty == 0 {
						return
					}
					size := map[uint8]int{1: 4, 2: 2, 3: 1}[ty]
					f = append(f, scalar(id, 1, uint64(ty)), ref(id+1, func() int64 {
						return w.table([]field{ref(0, func() int64 { return w.vector(n, size, size, func([]byte) {}) })}, nil)
					}))
				}
				index(2, d.SegmentsType, d.Segments)
				index(4, d.IndicesType, d.Indices)
				return w.table(f, nil)
			})
		}),
	}
	return w.table(fs, nil)
}

func (w *writer) operator(op *Operator) int64 {
	fs := []field{
		scalar(0, 4, uint64(op.OpcodeIndex)),
		ref(1, func() int64 { return w.int32s(op.Inputs) }),
		ref(2, func() int64 { return w.int32s(op.Outputs) }),
		scalar(3, 1, uint64(op.OptionsType)),
		scalar(6, 1, uint64(uint8(op.CustomOptionsFormat))),
	}
	if spec, ok := optionTables[op.OptionsType]; ok {
		fs = append(fs, ref(4, func() int64 { return w.options(op, spec) }))
	} else if op.OptionsType != 0 {
		w.err = fmt.Errorf("operator options type %d: the encoder writes only the option tables it decodes", op.OptionsType)
	}
	if op.CustomOptions != nil {
		fs = append(fs, ref(5, func() int64 {
			return w.vector(len(op.CustomOptions), 1, 1, func(b []byte) { copy(b, op.CustomOptions) })
		}))
	}
	if op.MutatingVariableInputs != nil {
		fs = append(fs, ref(7, func() int64 {
			return w.vector(len(op.MutatingVariableInputs), 1, 1, func(b []byte) {
				for i, v := range op.MutatingVariableInputs {
					b[i] = byte(b2u(v))
				}
			})
		}))
	}
	if op.Intermediates != nil {
		fs = append(fs, ref(8, func() int64 { return w.int32s(op.Intermediates) }))
	}
	return w.table(fs, nil)
}

// options writes an options table: the fields op names, by spec.
func (w *writer) options(op *Operator, spec optionTable) int64 {
	var fs []field
	for id, f := range spec.fields {
		o := op.Option(f.name)
		if o == nil {
			continue
		}
		switch f.kind {
		case OptInts:
			v := o.Ints
			fs = append(fs, ref(id, func() int64 { return w.int32s(v) }))
		case OptFloat:
			fs = append(fs, scalar(id, 4, uint64(math.Float32bits(o.Float))))
		default:
			v := o.Int
			if f.kind == OptEnum && o.Enum != "" {
				v = -1
				for i, e := range f.enums {
					if e == o.Enum {
						v = int64(i)
					}
				}
				if v < 0 {
					w.err = fmt.Errorf("option %s: unknown value %q", f.name, o.Enum)
					v = 0
				}
			}
			fs = append(fs, scalar(id, int(f.size), uint64(v)))
		}
	}
	return w.table(fs, nil)
}

func (w *writer) buffer(b *Buffer) int64 {
	if (w.opts.OutsideBuffers || b.Offset > 1) && len(b.Data) > 0 {
		data := b.Data
		return w.table([]field{scalar(1, 8, 0), scalar(2, 8, uint64(len(data)))}, func(id int, pos int64) {
			if id == 1 {
				w.outside = append(w.outside, pending{offsetAt: pos, data: data})
			}
		})
	}
	var fs []field
	if b.Data != nil {
		fs = append(fs, ref(0, func() int64 {
			return w.vector(len(b.Data), 1, 16, func(dst []byte) { copy(dst, b.Data) })
		}))
	}
	if b.Offset != 0 || b.Size != 0 {
		fs = append(fs, scalar(1, 8, b.Offset), scalar(2, 8, b.Size))
	}
	return w.table(fs, nil)
}

func (w *writer) signature(s *SignatureDef) int64 {
	maps := func(ms []TensorMap) func() int64 {
		return func() int64 {
			return w.tables(len(ms), func(i int) int64 {
				m := ms[i]
				return w.table([]field{ref(0, func() int64 { return w.str(m.Name) }), scalar(1, 4, uint64(m.TensorIndex))}, nil)
			})
		}
	}
	return w.table([]field{ref(0, maps(s.Inputs)), ref(1, maps(s.Outputs)),
		ref(2, func() int64 { return w.str(s.SignatureKey) }), scalar(4, 4, uint64(s.SubgraphIndex))}, nil)
}
