package format

import (
	"errors"
	"strings"
	"testing"

	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
	"github.com/loadline/loadline/model/tflite"
)

func onnxBytes(t *testing.T) []byte {
	t.Helper()
	m, err := build.MobileNetV1(build.Options{Size: 32, Width: 0.25, Classes: 10})
	if err != nil {
		t.Fatal(err)
	}
	b, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// TestDetect: the TFLite identifier at byte 4 decides, whatever the name.
func TestDetect(t *testing.T) {
	if got := Detect([]byte("\x1c\x00\x00\x00TFL3rest")); got != TFLite {
		t.Errorf("TFL3 at byte 4: %s, want tflite", got)
	}
	for _, b := range [][]byte{nil, []byte("TFL3"), []byte("TFL3TFL2"), []byte("\x08\x07\x12\x04")} {
		if got := Detect(b); got != ONNX {
			t.Errorf("%q: %s, want onnx", b, got)
		}
	}
}

// TestOpenByContent: an ONNX model opens whatever its extension says,
// unless the extension claims TFLite; a file in no format loadline reads
// is an error naming the file and the formats.
func TestOpenByContent(t *testing.T) {
	data := onnxBytes(t)
	for _, name := range []string{"m.onnx", "m.bin", "m"} {
		m, err := Open(name, data, Options{})
		if err != nil || m.Format != ONNX {
			t.Fatalf("%s: %v", name, err)
		}
	}
	_, err := Open("m.tflite", data, Options{})
	if err == nil || !strings.Contains(err.Error(), "m.tflite: not a TFLite model") {
		t.Errorf("ONNX bytes named .tflite: %v", err)
	}
	_, err = Open("notes.bin", []byte("\xff\xff\xff\xff garbage"), Options{})
	if !errors.Is(err, ErrUnknown) || !strings.Contains(err.Error(), "notes.bin") || !strings.Contains(err.Error(), Readable) {
		t.Errorf("garbage: %v; want the file, unknown format and the formats read", err)
	}
	_, err = Open("m.onnx", []byte("\xff\xff\xff\xff garbage"), Options{})
	if err == nil || errors.Is(err, ErrUnknown) || !strings.Contains(err.Error(), "m.onnx") {
		t.Errorf("garbage named .onnx: %v; want the ONNX decoder's error", err)
	}
}

// TestOpenTFLite: TFLite content opens with the TFLite decoder, whatever
// the name says.
func TestOpenTFLite(t *testing.T) {
	data, err := tflite.Encode(&tflite.Model{Version: 3,
		OperatorCodes: []tflite.OperatorCode{{DeprecatedBuiltinCode: 19, BuiltinCode: 19, Version: 1}},
		Subgraphs: []tflite.Subgraph{{
			Tensors:   []tflite.Tensor{{Shape: []int32{1, 4}, Name: "x"}, {Shape: []int32{1, 4}, Name: "y"}},
			Inputs:    []int32{0},
			Outputs:   []int32{1},
			Operators: []tflite.Operator{{OpcodeIndex: 0, Inputs: []int32{0}, Outputs: []int32{1}}},
		}},
		Buffers: []tflite.Buffer{{}},
	})
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"m.tflite", "m.bin", "m.onnx"} {
		m, err := Open(name, data, Options{})
		if err != nil || m.Format != TFLite || m.Graph.Nodes[0].Op != "RELU" {
			t.Fatalf("%s: %v", name, err)
		}
	}
	_, err = Open("m.tflite", data[:20], Options{})
	if err == nil || !strings.Contains(err.Error(), "m.tflite") {
		t.Errorf("truncated: %v", err)
	}
}
