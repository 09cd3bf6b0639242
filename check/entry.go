package check

import (
	"encoding/binary"
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"

	"github.com/loadline/loadline/measure"
)

// The figures entry of the cache is read by every check, once per model
// and side, so it is kept in a compact binary form rather than JSON (the
// per-layer entry, read only when a report shows it, stays JSON):
//
//	entry    string blob, string version, string options,
//	         deps (a map of string → string), metrics
//	metrics  every field of measure.Metrics in the order of the struct,
//	         but Layers and MemoryDetail.LiveBytesByStep (the per-layer
//	         entry holds them) and Target (a check estimates it later and
//	         never caches it)
//
// Numbers are varints (encoding/binary's Uvarint; signed ones zig-zag,
// PutVarint), a float64 is its 8 IEEE 754 bytes, little-endian, a bool one
// byte 0 or 1, a string its byte length and bytes. A list or map starts
// with its length plus one, 0 being nil, so that a list that was empty is
// read back empty and one that was nil is read back nil, as JSON writes
// them differently ([] and null). A map's entries are sorted by key, so the
// same figures give the same bytes. A pointer is a byte 0 (nil) or 1 and
// what it points at. An input's or output's dim is a byte 0 and a number,
// or 1 and a symbol's name.
//
// Nothing read is trusted: every length is checked against the bytes that
// are left before anything is allocated for it (each element takes at
// least one byte), a varint that does not end, a bool that is not 0 or 1
// and bytes left over are errors, and an error makes the entry a miss.

// encodeFigures encodes a figures entry. It fails on what the form cannot
// hold (a dim that is neither a number nor a name, a device estimate), and
// the figures are then not cached.
func encodeFigures(e *cacheEntry) ([]byte, error) {
	m := e.Metrics
	if m == nil {
		return nil, errors.New("no figures")
	}
	if m.Target != nil {
		return nil, errors.New("a device estimate is not cached")
	}
	w := entryWriter{b: make([]byte, 0, 512)}
	w.str(e.Blob)
	w.str(e.Version)
	w.str(e.Options)
	w.strMap(e.Deps)

	w.str(m.Path)
	w.str(m.Format)
	w.int(m.FileBytes)
	w.int(m.ExternalBytes)
	w.int(m.Params)
	w.int(m.ParamBytes)
	w.int(m.MACs)
	w.int(m.FLOPs)
	w.float(m.Sparsity)
	if err := w.ios(m.Inputs); err != nil {
		return nil, err
	}
	if err := w.ios(m.Outputs); err != nil {
		return nil, err
	}
	w.count(len(m.Unresolved), m.Unresolved == nil)
	for _, u := range m.Unresolved {
		w.str(u.Node)
		w.str(u.Op)
		w.str(u.Reason)
	}
	w.str(m.Error)
	w.count(len(m.MissingBindings), m.MissingBindings == nil)
	for _, b := range m.MissingBindings {
		w.str(b.Input)
		w.int(int64(b.Axis))
		w.str(b.Name)
		w.str(b.Bind)
		w.str(b.Blocks)
		w.int(int64(b.Nodes))
	}
	w.count(len(m.BindingIssues), m.BindingIssues == nil)
	for _, b := range m.BindingIssues {
		w.str(b.Kind)
		w.str(b.Name)
		w.str(b.Problem)
		w.bool(b.NamesNothing)
	}
	w.count(len(m.DecidedIfs), m.DecidedIfs == nil)
	for _, d := range m.DecidedIfs {
		w.str(d.Node)
		w.str(d.Branch)
	}
	w.count(len(m.ParamsByDType), m.ParamsByDType == nil)
	for _, d := range m.ParamsByDType {
		w.str(d.DType)
		w.int(d.Params)
		w.int(d.Bytes)
	}
	w.int(m.GeneratedParamBytes)
	w.count(len(m.Opsets), m.Opsets == nil)
	for _, k := range slices.Sorted(maps.Keys(m.Opsets)) {
		w.str(k)
		w.int(m.Opsets[k])
	}
	w.int(int64(m.Nodes))

	w.view(m.Memory.Graph)
	w.view(m.Memory.Deployed)
	w.bool(m.Memory.Runtime != nil)
	if rt := m.Memory.Runtime; rt != nil {
		w.int(rt.PeakLiveBytes)
		w.int(rt.ArenaBytes)
		w.int(rt.ScratchBytes)
	}
	w.int(m.Memory.PersistentBytes)

	d := &m.MemoryDetail
	w.int(int64(d.PeakStep))
	w.strs(d.LiveAtPeak)
	w.float(d.ArenaRatio)
	w.float(d.DeployedRatio)
	w.count(len(d.Views), d.Views == nil)
	for _, k := range slices.Sorted(maps.Keys(d.Views)) {
		v := d.Views[k]
		w.str(k)
		w.int(int64(v.PeakStep))
		w.int(v.PeakLiveBytes)
		w.count(len(v.LiveAtPeak), v.LiveAtPeak == nil)
		for _, t := range v.LiveAtPeak {
			w.str(t.Name)
			w.int(t.Bytes)
			w.int(t.Offset)
		}
		w.ints(v.LiveBytesByStep)
	}
	w.str(d.Judged)

	w.count(len(m.Constants), m.Constants == nil)
	for _, c := range m.Constants {
		w.str(c.Name)
		w.int(c.Bytes)
		w.str(c.Digest)
		w.bool(c.Weight)
	}
	return w.b, nil
}

