package check

import (
	"fmt"
	"sort"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/measure"
)

// Figures converts measured figures into what the budget judges. When
// nodes stayed unresolved, the figures that depend on every node's shape
// (MACs, FLOPs, activation memory and with it ram) are marked unknown, with
// the first unresolved node as the reason: they are reported, never judged
// as if the missing part were zero. file, params and weights never depend
// on inference.
func Figures(m *measure.Metrics) *budget.Figures {
	if m == nil {
		return nil
	}
	f := &budget.Figures{
		FileBytes:           m.FileBytes,
		ExternalBytes:       m.ExternalBytes,
		Params:              m.Params,
		ParamBytes:          m.ParamBytes,
		GeneratedParamBytes: m.GeneratedParamBytes,
		MACs:                m.MACs,
		FLOPs:               m.FLOPs,
		Memory: budget.MemoryFigures{
			Graph:           budget.MemoryView{PeakLiveBytes: m.Memory.Graph.PeakLiveBytes, ArenaBytes: m.Memory.Graph.ArenaBytes},
			Deployed:        budget.MemoryView{PeakLiveBytes: m.Memory.Deployed.PeakLiveBytes, ArenaBytes: m.Memory.Deployed.ArenaBytes},
			PersistentBytes: m.Memory.PersistentBytes,
		},
	}
	if rt := m.Memory.Runtime; rt != nil {
		f.Memory.Runtime = &budget.RuntimeView{PeakLiveBytes: rt.PeakLiveBytes, ArenaBytes: rt.ArenaBytes, ScratchBytes: rt.ScratchBytes}
	}
	for _, c := range m.Constants {
		f.Constants = append(f.Constants, budget.ConstantDigest{Name: c.Name, Bytes: c.Bytes, Digest: c.Digest, Weight: c.Weight})
	}
	if m.Error != "" {
		f.Unknown = map[string]string{}
		for _, k := range budget.Metrics {
			f.Unknown[k] = m.Error
		}
		return f
	}
	if n := len(m.Unresolved); n > 0 {
		u := m.Unresolved[0]
		why := fmt.Sprintf("%d node(s) unresolved, first %s (%s): %s", n, u.Node, u.Op, u.Reason)
		f.Unknown = map[string]string{}
		for _, k := range []string{budget.MetricMACs, budget.MetricFLOPs, budget.MetricArena, budget.MetricRAM} {
			f.Unknown[k] = why
		}
	}
	return f
}

// DetailOf gathers the per-layer data a report's detail section shows; nil
// when the measurement has none.
func DetailOf(m *measure.Metrics) *budget.Detail {
	if m == nil || m.Error != "" || len(m.Layers) == 0 {
		return nil
	}
	d := &budget.Detail{LiveBytes: m.MemoryDetail.LiveBytesByStep, PeakStep: m.MemoryDetail.PeakStep}
	for _, i := range measure.TopLayers(m.Layers, 5, func(l *measure.Layer) int64 { return l.MACs }) {
		if l := &m.Layers[i]; l.MACs > 0 {
			d.TopMACs = append(d.TopMACs, budget.Layer{Node: l.Node, Op: l.Op, Value: l.MACs})
		}
	}
	// The largest activations: the tensors the nodes write, by their own
	// bytes (constants and statically known outputs are not planned, so
	// they have none).
	for _, i := range measure.TopLayers(m.Layers, 5, func(l *measure.Layer) int64 { return l.Bytes }) {
		if l := &m.Layers[i]; l.Bytes > 0 {
			d.TopMemory = append(d.TopMemory, budget.Layer{Node: l.Node, Op: l.Op, Value: l.Bytes})
		}
	}
	names := make([]string, 0, len(m.MemoryDetail.Views))
	for name := range m.MemoryDetail.Views {
		names = append(names, name)
	}
	// The graph view first, then the others by name (deployed, runtime).
	sort.Slice(names, func(i, j int) bool {
		if (names[i] == measure.ViewGraph) != (names[j] == measure.ViewGraph) {
			return names[i] == measure.ViewGraph
		}
		return names[i] < names[j]
	})
	for _, name := range names {
		v := m.MemoryDetail.Views[name]
		dv := budget.DetailView{Name: name, Judged: name == m.MemoryDetail.Judged, LiveBytes: v.LiveBytesByStep,
			PeakStep: v.PeakStep, PeakBytes: v.PeakLiveBytes}
		for _, t := range v.LiveAtPeak {
			dv.AtPeak = append(dv.AtPeak, budget.DetailTensor{Name: t.Name, Bytes: t.Bytes, Offset: t.Offset})
		}
		d.Views = append(d.Views, dv)
	}
	return d
}
