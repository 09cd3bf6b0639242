// Package report renders what loadline measured and judged: text tables for
// terminals, JSON for machines. It only renders what it is given.
package report

import (
	"fmt"
	"io"
	"math"
	"strings"
	"text/tabwriter"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/target"
)

// MeasureSchema names the JSON contract of `loadline measure --json`.
const MeasureSchema = "loadline.measure/v1"

// MeasureJSON writes the loadline.measure/v1 document for the entries.
func MeasureJSON(w io.Writer, entries []*measure.Metrics) error {
	doc := struct {
		Schema string             `json:"schema"`
		Models []*measure.Metrics `json:"models"`
	}{MeasureSchema, entries}
	if doc.Models == nil {
		doc.Models = []*measure.Metrics{}
	}
	return writeJSON(w, doc, true)
}

// MeasureText writes one block per model: its figures in units people read,
// its inputs and outputs, and the nodes whose shapes stayed unknown.
func MeasureText(w io.Writer, entries []*measure.Metrics) error {
	entries = display.Copy(entries) // paths and names from outside, escaped
	for i, m := range entries {
		if i > 0 {
			fmt.Fprintln(w)
		}
		if m.Error != "" {
			fmt.Fprintf(w, "%s\n  error: %s\n", m.Path, m.Error)
			continue
		}
		if m.Format == "tflite" {
			fmt.Fprintf(w, "%s  (%s, %d operators)\n", m.Path, m.Format, m.Nodes)
		} else {
			fmt.Fprintf(w, "%s  (%s, %d nodes, opset %s)\n", m.Path, m.Format, m.Nodes, opsetText(m.Opsets))
		}
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
		fmt.Fprintf(tw, "  file\t%s\n", Bytes(m.FileBytes))
		fmt.Fprintf(tw, "  params\t%s\t(%s)\n", Count(m.Params), dtypeText(m))
		if m.GeneratedParamBytes > 0 {
			fmt.Fprintf(tw, "  param bytes\t%s\t(%s of them computed at load time, not stored in the file: in RAM wherever weights live)\n", Bytes(m.ParamBytes), Bytes(m.GeneratedParamBytes))
		} else {
			fmt.Fprintf(tw, "  param bytes\t%s\n", Bytes(m.ParamBytes))
		}
		// With nodes unresolved the counts leave those nodes out: lower bounds.
		atLeast := ""
		if len(m.Unresolved) > 0 {
			atLeast = "≥ "
		}
		fmt.Fprintf(tw, "  MACs\t%s%s\t(FLOPs %s%s = 2×MACs + per-element, pooling, normalisation and reduction ops)\n", atLeast, Count(m.MACs), atLeast, Count(m.FLOPs))
		g, d := m.Memory.Graph, m.Memory.Deployed
		fmt.Fprintf(tw, "  activations, graph\t%s%s\tpeak live %s%s, arena/peak %.2f\n", atLeast, Bytes(g.ArenaBytes), atLeast, Bytes(g.PeakLiveBytes), m.MemoryDetail.ArenaRatio)
		fmt.Fprintf(tw, "  activations, deployed\t%s%s\tpeak live %s%s, arena/peak %.2f\n", atLeast, Bytes(d.ArenaBytes), atLeast, Bytes(d.PeakLiveBytes), m.MemoryDetail.DeployedRatio)
		if rt := m.Memory.Runtime; rt != nil {
			fmt.Fprintf(tw, "  activations, runtime\t%s%s\tpeak live %s%s, kernel scratch %s (as the microcontroller runtime plans it)\n", atLeast, Bytes(rt.ArenaBytes), atLeast, Bytes(rt.PeakLiveBytes), Bytes(rt.ScratchBytes))
			fmt.Fprintf(tw, "  persistent\t%s\t(variable tensors, kept between invocations)\n", Bytes(m.Memory.PersistentBytes))
		}
		if m.Sparsity >= 0 {
			fmt.Fprintf(tw, "  weight sparsity\t%.1f %%\t(exact zeros)\n", 100*m.Sparsity)
		}
		tw.Flush()
		for _, io := range m.Inputs {
			fmt.Fprintf(w, "  input   %s %s%s\n", io.Name, io.DType, io.ShapeText())
		}
		for _, io := range m.Outputs {
			fmt.Fprintf(w, "  output  %s %s%s\n", io.Name, io.DType, io.ShapeText())
		}
		if len(m.Unresolved) > 0 || len(m.MissingBindings) > 0 {
			unresolvedText(w, m)
		}
		if m.Target != nil {
			targetText(w, m.Target, len(m.Layers) > 0)
		}
		if len(m.Layers) > 0 {
			layersText(w, m)
		}
	}
	return nil
}

