package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

func writeResNet(t *testing.T, dir string) string {
	t.Helper()
	m, err := build.ResNet18(build.Options{Size: 64, Classes: 10, BatchSymbol: "batch"})
	if err != nil {
		t.Fatal(err)
	}
	b, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(dir, "r18.onnx")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestMeasureJSONContract checks the loadline.measure/v1 document: every
// path gets an entry with the path exactly as given, an unreadable file an
// entry with error set, the others are still measured, and the exit code is 1.
func TestMeasureJSONContract(t *testing.T) {
	dir := t.TempDir()
	good := writeResNet(t, dir)
	missing := filepath.Join(dir, "nope.onnx")
	var out, errb bytes.Buffer
	code := run([]string{"measure", "--json", "--dim", "batch=2", good, missing}, &out, &errb)
	if code != exitBudget {
		t.Fatalf("exit %d, want %d; stderr: %s", code, exitBudget, errb.String())
	}
	var doc struct {
		Schema string `json:"schema"`
		Models []struct {
			Path      string `json:"path"`
			Format    string `json:"format"`
			FileBytes int64  `json:"file_bytes"`
			Params    int64  `json:"params"`
			Inputs    []struct {
				Name  string `json:"name"`
				DType string `json:"dtype"`
				Shape []any  `json:"shape"`
			} `json:"inputs"`
			Outputs []struct {
				Shape []any `json:"shape"`
			} `json:"outputs"`
			Unresolved []any  `json:"unresolved"`
			Error      string `json:"error"`
		} `json:"models"`
	}
	if err := json.Unmarshal(out.Bytes(), &doc); err != nil {
		t.Fatalf("not JSON: %v\n%s", err, out.String())
	}
	if doc.Schema != "loadline.measure/v1" || len(doc.Models) != 2 {
		t.Fatalf("schema %q with %d models", doc.Schema, len(doc.Models))
	}
	g, m := doc.Models[0], doc.Models[1]
	if g.Path != good || m.Path != missing {
		t.Errorf("paths %q, %q: want them exactly as given", g.Path, m.Path)
	}
	if g.Error != "" || g.Format != "onnx" || g.FileBytes == 0 {
		t.Errorf("good entry: %+v", g)
	}
	// resnet18 with 10 classes: 11,689,512 − 512·1000 − 1000 + 512·10 + 10
	// (torchvision's count with the classifier resized; hand-worked).
	if want := int64(11_689_512 - 513_000 + 5_130); g.Params != want {
		t.Errorf("params %d, want %d", g.Params, want)
	}
	if len(g.Inputs) != 1 || g.Inputs[0].Shape[0] != float64(2) {
		t.Errorf("--dim batch=2 not applied to the input: %+v", g.Inputs)
	}
	if len(g.Outputs) != 1 || len(g.Outputs[0].Shape) != 2 || g.Outputs[0].Shape[0] != float64(2) || g.Outputs[0].Shape[1] != float64(10) {
		t.Errorf("output shape %v, want [2,10]", g.Outputs)
	}
	if m.Error == "" || !strings.Contains(m.Error, "nope.onnx") {
		t.Errorf("missing file: error %q should name the file", m.Error)
	}
	if !strings.Contains(errb.String(), "1 of 2 file(s) could not be measured") {
		t.Errorf("stderr: %q", errb.String())
	}
}

func TestMeasureSymbolicStays(t *testing.T) {
	dir := t.TempDir()
	good := writeResNet(t, dir)
	var out, errb bytes.Buffer
	if code := run([]string{"measure", good}, &out, &errb); code != exitOK {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	if !strings.Contains(out.String(), "input   input float32[batch,3,64,64]") {
		t.Errorf("text output lacks the symbolic input shape:\n%s", out.String())
	}
}

func TestUsageErrors(t *testing.T) {
	for _, args := range [][]string{
		{"measure"},
		{"measure", "--dim", "batch", "x.onnx"},
		{"measure", "--dim", "batch=-1", "x.onnx"},
		{"check", "--post", "--format", "json"}, // annotations and JSON would share stdout
		{"frobnicate"},
		{"check", "--pre-push", "--base", "main"},
		{"check", "--staged", "--head", "HEAD"},
		{"check", "--format", "html"},
	} {
		var out, errb bytes.Buffer
		if code := run(args, &out, &errb); code != exitUsage {
			t.Errorf("%v: exit %d, want %d (stderr %q)", args, code, exitUsage, errb.String())
		}
		if errb.Len() == 0 {
			t.Errorf("%v: no message on stderr", args)
		}
	}
}

func TestDemo(t *testing.T) {
	// Run as in a pull-request job: the demo must not look for the pull
	// request's base in its throwaway repository.
	t.Setenv("GITHUB_BASE_REF", "develop")
	t.Setenv("CI_MERGE_REQUEST_DIFF_BASE_SHA", "0123456789abcdef0123456789abcdef01234567")
	var out, errb bytes.Buffer
	if code := run([]string{"demo"}, &out, &errb); code != exitOK {
		t.Fatalf("demo exit %d: %s", code, errb.String())
	}
	o := out.String()
	// The retrain breaks the bird detector's ram limit (700 KiB deployed
	// arena at 160×160 against 90 % of 512 KiB) and grows the wake-word
	// spotter and the doorbell's TFLite chime detector within budget.
	for _, want := range []string{
		"models/porch-cam/birdspot.onnx: ram 700.0 KiB > limit 460.8 KiB",
		"1 model over budget, 2 within budget",
		"<details>",
		"What happened: the retrain broke 3 budget check(s)",
		"models/doorbell/chime.tflite, models/kitchen-timer/wakeword.onnx grew but stayed within",
	} {
		if !strings.Contains(o, want) {
			t.Errorf("demo output lacks %q:\n%s", want, o)
		}
	}
	// The chime detector's ram is its runtime arena, hand-worked at width
	// 18 (int8, every buffer rounded up to 16 bytes): the depthwise step
	// holds conv0's and dw1's outputs, 25·5·18 = 2,250 → 2,256 bytes each:
	// 4,512 B = 4.41 KiB; it has no variable tensors.
	var chime bool
	for _, line := range strings.Split(o, "\n") {
		chime = chime || (strings.HasPrefix(line, "models/doorbell/chime.tflite") && strings.Contains(line, " ram ") && strings.Contains(line, "4.41 KiB"))
	}
	if !chime {
		t.Errorf("demo output lacks the chime detector's ram of 4.41 KiB:\n%s", o)
	}
}

// TestOrderedOutputKeepsInterleaving: standard output is buffered, yet a
// log that joins both streams reads them in the order they were written,
// and nothing is lost at the end.
func TestOrderedOutputKeepsInterleaving(t *testing.T) {
	var joined bytes.Buffer
	o := newOrderedOutput(&joined, &joined)
	out, errw := o.stdout(), o.stderr()
	fmt.Fprint(out, "report line 1\n")
	fmt.Fprint(out, "report line 2\n")
	if joined.Len() != 0 {
		t.Fatalf("standard output was not buffered: %q", joined.String())
	}
	fmt.Fprint(errw, "warning\n")
	fmt.Fprint(out, "report line 3\n")
	o.flush()
	if want := "report line 1\nreport line 2\nwarning\nreport line 3\n"; joined.String() != want {
		t.Errorf("joined log %q, want %q", joined.String(), want)
	}
	if u, ok := out.(interface{ Unwrap() io.Writer }); !ok || u.Unwrap() != io.Writer(&joined) {
		t.Errorf("the buffered stream does not unwrap to the stream beneath, so colour could not be decided on it")
	}
}
