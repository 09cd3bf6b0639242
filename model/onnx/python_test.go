package onnx

import (
	"bufio"
	"bytes"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/model"
)

// python is ONNX's own reader: Debian's python3-onnx under /usr/bin/python3.
const python = "/usr/bin/python3"

// requirePython skips (or, under LOADLINE_REQUIRE_CORPUS=1, fails) when
// /usr/bin/python3 cannot import onnx and numpy.
func requirePython(t *testing.T) {
	t.Helper()
	out, err := exec.Command(python, "-c", "import onnx, numpy; print(onnx.__version__)").CombinedOutput()
	if err != nil {
		corpus.Missing(t, fmt.Sprintf("%s cannot import onnx (apt-get install python3-onnx): %v: %s", python, err, bytes.TrimSpace(out)))
	}
	t.Logf("oracle: python3-onnx %s", bytes.TrimSpace(out))
}

type pyValueInfo struct {
	Name string `json:"name"`
	Kind string `json:"kind"`
	Elem int32  `json:"elem"`
	Dims *[]any `json:"dims"`
}

type pyTensor struct {
	Path  string   `json:"path"`
	Name  string   `json:"name"`
	DType int32    `json:"dtype"`
	Dims  []int64  `json:"dims"`
	Vals  []string `json:"vals"`
	B64   []string `json:"b64"`
	Skip  string   `json:"skip"`
	Whole string   `json:"sha256"` // every value, hashed (onnx_dump.py whole())
	Error string   `json:"error"`
	Load  string   `json:"load_error"`
}

type pyModel struct {
	Path         string        `json:"path"`
	Load         string        `json:"load_error"`
	IRVersion    int64         `json:"ir_version"`
	Opsets       [][2]any      `json:"opsets"`
	Nodes        int           `json:"nodes"`
	Ops          []string      `json:"ops"`
	Initializers []pyTensor    `json:"initializers"`
	Constants    []pyTensor    `json:"constants"`
	Inputs       []pyValueInfo `json:"inputs"`
	Outputs      []pyValueInfo `json:"outputs"`
	Lines        []string      `json:"lines"` // the canonical text (canonical_test.go)
}

// runDump runs testdata/onnx_dump.py over requests ("model PATH" or
// "tensor PATH") and returns its JSON lines.
func runDump(t *testing.T, requests []string) [][]byte {
	t.Helper()
	cmd := exec.Command(python, filepath.Join("testdata", "onnx_dump.py"))
	cmd.Stdin = strings.NewReader(strings.Join(requests, "\n") + "\n")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("onnx_dump.py: %v\n%s", err, stderr.Bytes())
	}
	var lines [][]byte
	sc := bufio.NewScanner(bytes.NewReader(out))
	sc.Buffer(nil, 64<<20)
	for sc.Scan() {
		lines = append(lines, append([]byte(nil), sc.Bytes()...))
	}
	if len(lines) != len(requests) {
		t.Fatalf("onnx_dump.py answered %d of %d requests", len(lines), len(requests))
	}
	return lines
}

var kindNames = map[model.TypeKind]string{
	model.KindUnknown: "", model.KindTensor: "tensor_type", model.KindSequence: "sequence_type",
	model.KindMap: "map_type", model.KindOptional: "optional_type", model.KindSparseTensor: "sparse_tensor_type",
}

func compareValueInfo(vi *model.ValueInfo, py pyValueInfo) string {
	if vi.Name != py.Name {
		return fmt.Sprintf("name %q, python %q", vi.Name, py.Name)
	}
	if kindNames[vi.Type.Kind] != py.Kind {
		return fmt.Sprintf("%s: kind %s, python %q", vi.Name, vi.Type.Kind, py.Kind)
	}
	if vi.Type.Kind != model.KindTensor && vi.Type.Kind != model.KindSparseTensor {
		return ""
	}
	if int32(vi.Type.DType) != py.Elem {
		return fmt.Sprintf("%s: elem type %d, python %d", vi.Name, vi.Type.DType, py.Elem)
	}
	if (py.Dims != nil) != vi.Type.RankKnown {
		return fmt.Sprintf("%s: rank known %v, python has shape %v", vi.Name, vi.Type.RankKnown, py.Dims != nil)
	}
	if py.Dims == nil {
		return ""
	}
	if len(*py.Dims) != len(vi.Type.Shape) {
		return fmt.Sprintf("%s: shape %v, python %v", vi.Name, vi.Type.Shape, *py.Dims)
	}
	for i, pd := range *py.Dims {
		d := vi.Type.Shape[i]
		switch pd := pd.(type) {
		case nil:
			ok := strings.HasPrefix(d.Symbol, "?")
			if !ok {
				return fmt.Sprintf("%s: dim %d is %v, python has neither value nor param", vi.Name, i, d)
			}
		case string:
			if pd == "" && strings.HasPrefix(d.Symbol, "?") {
				continue
			}
			if d.Symbol != pd {
				return fmt.Sprintf("%s: dim %d is %v, python %q", vi.Name, i, d, pd)
			}
		case json.Number:
			v, _ := pd.Int64()
			if !d.IsKnown() || d.Value != v {
				return fmt.Sprintf("%s: dim %d is %v, python %s", vi.Name, i, d, pd)
			}
		}
	}
	return ""
}

