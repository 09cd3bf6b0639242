package target

import (
	"bufio"
	"embed"
	"fmt"
	"sort"
	"strings"
)

// The operator-support tables, one file per runtime, each naming where its
// rows come from.
//
//go:embed runtimes/*.txt
var runtimeFiles embed.FS

// Runtime is one runtime's operator-support table: the operators its
// kernels implement, with the dtypes of each ("*" when not checked).
type Runtime struct {
	Name   string
	Format string // the model format it runs: "tflite" or "onnx"
	Title  string
	Source string // the file the table was read from
	ops    map[string][]string
}

// Runtimes are the known runtimes by name.
var Runtimes = mustLoadRuntimes()

func mustLoadRuntimes() map[string]*Runtime {
	out := map[string]*Runtime{}
	entries, err := runtimeFiles.ReadDir("runtimes")
	if err != nil {
		panic(err)
	}
	for _, e := range entries {
		data, err := runtimeFiles.ReadFile("runtimes/" + e.Name())
		if err != nil {
			panic(err)
		}
		r, err := parseRuntime("target/runtimes/"+e.Name(), string(data))
		if err != nil {
			panic(err) // the tables are part of the program; their test reads them
		}
		out[r.Name] = r
	}
	return out
}

// parseRuntime reads a table: "# runtime:", "# format:" and "# title:"
// header lines, other comments, then one operator a line followed by its
// dtypes. A custom operator is written custom:CODE.
func parseRuntime(file, text string) (*Runtime, error) {
	r := &Runtime{Source: file, ops: map[string][]string{}}
	sc := bufio.NewScanner(strings.NewReader(text))
	line := 0
	for sc.Scan() {
		line++
		s := strings.TrimSpace(sc.Text())
		if s == "" {
			continue
		}
		if strings.HasPrefix(s, "#") {
			k, v, ok := strings.Cut(strings.TrimSpace(strings.TrimPrefix(s, "#")), ":")
			if ok {
				switch strings.TrimSpace(k) {
				case "runtime":
					r.Name = strings.TrimSpace(v)
				case "format":
					r.Format = strings.TrimSpace(v)
				case "title":
					r.Title = strings.TrimSpace(v)
				}
			}
			continue
		}
		f := strings.Fields(s)
		if len(f) < 2 {
			return nil, fmt.Errorf("%s:%d: want an operator and its dtypes", file, line)
		}
		if _, dup := r.ops[f[0]]; dup {
			return nil, fmt.Errorf("%s:%d: %s listed twice", file, line, f[0])
		}
		r.ops[f[0]] = f[1:]
	}
	if r.Name == "" || r.Format == "" {
		return nil, fmt.Errorf("%s: missing # runtime: or # format: header", file)
	}
	return r, nil
}

// Ops returns the table's operators, sorted.
func (r *Runtime) Ops() []string {
	out := make([]string, 0, len(r.ops))
	for k := range r.ops {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

// Unsupported is an operator the target's runtime has no kernel for.
type Unsupported struct {
	Step   int    `json:"step"`
	Node   string `json:"node"`
	Op     string `json:"op"`
	DType  string `json:"dtype,omitempty"`
	Reason string `json:"reason"`
}

// Check lists the nodes whose operator, or whose operator at its dtype,
// the runtime does not implement. A node of another format's domain (an
// ONNX operator for a TFLite runtime) is unsupported like any other.
func (r *Runtime) Check(nodes []Node) []Unsupported {
	out := []Unsupported{}
	for _, n := range nodes {
		key, label := r.key(n)
		dtypes, ok := r.ops[key]
		if !ok {
			out = append(out, Unsupported{Step: n.Step, Node: n.Name, Op: n.Op, DType: n.DType,
				Reason: fmt.Sprintf("%s has no kernel for %s", r.Name, label)})
			continue
		}
		if n.DType == "" || contains(dtypes, "*") || contains(dtypes, n.DType) {
			continue
		}
		out = append(out, Unsupported{Step: n.Step, Node: n.Name, Op: n.Op, DType: n.DType,
			Reason: fmt.Sprintf("%s implements %s for %s only, not %s", r.Name, label, strings.Join(dtypes, ", "), n.DType)})
	}
	return out
}

// key is the table row a node needs, and how to name it to a reader.
func (r *Runtime) key(n Node) (key, label string) {
	switch {
	case r.Format == "tflite" && n.Domain == "tflite":
		return n.Op, n.Op
	case r.Format == "tflite" && n.Domain == "tflite.custom":
		return "custom:" + n.Op, "custom operator " + n.Op
	case r.Format == "onnx" && (n.Domain == "" || n.Domain == "ai.onnx"):
		return n.Op, n.Op
	}
	return "\x00", opLabel(n)
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// Support checks a model's nodes against the target's runtime and records
// the result in e. A model in another format than the runtime reads is not
// checked: SupportNote says so.
func (t *Target) Support(e *Estimate, format string, nodes []Node) {
	r := Runtimes[t.Runtime]
	switch {
	case r == nil:
		e.SupportNote = fmt.Sprintf("runtime %q has no operator table; support not checked", t.Runtime)
	case format != "" && format != r.Format:
		e.SupportNote = fmt.Sprintf("runtime %s runs %s models and this is %s; support not checked", r.Name, r.Format, format)
	default:
		e.Unsupported = r.Check(nodes)
	}
}

func sortStrings(s []string) { sort.Strings(s) }
