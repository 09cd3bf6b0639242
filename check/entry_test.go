package check

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"reflect"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/target"
)

// notInFiguresEntry are the fields of measure.Metrics that the figures
// entry does not keep, and why; every other field, and every field of the
// types they hold, must come back from the entry as it went in.
var notInFiguresEntry = map[string]string{
	"Layers":                       "kept in the per-layer entry",
	"MemoryDetail.LiveBytesByStep": "kept in the per-layer entry",
	"Target":                       "a device estimate is made after the figures and never cached",
}

// filler sets every field it can reach to a value that is not zero: a
// field that the figures entry forgets comes back zero and fails the
// round trip.
type filler struct{ n int }

func (f *filler) fill(t *testing.T, v reflect.Value, path string) {
	f.n++
	switch v.Kind() {
	case reflect.String:
		v.SetString(fmt.Sprintf("%s-%d ✓", path, f.n))
	case reflect.Int, reflect.Int64, reflect.Int32:
		v.SetInt(int64(f.n) * 1_000_003 * int64(1-2*(f.n%2))) // negative ones too
	case reflect.Float64:
		v.SetFloat(float64(f.n) + 0.25)
	case reflect.Bool:
		v.SetBool(true)
	case reflect.Pointer:
		p := reflect.New(v.Type().Elem())
		f.fill(t, p.Elem(), path)
		v.Set(p)
	case reflect.Slice:
		s := reflect.MakeSlice(v.Type(), 2, 2)
		for i := range 2 {
			f.fill(t, s.Index(i), fmt.Sprintf("%s[%d]", path, i))
		}
		v.Set(s)
	case reflect.Map:
		m := reflect.MakeMap(v.Type())
		for i := range 2 {
			k, e := reflect.New(v.Type().Key()).Elem(), reflect.New(v.Type().Elem()).Elem()
			f.fill(t, k, path+".key")
			f.fill(t, e, fmt.Sprintf("%s[%d]", path, i))
			m.SetMapIndex(k, e)
		}
		v.Set(m)
	case reflect.Interface:
		// An input's dims: numbers and names.
		if f.n%2 == 0 {
			v.Set(reflect.ValueOf(int64(f.n)))
		} else {
			v.Set(reflect.ValueOf(fmt.Sprintf("dim%d", f.n)))
		}
	case reflect.Struct:
		for i := range v.NumField() {
			sf := v.Type().Field(i)
			name := strings.TrimPrefix(path+"."+sf.Name, "Metrics.")
			if !sf.IsExported() {
				t.Fatalf("%s is unexported: the figures entry cannot keep it", name)
			}
			if _, skip := notInFiguresEntry[name]; skip {
				continue
			}
			f.fill(t, v.Field(i), name)
		}
	default:
		t.Fatalf("%s: the filler has no value of kind %s", path, v.Kind())
	}
}

// TestFiguresEntryKeepsEveryField: figures with every field set (by
// reflection, so that a field added later is set too) come back from the
// figures entry exactly, with the key they were made for.
func TestFiguresEntryKeepsEveryField(t *testing.T) {
	for name := range notInFiguresEntry {
		v := reflect.ValueOf(measure.Metrics{})
		for _, part := range strings.Split(name, ".") {
			f := v.FieldByName(part)
			if !f.IsValid() {
				t.Fatalf("notInFiguresEntry names %s, which measure.Metrics does not have", name)
			}
			v = f
		}
	}
	var m measure.Metrics
	(&filler{}).fill(t, reflect.ValueOf(&m).Elem(), "Metrics")
	in := &cacheEntry{Blob: fuzzBlob, Version: AnalyzerVersion, Options: "batch=1\x00deploy={…}", Deps: map[string]string{"w.bin": "ab", "x/y.bin": "cd"}, Metrics: &m}
	out, b, err := roundTrip(in)
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(out, in) {
		got, _ := json.MarshalIndent(out, "", " ")
		want, _ := json.MarshalIndent(in, "", " ")
		t.Fatalf("the entry changed the figures:\n got %s\nwant %s", got, want)
	}
	// Each cut of the entry is an error, never a panic.
	for n := range len(b) {
		if _, err := decodeFigures(string(b[:n])); err == nil {
			t.Fatalf("the entry cut to %d of %d bytes was read", n, len(b))
		}
	}
	if _, err := decodeFigures(string(append(b, 0))); err == nil {
		t.Fatal("an entry with a byte after it was read")
	}
}