// compareTensor compares name, dtype, dims, a hash of all the values and
// the first values one by one (for a readable message) with what
// numpy_helper.to_array gave. It returns which kind of values it compared.
func compareTensor(tn *model.Tensor, py pyTensor) (string, error) {
	if tn.Name != py.Name || int32(tn.DType) != py.DType || fmt.Sprint(tn.Dims) != fmt.Sprint(py.Dims) {
		return "", fmt.Errorf("tensor %q %s%v, python %q dtype %d %v", tn.Name, tn.DType, tn.Dims, py.Name, py.DType, py.Dims)
	}
	if got := wholeSHA256(tn); got != py.Whole {
		return "", fmt.Errorf("tensor %q (%s, %s): the values hash to %s, python %s", tn.Name, tn.DType, encodingField(tn.Data.Encoding), got, py.Whole)
	}
	switch {
	case py.Skip != "":
		return "", nil
	case py.Error != "":
		return "", fmt.Errorf("tensor %q: numpy_helper.to_array failed: %s", tn.Name, py.Error)
	case py.B64 != nil:
		if len(tn.Data.Segments) < len(py.B64) {
			return "", fmt.Errorf("tensor %q: %d strings, python %d", tn.Name, len(tn.Data.Segments), len(py.B64))
		}
		for i, s := range py.B64 {
			if got := base64.StdEncoding.EncodeToString(tn.Data.Segments[i]); got != s {
				return "", fmt.Errorf("tensor %q: string %d is %q, python %q", tn.Name, i, got, s)
			}
		}
		return "string", nil
	}
	n := int64(len(py.Vals))
	if tn.DType.IsFloat() {
		got, err := tn.Float64s(n)
		if err != nil {
			return "", err
		}
		if int64(len(got)) != n {
			return "", fmt.Errorf("tensor %q: %d values, python %d", tn.Name, len(got), n)
		}
		for i, s := range py.Vals {
			want, err := strconv.ParseFloat(s, 64)
			if err != nil {
				return "", err
			}
			if math.Float64bits(got[i]) != math.Float64bits(want) && !(math.IsNaN(got[i]) && math.IsNaN(want)) {
				return "", fmt.Errorf("tensor %q (%s, %s): value %d is %v, python %s", tn.Name, tn.DType, encodingField(tn.Data.Encoding), i, got[i], s)
			}
		}
		return tn.DType.String() + "/" + encodingField(tn.Data.Encoding), nil
	}
	got, err := tn.Int64s(n)
	if err != nil {
		return "", err
	}
	if int64(len(got)) != n {
		return "", fmt.Errorf("tensor %q: %d values, python %d", tn.Name, len(got), n)
	}
	for i, s := range py.Vals {
		g := strconv.FormatInt(got[i], 10)
		if tn.DType == model.Uint64 {
			g = strconv.FormatUint(uint64(got[i]), 10)
		}
		if g != s {
			return "", fmt.Errorf("tensor %q (%s, %s): value %d is %s, python %s", tn.Name, tn.DType, encodingField(tn.Data.Encoding), i, g, s)
		}
	}
	return tn.DType.String() + "/" + encodingField(tn.Data.Encoding), nil
}

func decodeJSON(line []byte, v any) error {
	dec := json.NewDecoder(bytes.NewReader(line))
	dec.UseNumber()
	return dec.Decode(v)
}

