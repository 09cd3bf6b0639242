package tflite

import (
	"encoding/binary"
	"fmt"
	"math"
)

// The FlatBuffers wire format, read by hand (FlatBuffers "Internals"
// documentation): a buffer starts with a uoffset (uint32) to the root
// table; a table starts with an soffset (int32) back to its vtable, which
// holds uint16s: the vtable's size, the table's inline size, then one
// offset per field id (0 = absent, the default applies); a reference
// field holds a uoffset relative to its own position; a vector is a uint32
// count followed by its elements; a string is a vector of bytes. Every
// position is computed in int64, so no offset can wrap around the buffer,
// and checked against the buffer before it is read. Because uoffsets are
// unsigned and count forward, a reference always points after the field
// that holds it: tables cannot form a cycle, and the nesting depth is the
// schema's own.

// reader reads one FlatBuffer, checking every access.
type reader struct {
	data []byte
	path string // the file, for errors
	// spent counts the bytes of vector elements decoded into Go values
	// so far. A table or vector may be referred to many times (builders
	// share strings, hostile files share everything), so without this
	// count a small file could make the decoder allocate in proportion to
	// the square of its size.
	spent int64
}

// spendLimit is how many bytes of vector elements a file of n bytes may
// have decoded: a few times its size, which no honest file comes near.
func spendLimit(n int) int64 { return 4*int64(n) + 1<<16 }

// spend charges n bytes of decoded elements to the budget.
func (r *reader) spend(field string, off, n int64) error {
	r.spent += n
	if r.spent > spendLimit(len(r.data)) {
		return r.fail(field, off, "the file's tables refer to the same data over and over: more than %d bytes of elements decoded from a %d-byte file", spendLimit(len(r.data)), len(r.data))
	}
	return nil
}

// table is a table's position and its vtable.
type table struct {
	pos    int64 // the table's first byte (its soffset)
	vt     int64 // the vtable's first byte
	vtLen  int64 // the vtable's size in bytes
	objLen int64 // the table's inline size in bytes
	field  string
}

func (r *reader) fail(field string, off int64, format string, args ...any) error {
	return &DecodeError{Path: r.path, Field: field, Offset: off, Err: fmt.Errorf(format, args...)}
}

// need checks that n bytes at off lie inside the buffer.
func (r *reader) need(field string, off, n int64) error {
	if off < 0 || n < 0 || off > int64(len(r.data)) || n > int64(len(r.data))-off {
		return r.fail(field, off, "%d bytes at byte %d lie outside the %d-byte buffer", n, off, len(r.data))
	}
	return nil
}

func (r *reader) u16(off int64) uint16 { return binary.LittleEndian.Uint16(r.data[off:]) }
func (r *reader) u32(off int64) uint32 { return binary.LittleEndian.Uint32(r.data[off:]) }
func (r *reader) u64(off int64) uint64 { return binary.LittleEndian.Uint64(r.data[off:]) }

// deref follows the uoffset stored at off.
func (r *reader) deref(field string, off int64) (int64, error) {
	if err := r.need(field, off, 4); err != nil {
		return 0, err
	}
	target := off + int64(r.u32(off))
	if target >= int64(len(r.data)) {
		return 0, r.fail(field, off, "offset %d points past the end of the %d-byte buffer", r.u32(off), len(r.data))
	}
	return target, nil
}

// table reads the table at pos.
func (r *reader) table(field string, pos int64) (table, error) {
	if err := r.need(field, pos, 4); err != nil {
		return table{}, err
	}
	soff := int64(int32(r.u32(pos)))
	vt := pos - soff
	if err := r.need(field, vt, 4); err != nil {
		return table{}, r.fail(field, pos, "vtable at byte %d lies outside the buffer", vt)
	}
	t := table{pos: pos, vt: vt, vtLen: int64(r.u16(vt)), objLen: int64(r.u16(vt + 2)), field: field}
	if t.vtLen < 4 || t.vtLen%2 != 0 {
		return table{}, r.fail(field, vt, "vtable size %d is not an even number of at least 4 bytes", t.vtLen)
	}
	if err := r.need(field, vt, t.vtLen); err != nil {
		return table{}, err
	}
	if t.objLen < 4 {
		return table{}, r.fail(field, vt, "table size %d is smaller than its vtable offset", t.objLen)
	}
	if err := r.need(field, pos, t.objLen); err != nil {
		return table{}, err
	}
	return t, nil
}

// at returns the position of field id and its size check, or -1 when the
// field is absent.
func (r *reader) at(t table, id int, size int64, name string) (int64, error) {
	slot := 4 + 2*int64(id)
	if slot+2 > t.vtLen {
		return -1, nil
	}
	o := int64(r.u16(t.vt + slot))
	if o == 0 {
		return -1, nil
	}
	if o+size > t.objLen {
		return -1, r.fail(sub(t.field, name), t.pos+o, "field lies outside its table's %d bytes", t.objLen)
	}
	return t.pos + o, nil
}

func sub(parent, name string) string {
	if parent == "" {
		return name
	}
	return parent + "." + name
}

func (r *reader) uint8(t table, id int, name string, def uint8) (uint8, error) {
	p, err := r.at(t, id, 1, name)
	if p < 0 || err != nil {
		return def, err
	}
	return r.data[p], nil
}

