package target

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
)

func TestRuntimeTables(t *testing.T) {
	tm := Runtimes["tflite-micro"]
	on := Runtimes["onnx"]
	if tm == nil || on == nil {
		t.Fatalf("runtimes %v", Runtimes)
	}
	// micro_mutable_op_resolver.h at 933f830: 89 AddBuiltin operators and
	// two AddCustom ones with fixed names (CIRCULAR_BUFFER,
	// TFLite_Detection_PostProcess), counted from the file.
	if n := len(tm.ops); n != 91 {
		t.Errorf("tflite-micro lists %d operators", n)
	}
	for _, op := range []string{"CONV_2D", "DEPTHWISE_CONV_2D", "FULLY_CONNECTED", "SVDF", "UNIDIRECTIONAL_SEQUENCE_LSTM", "custom:CIRCULAR_BUFFER"} {
		if _, ok := tm.ops[op]; !ok {
			t.Errorf("tflite-micro lacks %s", op)
		}
	}
	// python3-onnx 1.12 has 178 non-deprecated operators in the default domain.
	if _, ok := on.ops["Conv"]; !ok || len(on.ops) < 150 {
		t.Errorf("onnx table: %d operators", len(on.ops))
	}
	for _, bad := range []string{"# runtime: x\nCONV_2D\n", "# format: tflite\nA *\n", "# runtime: x\n# format: y\nA *\nA *\n"} {
		if _, err := parseRuntime("t", bad); err == nil {
			t.Errorf("accepted %q", bad)
		}
	}
}

func TestSupportOfSharedModels(t *testing.T) {
	// Every operator of every shared TFLite model (flatc decoding in
	// structure/) is classified for the microcontroller runtime: all are
	// builtins the runtime registers, so none is unsupported.
	dir := corpus.TFLiteDir(t)
	files, _ := filepath.Glob(filepath.Join(dir, "structure", "*.json"))
	if len(files) < 13 {
		t.Fatalf("%d structure files in %s", len(files), dir)
	}
	tgt := Builtin["m4-reference"]
	for _, f := range files {
		name := strings.TrimSuffix(filepath.Base(f), ".json")
		nodes := structureNodes(t, name)
		e := tgt.Cost(nodes, WeightsFlash)
		tgt.Support(e, "tflite", nodes)
		if e.SupportNote != "" || len(e.Unsupported) != 0 {
			t.Errorf("%s: unsupported %+v note %q", name, e.Unsupported, e.SupportNote)
		}
		if len(e.Uncosted) != 0 {
			t.Errorf("%s: uncosted %+v", name, e.Uncosted)
		}
		t.Logf("%s: %d operators, all supported by tflite-micro, %.2f ms on m4-reference", name, len(nodes), e.LatencyMS)
	}
}

func TestUnsupported(t *testing.T) {
	tgt := Builtin["m4-reference"]
	nodes := []Node{
		{Step: 0, Name: "a", Op: "CONV_2D", Domain: "tflite", DType: "int8"},
		{Step: 1, Name: "b", Op: "MyFancyOp", Domain: "tflite.custom", DType: "int8"},
		{Step: 2, Name: "c", Op: "FULLY_CONNECTED", Domain: "tflite", DType: "uint8"},
		{Step: 3, Name: "d", Op: "REVERSE_SEQUENCE", Domain: "tflite", DType: "float32"},
		{Step: 4, Name: "e", Op: "CIRCULAR_BUFFER", Domain: "tflite.custom", DType: "int8"},
	}
	e := tgt.Cost(nodes, WeightsFlash)
	tgt.Support(e, "tflite", nodes)
	var got []string
	for _, u := range e.Unsupported {
		got = append(got, u.Node+": "+u.Reason)
	}
	want := []string{
		"b: tflite-micro has no kernel for custom operator MyFancyOp",
		"c: tflite-micro implements FULLY_CONNECTED for float32, int8, int16 only, not uint8",
		"d: tflite-micro has no kernel for REVERSE_SEQUENCE",
	}
	if strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("unsupported:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	// An ONNX model on a TFLite runtime is not checked, and says why.
	e = tgt.Cost(nil, "")
	tgt.Support(e, "onnx", []Node{{Op: "Conv"}})
	if len(e.Unsupported) != 0 || !strings.Contains(e.SupportNote, "runs tflite models and this is onnx") {
		t.Errorf("onnx on tflite-micro: %+v %q", e.Unsupported, e.SupportNote)
	}
	// The ONNX table: a standard operator passes, another domain's does not.
	on := &Target{Name: "x", Runtime: "onnx", ClockHz: 1}
	e = on.Cost(nil, "")
	on.Support(e, "onnx", []Node{{Name: "m", Op: "Conv"}, {Name: "n", Op: "FusedGemm", Domain: "com.microsoft"}})
	if len(e.Unsupported) != 1 || e.Unsupported[0].Reason != "onnx has no kernel for com.microsoft:FusedGemm" {
		t.Errorf("onnx: %+v", e.Unsupported)
	}
}

func TestRuntimeFilesNameTheirSource(t *testing.T) {
	entries, _ := os.ReadDir("runtimes")
	for _, e := range entries {
		data, _ := os.ReadFile(filepath.Join("runtimes", e.Name()))
		if !strings.Contains(string(data), "# Source:") {
			t.Errorf("%s does not say where its rows come from", e.Name())
		}
	}
}
