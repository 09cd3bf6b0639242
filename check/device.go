package check

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/target"
)

// checkTargets reads every device's target of a budget file, so that a
// bad one is a budget-file error with its place rather than a figure
// nobody can compute.
func checkTargets(f *budget.File) error {
	if f == nil {
		return nil
	}
	var errs budget.Errors
	names := make([]string, 0, len(f.Devices))
	for n := range f.Devices {
		names = append(names, n)
	}
	sort.Strings(names)
	for _, n := range names {
		d := f.Devices[n]
		if d.Target == nil {
			continue
		}
		if _, err := target.FromYAML(d.Target); err != nil {
			e := &budget.Error{File: f.Name, Line: d.Target.Line, Column: d.Target.Column, Key: "devices." + n + ".target", Msg: err.Error()}
			var fe *target.FieldError
			if errors.As(err, &fe) {
				e.Msg, e.Hint = fe.Msg, fe.Hint
				if fe.Key != "" {
					e.Key += "." + fe.Key
				}
				if fe.Line > 0 {
					e.Line, e.Column = fe.Line, fe.Column
				}
			}
			errs = append(errs, e)
		}
	}
	if len(errs) > 0 {
		return errs
	}
	return nil
}

// DeviceFigures are Figures(m) with the device cost model's figures for
// the device the budget file's first rule matching p names: the estimate
// on its target (measure.Estimate) from the per-layer view. When the
// device names no target, or the estimate leaves nodes out, latency and
// energy are unknown with the reason; so is unsupported without a target.
func DeviceFigures(f *budget.File, p string, m *measure.Metrics) *budget.Figures {
	if f == nil {
		return Figures(m)
	}
	rules := f.Match(p)
	if len(rules) == 0 {
		return Figures(m)
	}
	return figuresOn(f.Devices[rules[0].Device], rules[0].Device, m)
}

// figuresOn is Figures(m) with the estimate on the target of the device
// named name (nil when the budget file does not define it).
func figuresOn(dev *budget.Device, name string, m *measure.Metrics) *budget.Figures {
	fig := Figures(m)
	if fig == nil || m.Error != "" {
		return fig
	}
	unknown := func(why string, metrics ...string) {
		if fig.Unknown == nil {
			fig.Unknown = map[string]string{}
		}
		for _, k := range metrics {
			if _, ok := fig.Unknown[k]; !ok {
				fig.Unknown[k] = why
			}
		}
	}
	if dev == nil || dev.Target == nil {
		unknown(fmt.Sprintf("device %q names no target", name), budget.MetricLatency, budget.MetricEnergy, budget.MetricUnsupported)
		return fig
	}
	t, err := target.FromYAML(dev.Target)
	if err != nil {
		unknown("the device's target: "+err.Error(), budget.MetricLatency, budget.MetricEnergy, budget.MetricUnsupported)
		return fig
	}
	e := measure.Estimate(m, t, dev.Weights)
	tf := &budget.TargetFigures{Name: e.Name, ClockHz: e.ClockHz, LatencyMS: e.LatencyMS, EnergyUJ: e.EnergyUJ, Unsupported: []string{}}
	for _, u := range e.Unsupported {
		tf.Unsupported = append(tf.Unsupported, fmt.Sprintf("%s (%s): %s", u.Node, u.Op, u.Reason))
	}
	for _, l := range e.Slowest(5) {
		tf.Slowest = append(tf.Slowest, budget.Layer{Node: l.Node, Op: l.Op, Value: int64(math.Round(l.LatencyMS * 1e6))})
	}
	fig.Target = tf
	switch {
	case len(m.Unresolved) > 0:
		u := m.Unresolved[0]
		unknown(fmt.Sprintf("%d node(s) unresolved, first %s (%s): %s", len(m.Unresolved), u.Node, u.Op, u.Reason), budget.MetricLatency, budget.MetricEnergy)
	case len(e.Uncosted) > 0:
		u := e.Uncosted[0]
		unknown(fmt.Sprintf("%d node(s) without a cost, first %s (%s): %s", len(e.Uncosted), u.Node, u.Op, u.Reason), budget.MetricLatency, budget.MetricEnergy)
	}
	return fig
}
