package measure

import (
	"fmt"
	"runtime/debug"
	"strings"
	"sync"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/target"
)

// Metrics are the figures of one model, as loadline's JSON contract
// (loadline.measure/v1) names them. Each figure is defined once, in the file
// that computes it; the README's "Conventions" section repeats the
// definitions.
type Metrics struct {
	Path      string `json:"path"`
	Format    string `json:"format"`
	FileBytes int64  `json:"file_bytes"`
	// ExternalBytes is the size of the weight data the model keeps in
	// external data files (ONNX external_data), which file_bytes leaves out.
	ExternalBytes int64        `json:"external_bytes"`
	Params        int64        `json:"params"`
	ParamBytes    int64        `json:"param_bytes"`
	MACs          int64        `json:"macs"`
	FLOPs         int64        `json:"flops"`
	Sparsity      float64      `json:"sparsity"` // share of weight elements exactly zero (params.go); -1 when no weight has stored values
	Inputs        []IOInfo     `json:"inputs"`
	Outputs       []IOInfo     `json:"outputs"`
	Unresolved    []Unresolved `json:"unresolved"`
	Error         string       `json:"error"`
	// MissingBindings says, one entry per binding, which bindings the
	// unresolved figures wait for (bind.go).
	MissingBindings []MissingBinding `json:"missing_bindings"`
	// BindingIssues are the bindings that did not fit the model, with
	// Options.Lenient (they were ignored).
	BindingIssues []BindingIssue `json:"binding_issues,omitempty"`
	// DecidedIfs lists the If nodes whose condition was known: only the
	// branch taken is inferred, costed and planned.
	DecidedIfs []DecidedIf `json:"decided_ifs,omitempty"`

	// ParamsByDType breaks param_bytes down by dtype.
	ParamsByDType []DTypeBytes `json:"params_by_dtype"`
	// GeneratedParamBytes is the part of param_bytes the file does not
	// store: weights computed from constants at load time (static.go),
	// which a device holds in RAM wherever it keeps its weights.
	GeneratedParamBytes int64 `json:"generated_param_bytes"`
	// Opsets are the operator set versions the model imports.
	Opsets map[string]int64 `json:"opsets,omitempty"`
	// Nodes is the number of nodes of the main graph.
	Nodes int `json:"nodes"`

	// Memory is activation memory, graph and deployed views (memory.go,
	// deployed.go).
	Memory MemoryFigures `json:"memory"`
	// MemoryDetail says where the graph-view peak is.
	MemoryDetail MemoryDetail `json:"memory_detail"`
	// Layers is the per-node view, filled when Options.Layers is set.
	Layers []Layer `json:"layers,omitempty"`
	// Target is the estimate on a device target (measure --target), nil
	// when none was asked for.
	Target *target.Estimate `json:"target,omitempty"`
	// Constants identify the stored constants by content, filled when
	// Options.Digests is set (digests.go).
	Constants []ConstantDigest `json:"constants,omitempty"`
}

// IOInfo is a graph input or output: name, dtype, and shape with symbolic
// dims as strings.
type IOInfo struct {
	Name  string `json:"name"`
	DType string `json:"dtype"`
	Shape []any  `json:"shape"`
}

// ShapeText writes the shape as people read it in messages and reports:
// "[1,3,224,224]", a symbolic dim by its name ("[batch,80]"), "[?]" when
// the shape is unknown.
func (io IOInfo) ShapeText() string {
	if io.Shape == nil {
		return "[?]"
	}
	parts := make([]string, len(io.Shape))
	for i, d := range io.Shape {
		parts[i] = fmt.Sprint(d)
	}
	return "[" + strings.Join(parts, ",") + "]"
}

// Options steers measuring.
type Options struct {
	// Dims binds symbolic dims by name, Shapes whole input shapes and
	// Values small inputs' contents, by input name (bind.go).
	Dims   map[string]int64
	Shapes map[string][]int64
	Values map[string][]float64
	// Lenient ignores the bindings that do not fit the model, listing them
	// in Metrics.BindingIssues, instead of failing.
	Lenient bool
	// Deploy chooses the deployed view's rewrites; nil is
	// DefaultDeployOptions.
	Deploy *DeployOptions
	// Layers fills Metrics.Layers, the per-node view.
	Layers bool
	// Digests fills Metrics.Constants (digests.go), for device totals.
	Digests bool
	// Parallel runs the passes after inference in two goroutines, for a
	// caller with a core to spare (one model measured alone); the
	// figures are the same either way.
	Parallel bool
	// WeightsRead, when set, is called with the stored bytes of the
	// weights as their zeros are counted, in pieces of at most 4 MiB, in
	// the order they lie in memory: the last read of them a measurement
	// makes on its usual path, so that a caller that mapped the model file
	// can give those pages back (check.MeasureFile). Constant digests
	// (Digests) read them again. It is not part of the figures.
	WeightsRead func(stored []byte)
}

