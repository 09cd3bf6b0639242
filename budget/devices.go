package budget

import (
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/bmatcuk/doublestar/v4"
	"go.yaml.in/yaml/v3"
)

// A device can say what its firmware runs together: the models (paths or
// globs), how often each runs, and whether they run one at a time (one
// arena reused in turn) or concurrently (preemptive tasks, an arena each).
// The device is then judged as a whole on its totals (totals.go).

// How a device runs its models.
const (
	RunsOneAtATime = "one-at-a-time"
	RunsConcurrent = "concurrent"
)

var runModes = []string{RunsOneAtATime, RunsConcurrent}

// DeviceModel is one entry of a device's models: a path or glob from the
// repository root, and the period it runs at (zero when not given).
type DeviceModel struct {
	Path         string
	Every        time.Duration
	Line, Column int
}

// MetricLoad is the device total of core time: the share of the core the
// device's models need, Σ latency × rate (totals.go).
const MetricLoad = "load"

// deviceTotalMetrics are the totals a device's limits can name.
var deviceTotalMetrics = []string{MetricRAM, MetricFlash, MetricLoad}

// RunsModel reports the device's entry whose glob matches the path, if any.
func (d *Device) RunsModel(p string) (*DeviceModel, bool) {
	if d == nil {
		return nil, false
	}
	for i := range d.Models {
		if matchPath(d.Models[i].Path, p) {
			return &d.Models[i], true
		}
	}
	return nil, false
}

// deviceSet decodes the keys of a device that say what runs on it: runs,
// models, shared_weights and limits (on the device's totals). It reports
// whether the key was one of them.
func (d *decoder) deviceSet(dev *Device, fe entry, fkey string) bool {
	switch fe.name {
	case "runs":
		v, ok := d.scalar(fe.v, fkey)
		if !ok {
			return true
		}
		if !contains(runModes, v) {
			hint := didYouMean(v, runModes)
			if hint == "" {
				hint = "write one-at-a-time (one arena reused in turn) or concurrent (an arena each)"
			}
			d.add(fe.v, fkey, fmt.Sprintf("%q: a device runs its models one-at-a-time or concurrent", v), hint)
			return true
		}
		dev.Runs = v
	case "shared_weights":
		n := d.visit(fe.v)
		if n == nil {
			return true
		}
		b, err := strconv.ParseBool(n.Value)
		if n.Kind != yaml.ScalarNode || err != nil {
			d.add(fe.v, fkey, fmt.Sprintf("%q: shared_weights is true or false", n.Value), "true when the firmware links identical weights once")
			return true
		}
		dev.SharedWeights = b
	case "models":
		items, ok := d.sequence(fe.v, fkey)
		if !ok {
			return true
		}
		for i, it := range items {
			if m, ok := d.deviceModel(it, fmt.Sprintf("%s[%d]", fkey, i)); ok {
				dev.Models = append(dev.Models, m)
			}
		}
	case "limits":
		entries, ok := d.mapping(fe.v, fkey)
		if !ok {
			return true
		}
		for _, le := range entries {
			lkey := sub(fkey, le.name)
			if !contains(deviceTotalMetrics, le.name) {
				hint := didYouMean(le.name, deviceTotalMetrics)
				if hint == "" {
					hint = "a device's limits are on its totals: ram, flash or load"
				}
				d.add(le.k, lkey, fmt.Sprintf("unknown device total %q", le.name), hint)
				continue
			}
			q, ok := d.quantity(le.v, lkey)
			if !ok {
				continue
			}
			switch {
			case le.name == MetricLoad && q.Kind != Percent:
				d.add(le.v, lkey, fmt.Sprintf("%q: load is a share of the core's time", q.Text), "write e.g. 70%")
				continue
			case le.name != MetricLoad && q.Kind == Count:
				d.add(le.v, lkey, fmt.Sprintf("%q is a count; %s is in bytes", q.Text, le.name), countAsBytesHint(q.Text))
				continue
			}
			// A % of a capacity the device does not give is refused once
			// the whole device is read (checkDeviceSet): the capacity may
			// come after the limits.
			if dev.Limits == nil {
				dev.Limits = map[string]Setting{}
			}
			dev.Limits[le.name] = Setting{Quantity: q, Line: le.v.Line, Column: le.v.Column}
		}
	default:
		return false
	}
	return true
}

// checkDeviceSet validates what needs the whole device read: a % limit on
// a total needs the capacity it is a share of.
func (d *decoder) checkDeviceSet(dev *Device, n *yaml.Node, key string) {
	for _, metric := range []string{MetricRAM, MetricFlash} {
		if s, ok := dev.Limits[metric]; ok && s.Quantity.Kind == Percent && dev.capacityQuantity(metric) == nil {
			d.errs = append(d.errs, &Error{File: d.name, Line: s.Line, Column: s.Column, Key: sub(key, "limits."+metric),
				Msg: fmt.Sprintf("%q is a share of the device's %s, and %s gives none", s.Quantity.Text, metric, dev.Name), Hint: "give the device's " + metric + " capacity, or an absolute limit"})
		}
	}
}

func (dev *Device) capacityQuantity(metric string) *Quantity {
	switch metric {
	case MetricRAM:
		return dev.RAM
	case MetricFlash:
		return dev.Flash
	}
	return nil
}