// decodeFigures reads a figures entry; any error is a miss. The strings
// of the figures are slices of s, not one allocation each.
func decodeFigures(s string) (*cacheEntry, error) {
	r := entryReader{s: s}
	e := &cacheEntry{Blob: r.str(), Version: r.str(), Options: r.str(), Deps: r.strMap()}
	m := &measure.Metrics{}
	e.Metrics = m

	m.Path = r.str()
	m.Format = r.str()
	m.FileBytes = r.int()
	m.ExternalBytes = r.int()
	m.Params = r.int()
	m.ParamBytes = r.int()
	m.MACs = r.int()
	m.FLOPs = r.int()
	m.Sparsity = r.float()
	m.Inputs = r.ios()
	m.Outputs = r.ios()
	if n, ok := r.count(3); ok {
		m.Unresolved = make([]measure.Unresolved, n)
		for i := range m.Unresolved {
			m.Unresolved[i] = measure.Unresolved{Node: r.str(), Op: r.str(), Reason: r.str()}
		}
	}
	m.Error = r.str()
	if n, ok := r.count(6); ok {
		m.MissingBindings = make([]measure.MissingBinding, n)
		for i := range m.MissingBindings {
			m.MissingBindings[i] = measure.MissingBinding{Input: r.str(), Axis: r.intSize(), Name: r.str(), Bind: r.str(), Blocks: r.str(), Nodes: r.intSize()}
		}
	}
	if n, ok := r.count(4); ok {
		m.BindingIssues = make([]measure.BindingIssue, n)
		for i := range m.BindingIssues {
			m.BindingIssues[i] = measure.BindingIssue{Kind: r.str(), Name: r.str(), Problem: r.str(), NamesNothing: r.bool()}
		}
	}
	if n, ok := r.count(2); ok {
		m.DecidedIfs = make([]measure.DecidedIf, n)
		for i := range m.DecidedIfs {
			m.DecidedIfs[i] = measure.DecidedIf{Node: r.str(), Branch: r.str()}
		}
	}
	if n, ok := r.count(3); ok {
		m.ParamsByDType = make([]measure.DTypeBytes, n)
		for i := range m.ParamsByDType {
			m.ParamsByDType[i] = measure.DTypeBytes{DType: r.str(), Params: r.int(), Bytes: r.int()}
		}
	}
	m.GeneratedParamBytes = r.int()
	if n, ok := r.count(2); ok {
		m.Opsets = make(map[string]int64, n)
		for range n {
			k := r.str()
			m.Opsets[k] = r.int()
		}
	}
	m.Nodes = r.intSize()

	m.Memory.Graph = r.view()
	m.Memory.Deployed = r.view()
	if r.bool() {
		m.Memory.Runtime = &measure.RuntimeView{PeakLiveBytes: r.int(), ArenaBytes: r.int(), ScratchBytes: r.int()}
	}
	m.Memory.PersistentBytes = r.int()

	d := &m.MemoryDetail
	d.PeakStep = r.intSize()
	d.LiveAtPeak = r.strs()
	d.ArenaRatio = r.float()
	d.DeployedRatio = r.float()
	if n, ok := r.count(5); ok {
		d.Views = make(map[string]measure.ViewDetail, n)
		for range n {
			k := r.str()
			v := measure.ViewDetail{PeakStep: r.intSize(), PeakLiveBytes: r.int()}
			if n, ok := r.count(3); ok {
				v.LiveAtPeak = make([]measure.LiveTensor, n)
				for i := range v.LiveAtPeak {
					v.LiveAtPeak[i] = measure.LiveTensor{Name: r.str(), Bytes: r.int(), Offset: r.int()}
				}
			}
			v.LiveBytesByStep = r.ints()
			d.Views[k] = v
		}
	}
	d.Judged = r.str()

	if n, ok := r.count(4); ok {
		m.Constants = make([]measure.ConstantDigest, n)
		for i := range m.Constants {
			m.Constants[i] = measure.ConstantDigest{Name: r.str(), Bytes: r.int(), Digest: r.str(), Weight: r.bool()}
		}
	}
	if r.err != nil {
		return nil, r.err
	}
	if len(r.s) != 0 {
		return nil, fmt.Errorf("%d bytes after the figures", len(r.s))
	}
	return e, nil
}