// TestAgainstPythonONNX compares the Go decode of every corpus model (ONNX
// backend test suite, Debian libonnx-testdata) with what ONNX's own Python
// reader (Debian python3-onnx: onnx.load, numpy_helper.to_array) sees: IR
// version and opset imports; then the whole graph in a canonical text
// (canonical_test.go, testdata/onnx_dump.py): every node's name, domain, op
// type, input and output names and attributes, subgraphs included, every
// initializer and Constant tensor's name, dtype, dims and all its values
// (hashed), graph inputs, outputs and value_info with their types, and the
// model-local functions. It then does the same for every tensor .pb file
// (onnx.load_tensor).
func TestAgainstPythonONNX(t *testing.T) {
	paths := corpus.Models(t)
	requirePython(t)
	reqs := make([]string, len(paths))
	for i, p := range paths {
		reqs[i] = "model " + p
	}
	compared := map[string]int{}
	var pbs []string
	for i, line := range runDump(t, reqs) {
		var py pyModel
		if err := decodeJSON(line, &py); err != nil {
			t.Fatalf("%s: %v", paths[i], err)
		}
		if py.Load != "" {
			t.Errorf("%s: onnx.load failed: %s", paths[i], py.Load)
			continue
		}
		m, err := DecodeFile(paths[i], Options{})
		if err != nil {
			t.Errorf("%v", err)
			continue
		}
		if msg := compareModel(m, &py); msg != "" {
			t.Errorf("%s: %s", paths[i], msg)
		}
		if msg := compareLines(canonicalModel(m), py.Lines); msg != "" {
			t.Errorf("%s: the canonical text differs at %s", paths[i], msg)
		}
		compared["canonical lines"] += len(py.Lines)
		for j, ti := range m.Graph.Initializers {
			kind, err := compareTensor(ti, py.Initializers[j])
			if err != nil {
				t.Errorf("%s: initializer %d: %v", paths[i], j, err)
			}
			compared["initializer "+kind]++
		}
		consts := constants(m.Graph)
		if len(consts) != len(py.Constants) {
			t.Errorf("%s: %d Constant tensors, python %d", paths[i], len(consts), len(py.Constants))
		} else {
			for j, c := range consts {
				kind, err := compareTensor(c, py.Constants[j])
				if err != nil {
					t.Errorf("%s: Constant %d: %v", paths[i], j, err)
				}
				compared["Constant "+kind]++
			}
		}
		sets, _ := filepath.Glob(filepath.Join(filepath.Dir(paths[i]), "test_data_set_*", "*.pb"))
		for _, pb := range sets {
			if match := pbName.FindStringSubmatch(filepath.Base(pb)); match != nil {
				k, _ := strconv.Atoi(match[2])
				vis := m.Graph.Inputs
				if match[1] == "output" {
					vis = m.Graph.Outputs
				}
				if k < len(vis) && vis[k].Type.Kind == model.KindTensor {
					pbs = append(pbs, pb)
				}
			}
		}
	}
	t.Logf("%d models compared; tensor values compared by dtype/encoding: %v", len(paths), compared)
	if compared["initializer float32/raw_data"] == 0 || compared["initializer int64/raw_data"] == 0 {
		t.Errorf("expected float32 and int64 initializers among those compared: %v", compared)
	}

	reqs = reqs[:0]
	for _, pb := range pbs {
		reqs = append(reqs, "tensor "+pb)
	}
	compared = map[string]int{}
	for i, line := range runDump(t, reqs) {
		var py pyTensor
		if err := decodeJSON(line, &py); err != nil {
			t.Fatalf("%s: %v", pbs[i], err)
		}
		if py.Load != "" {
			t.Errorf("%s: onnx.load_tensor failed: %s", pbs[i], py.Load)
			continue
		}
		data, err := os.ReadFile(pbs[i])
		if err != nil {
			t.Fatal(err)
		}
		tn, err := DecodeTensor(data)
		if err != nil {
			t.Errorf("%s: %v", pbs[i], err)
			continue
		}
		kind, err := compareTensor(tn, py)
		if err != nil {
			t.Errorf("%s: %v", pbs[i], err)
		}
		compared[kind]++
	}
	t.Logf("%d tensor files compared by dtype/encoding: %v", len(pbs), compared)
	if compared["float16/raw_data"] == 0 {
		t.Errorf("expected float16 tensors among those compared: %v", compared)
	}
}

func compareModel(m *model.Model, py *pyModel) string {
	if m.IRVersion != py.IRVersion {
		return fmt.Sprintf("ir_version %d, python %d", m.IRVersion, py.IRVersion)
	}
	if len(m.Opsets) != len(py.Opsets) {
		return fmt.Sprintf("opsets %v, python %v", m.Opsets, py.Opsets)
	}
	for _, o := range py.Opsets {
		v, _ := o[1].(json.Number).Int64()
		if got, ok := m.Opsets[o[0].(string)]; !ok || got != v {
			return fmt.Sprintf("opsets %v, python %v", m.Opsets, py.Opsets)
		}
	}
	if len(m.Graph.Nodes) != py.Nodes {
		return fmt.Sprintf("%d nodes, python %d", len(m.Graph.Nodes), py.Nodes)
	}
	for i, n := range m.Graph.Nodes {
		if n.Op != py.Ops[i] {
			return fmt.Sprintf("node %d is %s, python %s", i, n.Op, py.Ops[i])
		}
	}
	if len(m.Graph.Initializers) != len(py.Initializers) {
		return fmt.Sprintf("%d initializers, python %d", len(m.Graph.Initializers), len(py.Initializers))
	}
	for _, io := range []struct {
		name string
		vis  []*model.ValueInfo
		py   []pyValueInfo
	}{{"input", m.Graph.Inputs, py.Inputs}, {"output", m.Graph.Outputs, py.Outputs}} {
		if len(io.vis) != len(io.py) {
			return fmt.Sprintf("%d %ss, python %d", len(io.vis), io.name, len(io.py))
		}
		for i := range io.vis {
			if msg := compareValueInfo(io.vis[i], io.py[i]); msg != "" {
				return fmt.Sprintf("%s %d: %s", io.name, i, msg)
			}
		}
	}
	return ""
}

// constants returns the tensor attributes of a graph's Constant nodes.
func constants(g *model.Graph) []*model.Tensor {
	var out []*model.Tensor
	for _, n := range g.Nodes {
		if n.Op != "Constant" {
			continue
		}
		for _, a := range n.Attrs {
			if a.Kind == model.AttrTensor {
				out = append(out, a.Tensor)
			}
		}
	}
	return out
}