// TestFiguresEntryNilAndEmpty: a list or map that was empty comes back
// empty and one that was nil comes back nil (JSON writes them [] and
// null), and an entry without dependencies has none.
func TestFiguresEntryNilAndEmpty(t *testing.T) {
	empty := &measure.Metrics{Inputs: []measure.IOInfo{{Name: "x", Shape: []any{}}, {Name: "y"}}, Outputs: []measure.IOInfo{},
		Unresolved: []measure.Unresolved{}, MissingBindings: []measure.MissingBinding{}, BindingIssues: []measure.BindingIssue{},
		DecidedIfs: []measure.DecidedIf{}, ParamsByDType: []measure.DTypeBytes{}, Opsets: map[string]int64{}, Constants: []measure.ConstantDigest{},
		MemoryDetail: measure.MemoryDetail{LiveAtPeak: []string{}, Views: map[string]measure.ViewDetail{"g": {LiveAtPeak: []measure.LiveTensor{}, LiveBytesByStep: []int64{}}, "d": {}}}}
	for _, m := range []*measure.Metrics{empty, {}} {
		for _, deps := range []map[string]string{nil, {}} {
			in := &cacheEntry{Blob: "b", Metrics: m, Deps: deps}
			out, _, err := roundTrip(in)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(out, in) {
				t.Errorf("nil and empty lists were not kept apart:\n got %+v\nwant %+v", out.Metrics, in.Metrics)
			}
			gj, _ := json.Marshal(out.Metrics)
			wj, _ := json.Marshal(in.Metrics)
			if !bytes.Equal(gj, wj) {
				t.Errorf("JSON of the figures read back:\n%s\nwant\n%s", gj, wj)
			}
		}
	}
}

// TestFiguresEntryRefuses: what the form cannot hold is not cached; a
// count larger than the bytes left and a bool that is not 0 or 1 are
// errors, found before anything is allocated for them.
func TestFiguresEntryRefuses(t *testing.T) {
	for name, m := range map[string]*measure.Metrics{
		"a dim of another type": {Inputs: []measure.IOInfo{{Name: "x", Shape: []any{1.5}}}},
		"a device estimate":     {Target: &target.Estimate{Name: "mcu"}},
	} {
		if _, err := encodeFigures(&cacheEntry{Metrics: m}); err == nil {
			t.Errorf("%s was encoded", name)
		}
	}
	var w entryWriter
	w.str("b")
	w.str("v")
	w.str("o")
	head := w.b
	for name, rest := range map[string][]byte{
		"dependencies counted 2^40":      binary.AppendUvarint(nil, 1<<40+1),
		"a count of 2^64-1":              binary.AppendUvarint(nil, 1<<64-1),
		"a varint of 11 bytes":           bytes.Repeat([]byte{0xff}, 11),
		"a string longer than the entry": append([]byte{0}, binary.AppendUvarint(nil, 1<<30)...),
	} {
		if _, err := decodeFigures(string(append(append([]byte{}, head...), rest...))); err == nil {
			t.Errorf("%s: read", name)
		}
	}
	// A runtime view's presence byte of 2 in a real entry.
	b, err := encodeFigures(&cacheEntry{Metrics: &measure.Metrics{Nodes: 7}})
	if err != nil {
		t.Fatal(err)
	}
	at := bytes.Index(b, []byte{14, 0, 0, 0, 0, 0}) // nodes 7 (zig-zag 14), two views of zeros
	if at < 0 {
		t.Fatalf("no nodes field in %x", b)
	}
	b[at+5] = 2
	if _, err := decodeFigures(string(b)); err == nil || !strings.Contains(err.Error(), "bool") {
		t.Errorf("a presence byte of 2: %v", err)
	}
}

// TestFiguresEntryCorpus: the figures of every model of ONNX's backend
// test suite and of the shared TFLite models (measured with the per-layer
// view and the constants' digests, so every part of the entry is used) are
// read back from their entries equal, and written as JSON byte for byte
// the same.
func TestFiguresEntryCorpus(t *testing.T) {
	paths := append(corpus.Models(t), corpus.TFLiteModels(t)...)
	var kept, runtime, constants int
	for _, p := range paths {
		m := MeasureFile(p, measure.Options{Layers: true, Digests: true})
		if m.Error != "" {
			continue
		}
		figures := *m
		figures.Layers, figures.MemoryDetail.LiveBytesByStep = nil, nil
		in := &cacheEntry{Blob: fuzzBlob, Version: AnalyzerVersion, Options: "o", Metrics: &figures}
		out, _, err := roundTrip(in)
		if err != nil {
			t.Errorf("%s: %v", p, err)
			continue
		}
		if !reflect.DeepEqual(out, in) {
			t.Errorf("%s: the figures read back differ", p)
		}
		gj, _ := json.Marshal(out.Metrics)
		wj, _ := json.Marshal(in.Metrics)
		if !bytes.Equal(gj, wj) {
			t.Errorf("%s: JSON of the figures read back:\n%s\nwant\n%s", p, gj, wj)
		}
		kept++
		if m.Memory.Runtime != nil {
			runtime++
		}
		if len(m.Constants) > 0 {
			constants++
		}
	}
	t.Logf("%d of %d models' figures kept; %d with a runtime view, %d with constants", kept, len(paths), runtime, constants)
	if kept < len(paths)/2 || runtime == 0 || constants == 0 {
		t.Errorf("too little of the corpus measured: %d of %d, %d with a runtime view, %d with constants", kept, len(paths), runtime, constants)
	}
}

// roundTrip encodes a figures entry and reads it back, returning the
// entry read and its bytes.
func roundTrip(in *cacheEntry) (*cacheEntry, []byte, error) {
	b, err := encodeFigures(in)
	if err != nil {
		return nil, nil, err
	}
	out, err := decodeFigures(string(b))
	return out, b, err
}