func (r *reader) bool(t table, id int, name string) (bool, error) {
	v, err := r.uint8(t, id, name, 0)
	return v != 0, err
}

func (r *reader) int32(t table, id int, name string, def int32) (int32, error) {
	p, err := r.at(t, id, 4, name)
	if p < 0 || err != nil {
		return def, err
	}
	return int32(r.u32(p)), nil
}

func (r *reader) uint32(t table, id int, name string, def uint32) (uint32, error) {
	p, err := r.at(t, id, 4, name)
	if p < 0 || err != nil {
		return def, err
	}
	return r.u32(p), nil
}

func (r *reader) uint64(t table, id int, name string) (uint64, error) {
	p, err := r.at(t, id, 8, name)
	if p < 0 || err != nil {
		return 0, err
	}
	return r.u64(p), nil
}

func (r *reader) float32(t table, id int, name string, def float32) (float32, error) {
	p, err := r.at(t, id, 4, name)
	if p < 0 || err != nil {
		return def, err
	}
	return math.Float32frombits(r.u32(p)), nil
}

// vector locates the vector of field id, whose elements are elem bytes
// each: its first element's position and its length; n is -1 when the
// field is absent.
func (r *reader) vector(t table, id int, elem int64, name string) (start int64, n int, err error) {
	p, err := r.at(t, id, 4, name)
	if p < 0 || err != nil {
		return 0, -1, err
	}
	field := sub(t.field, name)
	v, err := r.deref(field, p)
	if err != nil {
		return 0, -1, err
	}
	if err := r.need(field, v, 4); err != nil {
		return 0, -1, err
	}
	count := int64(r.u32(v))
	if count > (int64(len(r.data))-v-4)/elem {
		return 0, -1, r.fail(field, v, "vector of %d elements of %d bytes does not fit in the %d bytes left", count, elem, int64(len(r.data))-v-4)
	}
	return v + 4, int(count), nil
}

// bytes returns the byte vector of field id as a sub-slice of the buffer
// (nil when absent).
func (r *reader) bytes(t table, id int, name string) ([]byte, error) {
	start, n, err := r.vector(t, id, 1, name)
	if err != nil || n < 0 {
		return nil, err
	}
	return r.data[start : start+int64(n) : start+int64(n)], nil
}

func (r *reader) string(t table, id int, name string) (string, error) {
	b, err := r.bytes(t, id, name)
	if err == nil && len(b) > 0 {
		err = r.spend(sub(t.field, name), t.pos, int64(len(b)))
	}
	if err != nil {
		return "", err
	}
	return string(b), nil
}

func (r *reader) int32s(t table, id int, name string) ([]int32, error) {
	start, n, err := r.vector(t, id, 4, name)
	if err != nil || n < 0 {
		return nil, err
	}
	if err := r.spend(sub(t.field, name), start, 4*int64(n)); err != nil {
		return nil, err
	}
	out := make([]int32, n)
	for i := range out {
		out[i] = int32(r.u32(start + 4*int64(i)))
	}
	return out, nil
}

func (r *reader) float32s(t table, id int, name string) ([]float32, error) {
	start, n, err := r.vector(t, id, 4, name)
	if err != nil || n < 0 {
		return nil, err
	}
	if err := r.spend(sub(t.field, name), start, 4*int64(n)); err != nil {
		return nil, err
	}
	out := make([]float32, n)
	for i := range out {
		out[i] = math.Float32frombits(r.u32(start + 4*int64(i)))
	}
	return out, nil
}

func (r *reader) int64s(t table, id int, name string) ([]int64, error) {
	start, n, err := r.vector(t, id, 8, name)
	if err != nil || n < 0 {
		return nil, err
	}
	if err := r.spend(sub(t.field, name), start, 8*int64(n)); err != nil {
		return nil, err
	}
	out := make([]int64, n)
	for i := range out {
		out[i] = int64(r.u64(start + 8*int64(i)))
	}
	return out, nil
}

// tables calls fn with each table of the vector of tables of field id.
func (r *reader) tables(t table, id int, name string, fn func(i int, e table) error) (int, error) {
	start, n, err := r.vector(t, id, 4, name)
	if err != nil || n < 0 {
		return 0, err
	}
	// A decoded table costs far more than its 4-byte reference: charge
	// a table's worth for each.
	if err := r.spend(sub(t.field, name), start, 64*int64(n)); err != nil {
		return 0, err
	}
	for i := 0; i < n; i++ {
		field := fmt.Sprintf("%s[%d]", sub(t.field, name), i)
		p, err := r.deref(field, start+4*int64(i))
		if err != nil {
			return 0, err
		}
		e, err := r.table(field, p)
		if err != nil {
			return 0, err
		}
		if err := fn(i, e); err != nil {
			return 0, err
		}
	}
	return n, nil
}

// child reads the table that field id refers to; ok is false when absent.
func (r *reader) child(t table, id int, name string) (table, bool, error) {
	p, err := r.at(t, id, 4, name)
	if p < 0 || err != nil {
		return table{}, false, err
	}
	field := sub(t.field, name)
	c, err := r.deref(field, p)
	if err != nil {
		return table{}, false, err
	}
	ct, err := r.table(field, c)
	return ct, err == nil, err
}