// Kinds of an input's or output's dim in an entry.
const (
	dimNumber byte = 0
	dimSymbol byte = 1
)

// entryWriter appends the parts of an entry.
type entryWriter struct{ b []byte }

func (w *entryWriter) uvarint(v uint64) { w.b = binary.AppendUvarint(w.b, v) }
func (w *entryWriter) int(v int64)      { w.b = binary.AppendVarint(w.b, v) }
func (w *entryWriter) float(f float64) {
	w.b = binary.LittleEndian.AppendUint64(w.b, math.Float64bits(f))
}

func (w *entryWriter) bool(v bool) {
	if v {
		w.b = append(w.b, 1)
	} else {
		w.b = append(w.b, 0)
	}
}

func (w *entryWriter) str(s string) {
	w.uvarint(uint64(len(s)))
	w.b = append(w.b, s...)
}

// count writes a list's or map's length plus one, 0 for nil.
func (w *entryWriter) count(n int, isNil bool) {
	if isNil {
		w.uvarint(0)
		return
	}
	w.uvarint(uint64(n) + 1)
}

func (w *entryWriter) strs(s []string) {
	w.count(len(s), s == nil)
	for _, v := range s {
		w.str(v)
	}
}

func (w *entryWriter) ints(s []int64) {
	w.count(len(s), s == nil)
	for _, v := range s {
		w.int(v)
	}
}

func (w *entryWriter) strMap(m map[string]string) {
	w.count(len(m), m == nil)
	for _, k := range slices.Sorted(maps.Keys(m)) {
		w.str(k)
		w.str(m[k])
	}
}

func (w *entryWriter) view(v measure.MemoryView) {
	w.int(v.PeakLiveBytes)
	w.int(v.ArenaBytes)
}

func (w *entryWriter) ios(list []measure.IOInfo) error {
	w.count(len(list), list == nil)
	for _, io := range list {
		w.str(io.Name)
		w.str(io.DType)
		w.count(len(io.Shape), io.Shape == nil)
		for _, d := range io.Shape {
			switch d := d.(type) {
			case int64:
				w.b = append(w.b, dimNumber)
				w.int(d)
			case string:
				w.b = append(w.b, dimSymbol)
				w.str(d)
			default:
				return fmt.Errorf("%s: a dim of type %T", io.Name, d)
			}
		}
	}
	return nil
}

// entryReader reads the parts of an entry from s, what is left of it.
// After the first error every read gives a zero value.
type entryReader struct {
	s   string
	err error
}

func (r *entryReader) fail(what string) {
	if r.err == nil {
		r.err = fmt.Errorf("figures entry: %s with %d bytes left", what, len(r.s))
	}
	r.s = ""
}

