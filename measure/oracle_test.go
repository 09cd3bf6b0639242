package measure

import (
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// oracleScript runs ONNX's reference shape inference (Debian python3-onnx,
// onnx.shape_inference.infer_shapes with data propagation) on each model
// and prints, per model, every value whose inferred shape is complete.
const oracleScript = `
import json, sys, onnx
from onnx import shape_inference
out = {}
for p in sys.argv[1:]:
    m = onnx.load(p, load_external_data=False)
    try:
        m = shape_inference.infer_shapes(m, data_prop=True)
    except Exception as e:
        out[p] = {"__error__": str(e)}
        continue
    shapes = {}
    for vi in list(m.graph.value_info) + list(m.graph.output):
        t = vi.type.tensor_type
        if not vi.type.HasField("tensor_type") or not t.HasField("shape"):
            continue
        dims = []
        for d in t.shape.dim:
            if not d.HasField("dim_value"):
                dims = None
                break
            dims.append(d.dim_value)
        if dims is not None:
            shapes[vi.name] = dims
    out[p] = shapes
json.dump(out, sys.stdout)
`

// runOracle returns, per path, the complete shapes ONNX's reference
// inference gives; it skips (or fails under LOADLINE_REQUIRE_CORPUS=1)
// when python3-onnx is not installed.
func runOracle(t *testing.T, paths []string) map[string]map[string][]int64 {
	t.Helper()
	if err := exec.Command("/usr/bin/python3", "-c", "import onnx").Run(); err != nil {
		corpus.Missing(t, "python3-onnx is not installed (apt-get install python3-onnx): cannot compare with ONNX's reference shape inference")
	}
	cmd := exec.Command("/usr/bin/python3", append([]string{"-c", oracleScript}, paths...)...)
	cmd.Stderr = os.Stderr
	b, err := cmd.Output()
	if err != nil {
		t.Fatalf("reference shape inference: %v", err)
	}
	var raw map[string]map[string]any
	if err := json.Unmarshal(b, &raw); err != nil {
		t.Fatalf("reading reference output: %v", err)
	}
	out := map[string]map[string][]int64{}
	for p, m := range raw {
		out[p] = map[string][]int64{}
		for name, v := range m {
			if name == "__error__" {
				t.Logf("%s: reference inference failed: %v", p, v)
				continue
			}
			var dims []int64
			for _, d := range v.([]any) {
				dims = append(dims, int64(d.(float64)))
			}
			out[p][name] = dims
		}
	}
	return out
}

// compareWithOracle infers each model with declared shapes ignored and
// checks every value the reference inference gives a complete shape for.
func compareWithOracle(t *testing.T, paths []string) {
	ref := runOracle(t, paths)
	checked := 0
	for _, p := range paths {
		m, err := onnx.DecodeFile(p, onnx.Options{})
		if err != nil {
			t.Errorf("%s: %v", p, err)
			continue
		}
		res, err := Infer(m, InferOptions{IgnoreDeclared: true})
		if err != nil {
			t.Errorf("%s: %v", p, err)
			continue
		}
		for name, want := range ref[p] {
			v := res.Values.Get(name)
			checked++
			if v == nil || !v.Type.RankKnown {
				t.Errorf("%s: %s: loadline infers no shape, reference gives %v", shortPath(p), name, want)
				continue
			}
			if got, ok := v.Type.Shape.Ints(); !ok || !equalInts(got, want) {
				t.Errorf("%s: %s: loadline infers %v, reference gives %v", shortPath(p), name, v.Type.Shape, want)
			}
		}
	}
	t.Logf("compared %d intermediate shapes over %d models with ONNX's reference shape inference", checked, len(paths))
	if checked == 0 {
		t.Fatal("compared nothing")
	}
}

func shortPath(p string) string {
	parts := strings.Split(filepath.ToSlash(p), "/")
	if len(parts) >= 3 {
		return strings.Join(parts[len(parts)-3:len(parts)-1], "/")
	}
	return p
}

// TestOracleCorpusPytorch compares every intermediate shape of the suite's
// pytorch-converted and pytorch-operator models with ONNX's reference
// shape inference (python3-onnx), wherever that gives a full shape.
func TestOracleCorpusPytorch(t *testing.T) {
	var paths []string
	for _, p := range corpus.Models(t) {
		if strings.Contains(p, "/pytorch-converted/") || strings.Contains(p, "/pytorch-operator/") {
			paths = append(paths, p)
		}
	}
	compareWithOracle(t, paths)
}

// TestOracleBuiltModels does the same for the reference architectures of
// model/build at their published 224×224 input. Weights are declared
// without bytes and written as external-data references, which shape
// inference (ours and the reference's) never reads.
func TestOracleBuiltModels(t *testing.T) {
	dir := t.TempDir()
	var paths []string
	for _, name := range build.Architectures() {
		f, _ := build.Architecture(name)
		m, err := f(build.Options{Declared: true})
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		p := filepath.Join(dir, name+".onnx")
		b, err := onnx.EncodeWithExternal(m, func(w *model.Tensor) (string, int64) { return "weights.bin", 0 })
		if err != nil {
			t.Fatalf("encoding %s: %v", name, err)
		}
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		paths = append(paths, p)
	}
	compareWithOracle(t, paths)
}