// unresolvedText says what the figures marked ≥ wait for: one line per
// missing binding (input, axis, what it blocks, the flag that gives it),
// the count of unresolved nodes, and those no missing binding explains
// (at most 10; --json keeps the full list).
func unresolvedText(w io.Writer, m *measure.Metrics) {
	n := len(m.Unresolved)
	if len(m.MissingBindings) > 0 {
		fmt.Fprintln(w, "  needs bindings:")
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
		for _, b := range m.MissingBindings {
			where := fmt.Sprintf("input %s, axis %d", b.Input, b.Axis)
			if b.Axis < 0 {
				where = fmt.Sprintf("input %s, its value", b.Input)
			}
			fmt.Fprintf(tw, "    %s\t%s\t%s\tbind with %s\n", b.Name, where, b.Blocks, b.Bind)
		}
		tw.Flush()
	}
	if n == 0 {
		return
	}
	explained := map[string]bool{}
	for _, u := range m.Unresolved {
		for _, b := range m.MissingBindings {
			if measure.Waits(u, b) {
				explained[u.Node+"\x00"+u.Reason] = true
			}
		}
	}
	var rest []measure.Unresolved
	for _, u := range m.Unresolved {
		if !explained[u.Node+"\x00"+u.Reason] {
			rest = append(rest, u)
		}
	}
	fmt.Fprintf(w, "  unresolved: %d node(s); figures marked ≥ leave them out", n)
	if len(rest) < n {
		fmt.Fprintf(w, " (%d wait for the bindings above; --json lists every one)", n-len(rest))
	}
	fmt.Fprintln(w)
	for j, u := range rest {
		if j == 10 {
			fmt.Fprintf(w, "    … and %d more (see --json)\n", len(rest)-10)
			break
		}
		fmt.Fprintf(w, "    %s (%s): %s\n", u.Node, u.Op, u.Reason)
	}
}

// Millis prints an estimated latency in milliseconds in its unit ("181.9
// ms", "850.0 µs"), as budget's latency figures print.
func Millis(ms float64) string {
	return Figure(budget.MetricLatency, int64(math.Round(ms*1e6)))
}

// Microjoules prints an estimated energy ("7.37 mJ", "412.0 µJ"), as
// budget's energy figures print.
func Microjoules(uj float64) string {
	return Figure(budget.MetricEnergy, int64(math.Round(uj*1e3)))
}

// targetText writes the estimate on a device target: latency, energy,
// where the time goes, and the operators the runtime lacks; with every
// layer, the per-layer estimates too.
func targetText(w io.Writer, e *target.Estimate, every bool) {
	lower := ""
	if len(e.Uncosted) > 0 {
		lower = "≥ "
	}
	fmt.Fprintf(w, "  target %s at %s, runtime %s (estimates from a calibrated model; measure on the device before release)\n",
		e.Name, target.FormatHz(e.ClockHz), e.Runtime)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "  latency\t%s%s\t(%s cycles)\n", lower, Millis(e.LatencyMS), Count(int64(math.Round(e.Cycles))))
	fmt.Fprintf(tw, "  energy\t%s%s\t(%.4g mW × latency)\n", lower, Microjoules(e.EnergyUJ), e.PowerMW)
	tw.Flush()
	if slow := e.Slowest(5); len(slow) > 0 && e.Cycles > 0 {
		fmt.Fprintln(w, "  where the time goes")
		for _, l := range slow {
			fmt.Fprintf(w, "    %-10s %5.1f %%  %s (%s, %s, step %d, %s-bound)\n", Millis(l.LatencyMS), 100*l.Cycles/e.Cycles, l.Node, l.Op, l.Class, l.Step, l.Bound)
		}
	}
	if every && len(e.Layers) > 0 {
		fmt.Fprintf(w, "  layers on %s (cycles = max(compute, memory))\n", e.Name)
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
		fmt.Fprintln(tw, "  step\tnode\top\tclass\tcompute\tmemory\tbound\tlatency\tenergy\t")
		for _, l := range e.Layers {
			fmt.Fprintf(tw, "  %d\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", l.Step, l.Node, l.Op, l.Class,
				Count(int64(math.Round(l.ComputeCycles))), Count(int64(math.Round(l.MemoryCycles))), l.Bound, Millis(l.LatencyMS), Microjoules(l.EnergyUJ))
		}
		tw.Flush()
	}
	if len(e.Uncosted) > 0 {
		fmt.Fprintf(w, "  uncosted: %d node(s) left out of latency and energy\n", len(e.Uncosted))
		for j, u := range e.Uncosted {
			if j == 10 {
				fmt.Fprintf(w, "    … and %d more (see --json)\n", len(e.Uncosted)-10)
				break
			}
			fmt.Fprintf(w, "    %s (%s): %s\n", u.Node, u.Op, u.Reason)
		}
	}
	switch {
	case e.SupportNote != "":
		fmt.Fprintf(w, "  operator support: %s\n", e.SupportNote)
	case len(e.Unsupported) == 0:
		fmt.Fprintf(w, "  operator support: every operator has a kernel in %s\n", e.Runtime)
	default:
		fmt.Fprintf(w, "  unsupported: %d operator(s) %s lacks\n", len(e.Unsupported), e.Runtime)
		for _, u := range e.Unsupported {
			fmt.Fprintf(w, "    %s (%s): %s\n", u.Node, u.Op, u.Reason)
		}
	}
}