func (r *entryReader) uvarint() uint64 {
	var v uint64
	for i := 0; i < len(r.s) && i < binary.MaxVarintLen64; i++ {
		c := r.s[i]
		if i == binary.MaxVarintLen64-1 && c > 1 {
			break // more than 64 bits
		}
		v |= uint64(c&0x7f) << (7 * i)
		if c < 0x80 {
			r.s = r.s[i+1:]
			return v
		}
	}
	r.fail("a number that does not end")
	return 0
}

func (r *entryReader) int() int64 {
	u := r.uvarint()
	return int64(u>>1) ^ -int64(u&1) // zig-zag, as binary.Varint
}

// intSize reads a number that must fit an int.
func (r *entryReader) intSize() int {
	v := r.int()
	if int64(int(v)) != v {
		r.fail("a count out of range")
		return 0
	}
	return int(v)
}

func (r *entryReader) float() float64 {
	if len(r.s) < 8 {
		r.fail("a cut float")
		return 0
	}
	v := math.Float64frombits(uint64(r.s[0]) | uint64(r.s[1])<<8 | uint64(r.s[2])<<16 | uint64(r.s[3])<<24 |
		uint64(r.s[4])<<32 | uint64(r.s[5])<<40 | uint64(r.s[6])<<48 | uint64(r.s[7])<<56)
	r.s = r.s[8:]
	return v
}

func (r *entryReader) bool() bool {
	if len(r.s) == 0 || r.s[0] > 1 {
		r.fail("a bool that is not 0 or 1")
		return false
	}
	v := r.s[0] == 1
	r.s = r.s[1:]
	return v
}

func (r *entryReader) str() string {
	n := r.uvarint()
	if n > uint64(len(r.s)) {
		r.fail(fmt.Sprintf("a string of %d bytes", n))
		return ""
	}
	v := r.s[:n]
	r.s = r.s[n:]
	return v
}

// count reads a list's or map's length, each of whose elements takes at
// least min bytes; ok is false for nil. A length that the bytes left
// cannot hold is an error, before anything is allocated for it.
func (r *entryReader) count(min int) (n int, ok bool) {
	c := r.uvarint()
	if c == 0 || r.err != nil {
		return 0, false
	}
	if c-1 > uint64(len(r.s)/min) {
		r.fail(fmt.Sprintf("a list of %d", c-1))
		return 0, false
	}
	return int(c - 1), true
}

func (r *entryReader) strs() []string {
	n, ok := r.count(1)
	if !ok {
		return nil
	}
	s := make([]string, n)
	for i := range s {
		s[i] = r.str()
	}
	return s
}

func (r *entryReader) ints() []int64 {
	n, ok := r.count(1)
	if !ok {
		return nil
	}
	s := make([]int64, n)
	for i := range s {
		s[i] = r.int()
	}
	return s
}

func (r *entryReader) strMap() map[string]string {
	n, ok := r.count(2)
	if !ok {
		return nil
	}
	m := make(map[string]string, n)
	for range n {
		k := r.str()
		m[k] = r.str()
	}
	return m
}

func (r *entryReader) view() measure.MemoryView {
	return measure.MemoryView{PeakLiveBytes: r.int(), ArenaBytes: r.int()}
}

func (r *entryReader) ios() []measure.IOInfo {
	n, ok := r.count(3)
	if !ok {
		return nil
	}
	list := make([]measure.IOInfo, n)
	for i := range list {
		io := measure.IOInfo{Name: r.str(), DType: r.str()}
		if n, ok := r.count(2); ok {
			io.Shape = make([]any, n)
			for j := range io.Shape {
				if len(r.s) == 0 {
					r.fail("a cut dim")
					break
				}
				kind := r.s[0]
				r.s = r.s[1:]
				switch kind {
				case dimNumber:
					io.Shape[j] = r.int()
				case dimSymbol:
					io.Shape[j] = r.str()
				default:
					r.fail(fmt.Sprintf("a dim of kind %d", kind))
				}
			}
		}
		list[i] = io
	}
	return list
}