// sideBySide runs a and b, at once when parallel is set, and returns when
// both are done.
func sideBySide(parallel bool, a, b func()) {
	if !parallel {
		a()
		b()
		return
	}
	// b's goroutine turns a fault on a memory-mapped model file into a
	// panic, as its caller's does (check.MeasureFile), and hands any
	// panic to the caller's goroutine once both are done.
	var wg sync.WaitGroup
	var caught any
	wg.Go(func() {
		debug.SetPanicOnFault(true)
		defer func() { caught = recover() }()
		b()
	})
	func() {
		defer wg.Wait()
		a()
	}()
	if caught != nil {
		panic(caught)
	}
}

// Measure infers shapes and computes the figures of a decoded model.
// fileBytes is the size of the model file as stored.
func Measure(m *model.Model, fileBytes int64, opts Options) (*Metrics, error) {
	inf, err := Infer(m, InferOptions{Dims: opts.Dims, Shapes: opts.Shapes, Values: opts.Values, Lenient: opts.Lenient})
	if err != nil {
		return nil, err
	}
	out := &Metrics{
		Format:     m.Format,
		FileBytes:  fileBytes,
		Unresolved: inf.Unresolved,
		Opsets:     m.Opsets,
		Nodes:      len(m.Graph.Nodes),
		Inputs:     []IOInfo{},
		Outputs:    []IOInfo{},
	}
	if out.Unresolved == nil {
		out.Unresolved = []Unresolved{}
	}
	// Two halves of independent passes, side by side when opts.Parallel
	// asks: the weights and the graph view; the costs and the deployed
	// view. Each pass's result is let go once its figures are taken: on a
	// large graph the plans are megabytes, and memory not held is time
	// saved. The main graph's index comes first, as both halves read it.
	inf.index(m.Graph, inf.Values)
	deploy := DefaultDeployOptions()
	if opts.Deploy != nil {
		deploy = *opts.Deploy
	}
	var (
		ws          []ParamTensor
		wsErr       error
		graph       *MemoryPlan // kept only for the per-layer view
		graphDetail ViewDetail
		costs       *Costs
		dep         *MemoryPlan
	)
	weightsAndGraph := func() {
		ws, wsErr = weights(inf, opts.WeightsRead)
		addParams(out, ws)
		if !opts.Digests {
			// The figures are taken: the list of weights (megabytes on
			// a large graph) need not be held while the graph is planned.
			ws = nil
		}
		plan := planGraph(inf, m.Graph, inf.Values, 0, opts.Layers)
		out.Memory.Graph = MemoryView{PeakLiveBytes: plan.PeakLiveBytes, ArenaBytes: plan.ArenaBytes}
		out.MemoryDetail = MemoryDetail{PeakStep: plan.PeakStep, LiveAtPeak: plan.LiveAtPeak, ArenaRatio: plan.Ratio()}
		graphDetail = viewDetail(plan, opts.Layers)
		if opts.Layers {
			graph = plan
		} else {
			graph = &MemoryPlan{Unresolved: plan.Unresolved}
		}
	}
	costsAndDeployed := func() {
		costs = countCosts(inf, opts.Layers)
		dep = planDeployed(inf, deploy, opts.Layers)
	}
	sideBySide(opts.Parallel, weightsAndGraph, costsAndDeployed)
	if wsErr != nil {
		return nil, wsErr
	}
	out.ExternalBytes = externalBytes(m.Graph, 0)
	out.MACs, out.FLOPs = costs.MACs, costs.FLOPs
	out.Unresolved = appendUnresolved(out.Unresolved, costs.Unresolved)
	if opts.Layers {
		out.Layers = layersOf(inf, costs, graph)
		out.MemoryDetail.LiveBytesByStep = graph.LiveBytesByStep
		addLayerView(out.Layers, m.Graph, ViewGraph, graph)
	}
	out.Memory.Deployed = MemoryView{PeakLiveBytes: dep.PeakLiveBytes, ArenaBytes: dep.ArenaBytes}
	out.Unresolved = appendUnresolved(out.Unresolved, graph.Unresolved)
	out.Unresolved = appendUnresolved(out.Unresolved, dep.Unresolved)
	if rt, persistent, unres, ok := planRuntime(inf); ok {
		out.Memory.Runtime = &rt
		out.Memory.PersistentBytes = persistent
		out.Unresolved = appendUnresolved(out.Unresolved, unres)
	}
	out.MemoryDetail.DeployedRatio = dep.Ratio()
	if out.MemoryDetail.LiveAtPeak == nil {
		out.MemoryDetail.LiveAtPeak = []string{}
	}
	out.MemoryDetail.Judged = ViewDeployed
	out.MemoryDetail.Views = map[string]ViewDetail{
		ViewGraph:    graphDetail,
		ViewDeployed: viewDetail(dep, opts.Layers),
	}
	if opts.Digests {
		if out.Constants, err = ConstantDigests(m, ws); err != nil {
			return nil, err
		}
	}
	if opts.Layers {
		addLayerView(out.Layers, m.Graph, ViewDeployed, dep)
	}
	for _, in := range inf.Inputs {
		out.Inputs = append(out.Inputs, ioInfo(in))
	}
	out.BindingIssues, out.DecidedIfs = inf.BindingIssues, inf.Decided
	out.MissingBindings = missingBindings(inf, out.Unresolved)
	for _, o := range inf.Outputs {
		out.Outputs = append(out.Outputs, ioInfo(o))
	}
	return out, nil
}