// deviceModel decodes one entry of a device's models: a path, or a mapping
// with path and every (a period: 20ms, 1s) or rate (50Hz).
func (d *decoder) deviceModel(n *yaml.Node, key string) (DeviceModel, bool) {
	v := d.visit(n)
	if v == nil {
		return DeviceModel{}, false
	}
	if v.Kind == yaml.ScalarNode {
		p, ok := d.scalar(n, key)
		if !ok || !d.globOK(n, key, p) {
			return DeviceModel{}, false
		}
		return DeviceModel{Path: p, Line: v.Line, Column: v.Column}, true
	}
	entries, ok := d.mapping(n, key)
	if !ok {
		return DeviceModel{}, false
	}
	m := DeviceModel{Line: v.Line, Column: v.Column}
	var periodSet bool
	for _, e := range entries {
		ekey := sub(key, e.name)
		switch e.name {
		case "path":
			p, ok := d.scalar(e.v, ekey)
			if !ok || !d.globOK(e.v, ekey, p) {
				return DeviceModel{}, false
			}
			m.Path = p
		case "every", "rate":
			if periodSet {
				d.add(e.k, ekey, "give every or rate, not both", "")
				continue
			}
			periodSet = true
			s, ok := d.scalar(e.v, ekey)
			if !ok {
				continue
			}
			per, err := parsePeriod(e.name, s)
			if err != nil {
				d.add(e.v, ekey, err.Error(), periodHint(e.name))
				continue
			}
			m.Every = per
		default:
			d.unknownKey(e, key, []string{"path", "every", "rate"})
		}
	}
	if m.Path == "" {
		d.add(n, key, "a device's model entry needs a path", "write {path: models/kws/*.tflite, every: 20ms}")
		return DeviceModel{}, false
	}
	return m, true
}

// globOK reports whether a device entry's path is a usable glob.
func (d *decoder) globOK(n *yaml.Node, key, p string) bool {
	if strings.TrimSpace(p) == "" {
		d.add(n, key, "empty path", "")
		return false
	}
	if !doublestar.ValidatePattern(p) {
		d.add(n, key, fmt.Sprintf("%q is not a valid glob", p), "")
		return false
	}
	return true
}

func periodHint(key string) string {
	if key == "rate" {
		return "write a rate in hertz, e.g. 50Hz"
	}
	return "write a period with its unit, e.g. 20ms, 500ms or 2s"
}

// parsePeriod reads every (a duration: 20ms, 1.5s, 250us) or rate (50Hz,
// 0.5Hz) as the period between two runs. Zero and negative periods are
// refused: a model that runs without pause has no period.
func parsePeriod(key, s string) (time.Duration, error) {
	s = strings.TrimSpace(s)
	if key == "rate" {
		num, ok := strings.CutSuffix(s, "Hz")
		if !ok {
			return 0, fmt.Errorf("%q: a rate is in hertz", s)
		}
		hz, err := strconv.ParseFloat(strings.TrimSpace(num), 64)
		if err != nil || hz <= 0 || hz > 1e9 {
			return 0, fmt.Errorf("%q: a rate must be a number of hertz above 0", s)
		}
		return time.Duration(float64(time.Second) / hz), nil
	}
	per, err := time.ParseDuration(strings.ReplaceAll(s, " ", ""))
	if err != nil {
		return 0, fmt.Errorf("%q: not a period", s)
	}
	if per <= 0 {
		return 0, fmt.Errorf("%q: a period must be more than 0", s)
	}
	return per, nil
}

// diffDeviceSet lists the changes to what a device runs together. Loosened
// when the head lets the totals take more: models running one at a time
// instead of concurrently (one arena instead of a sum), identical weights
// now counted once, a model left out of the set, a period made longer, a
// limit on a total raised or removed.
func diffDeviceSet(key string, bd, hd *Device) []BudgetChange {
	var out []BudgetChange
	if bd.Runs != hd.Runs {
		out = append(out, BudgetChange{Key: key + ".runs", Old: bd.Runs, New: hd.Runs, Loosened: hd.Runs == RunsOneAtATime})
	}
	if bd.SharedWeights != hd.SharedWeights {
		out = append(out, BudgetChange{Key: key + ".shared_weights", Old: strconv.FormatBool(bd.SharedWeights),
			New: strconv.FormatBool(hd.SharedWeights), Loosened: hd.SharedWeights})
	}
	entry := func(m DeviceModel) string {
		if m.Every > 0 {
			return m.Path + " every " + m.Every.String()
		}
		return m.Path
	}
	byPath := func(ms []DeviceModel) map[string]DeviceModel {
		out := map[string]DeviceModel{}
		for _, m := range ms {
			out[m.Path] = m
		}
		return out
	}
	bm, hm := byPath(bd.Models), byPath(hd.Models)
	for _, m := range bd.Models {
		h, ok := hm[m.Path]
		switch {
		case !ok:
			out = append(out, BudgetChange{Key: key + ".models", Path: m.Path, Old: entry(m), Loosened: true})
		case h.Every != m.Every:
			// A longer period (or none) lowers the load.
			out = append(out, BudgetChange{Key: key + ".models", Path: m.Path, Old: entry(m), New: entry(h),
				Loosened: h.Every == 0 || h.Every > m.Every})
		}
	}
	for _, m := range hd.Models {
		if _, ok := bm[m.Path]; !ok {
			out = append(out, BudgetChange{Key: key + ".models", Path: m.Path, New: entry(m)})
		}
	}
	for _, metric := range deviceTotalMetrics {
		b, bok := bd.Limits[metric]
		h, hok := hd.Limits[metric]
		if bok == hok && b.Quantity == h.Quantity {
			continue
		}
		c := BudgetChange{Key: key + ".limits." + metric, Loosened: bok && !hok}
		if bok {
			c.Old = b.Quantity.Text
		}
		if hok {
			c.New = h.Quantity.Text
		}
		if bok && hok {
			// A share and an absolute cannot be compared without the
			// capacity; a reviewer looks.
			c.Loosened = b.Quantity.Kind != h.Quantity.Kind || h.Quantity.Value > b.Quantity.Value
		}
		out = append(out, c)
	}
	return out
}