// layersText writes the per-node table with the graph view and the
// deployed view (the one ram is judged on) side by side, the top
// contributors to MACs and to each view's live memory, and what is live at
// each view's peak with its arena offset.
func layersText(w io.Writer, m *measure.Metrics) {
	fmt.Fprintln(w, "\n  layers (schedule = file order; live = bytes live at the step; offset = arena offset of the node's output; deployed = the view ram is judged on)")
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "  step\tnode\top\toutput\tMACs\tbytes\tlive graph\toffset graph\tlive deployed\toffset deployed\t")
	off := func(o int64) string {
		if o < 0 {
			return "-"
		}
		return fmt.Sprint(o)
	}
	for _, l := range m.Layers {
		d, ok := l.Views[measure.ViewDeployed]
		dl, do := "-", "-"
		if ok {
			dl, do = Bytes(d.LiveBytes), off(d.Offset)
		}
		fmt.Fprintf(tw, "  %d\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", l.Step, l.Node, l.Op, l.Shape, Count(l.MACs), Bytes(l.Bytes), Bytes(l.LiveBytes), off(l.Offset), dl, do)
	}
	tw.Flush()
	top := func(title string, key func(*measure.Layer) int64, unit func(int64) string) {
		fmt.Fprintf(w, "\n  top %s\n", title)
		for _, i := range measure.TopLayers(m.Layers, 5, key) {
			l := &m.Layers[i]
			if key(l) == 0 {
				break
			}
			fmt.Fprintf(w, "    %-10s %s (%s, step %d)\n", unit(key(l)), l.Node, l.Op, l.Step)
		}
	}
	top("MACs", func(l *measure.Layer) int64 { return l.MACs }, Count)
	top("activations (each node's output, own bytes)", func(l *measure.Layer) int64 { return l.Bytes }, Bytes)
	top("live memory (graph view)", func(l *measure.Layer) int64 { return l.LiveBytes }, Bytes)
	top("live memory (deployed view)", func(l *measure.Layer) int64 { return l.Views[measure.ViewDeployed].LiveBytes }, Bytes)
	for _, name := range []string{measure.ViewGraph, measure.ViewDeployed, "runtime"} {
		v, ok := m.MemoryDetail.Views[name]
		if !ok {
			continue
		}
		judged := ""
		if name == m.MemoryDetail.Judged {
			judged = ", judged"
		}
		fmt.Fprintf(w, "\n  %s-view peak %s at step %d%s; live there:\n", name, Bytes(v.PeakLiveBytes), v.PeakStep, judged)
		for _, t := range v.LiveAtPeak {
			fmt.Fprintf(w, "    %-10s at %-10s %s\n", Bytes(t.Bytes), off(t.Offset), t.Name)
		}
	}
}

func opsetText(o map[string]int64) string {
	if v, ok := o[""]; ok {
		return fmt.Sprint(v)
	}
	if v, ok := o["ai.onnx"]; ok {
		return fmt.Sprint(v)
	}
	return "?"
}

func dtypeText(m *measure.Metrics) string {
	if len(m.ParamsByDType) == 0 {
		return "none"
	}
	parts := make([]string, len(m.ParamsByDType))
	for i, d := range m.ParamsByDType {
		parts[i] = fmt.Sprintf("%s %s", d.DType, Bytes(d.Bytes))
	}
	return strings.Join(parts, ", ")
}
