package onnx_test

import (
	"bytes"
	"fmt"
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// TestDecodePassedIsFinal: the offsets Options.Passed reports never go
// back, and decoding never reads the bytes before them again. The file is
// decoded once as is and once with every byte it has passed overwritten
// (a mapped file whose pages were given back reads the same, but nothing
// may depend on it): everything but the tensors' values, which the model
// keeps as sub-slices for others to read, must come out the same.
func TestDecodePassedIsFinal(t *testing.T) {
	f, _ := build.Architecture("resnet18")
	m, err := f(build.Options{})
	if err != nil {
		t.Fatal(err)
	}
	data, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	want, err := onnx.Decode(bytes.Clone(data), onnx.Options{Path: "resnet18.onnx"})
	if err != nil {
		t.Fatal(err)
	}
	poisoned := bytes.Clone(data)
	last := 0
	got, err := onnx.Decode(poisoned, onnx.Options{Path: "resnet18.onnx", Passed: func(off int) {
		if off < last || off > len(poisoned) {
			t.Fatalf("passed %d after %d (file of %d bytes)", off, last, len(poisoned))
		}
		for i := last; i < off; i++ {
			poisoned[i] = 0xff
		}
		last = off
	}})
	if err != nil {
		t.Fatalf("decoding read bytes it had passed: %v", err)
	}
	if last < len(data)/2 {
		t.Errorf("passed only %d of %d bytes", last, len(data))
	}
	if a, b := structure(want), structure(got); a != b {
		t.Errorf("decoding read bytes it had passed:\n%s\nwant\n%s", b, a)
	}
}

// structure prints a model's graph without its tensors' values.
func structure(m *model.Model) string {
	var b bytes.Buffer
	for _, n := range m.Graph.Nodes {
		fmt.Fprintf(&b, "%s %s %s %q %q", n.Name, n.Op, n.Domain, n.Inputs, n.Outputs)
		for _, a := range n.Attrs {
			fmt.Fprintf(&b, " %s:%v:%v:%v:%q:%v:%v", a.Name, a.Kind, a.Int, a.Float, a.String, a.Ints, a.Floats)
		}
		b.WriteByte('\n')
	}
	for _, w := range m.Graph.Initializers {
		fmt.Fprintf(&b, "%s %v %v %v\n", w.Name, w.DType, w.Dims, w.Data.Encoding)
	}
	for _, v := range append(m.Graph.Inputs, m.Graph.Outputs...) {
		fmt.Fprintf(&b, "%s %v\n", v.Name, v.Type)
	}
	return b.String()
}