// addParams sets the parameter figures of out from the weights ws.
func addParams(out *Metrics, ws []ParamTensor) {
	for _, w := range ws {
		out.Params += w.Elements
		out.ParamBytes += w.Bytes
		if w.Generated {
			out.GeneratedParamBytes += w.Bytes
		}
	}
	out.ParamsByDType = ParamsByDType(ws)
	out.Sparsity = sparsity(ws)
}

func ioInfo(nv NamedValue) IOInfo {
	io := IOInfo{Name: nv.Name, DType: nv.Value.Type.DType.String()}
	if nv.Value.Type.Kind == model.KindSequence {
		io.DType = "sequence<" + nv.Value.Type.DType.String() + ">"
	}
	if nv.Value.Type.RankKnown {
		io.Shape = make([]any, len(nv.Value.Type.Shape))
		for i, d := range nv.Value.Type.Shape {
			if d.IsKnown() {
				io.Shape[i] = d.Value
			} else {
				io.Shape[i] = d.Symbol
			}
		}
	}
	return io
}

// sparsity is zeros / elements over the weights whose zeros were counted,
// -1 when there are none.
func sparsity(ws []ParamTensor) float64 {
	var zeros, elems int64
	for _, w := range ws {
		if w.Zeros >= 0 {
			zeros += w.Zeros
			elems += w.Elements
		}
	}
	if elems == 0 {
		return -1
	}
	return float64(zeros) / float64(elems)
}

// appendUnresolved adds the cost entries of nodes that shape inference has
// not already listed: its reason (an unknown shape) is the cause, and
// the figures downstream of it are known to be incomplete.
func appendUnresolved(list, more []Unresolved) []Unresolved {
	seen := make(map[string]bool, len(list))
	for _, u := range list {
		seen[u.Node] = true
	}
	for _, u := range more {
		if !seen[u.Node] {
			list = append(list, u)
		}
	}
	return list
}

// externalBytes sums the stored size of the initializers a graph and its
// subgraphs keep in external data files.
func externalBytes(g *model.Graph, depth int) int64 {
	if g == nil || depth > maxGraphDepth {
		return 0
	}
	var n int64
	for _, t := range g.Initializers {
		if t.Data.Encoding == model.EncodingExternal {
			if b := t.StorageBytes(); b > 0 {
				n += b
			}
		}
	}
	for _, node := range g.Nodes {
		for _, a := range node.Attrs {
			n += externalBytes(a.Graph, depth+1)
			for _, sg := range a.Graphs {
				n += externalBytes(sg, depth+1)
			}
		}
	}
	return n
}
