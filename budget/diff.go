package budget

import (
	"fmt"
	"sort"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"
)

// Diff lists every difference between the base revision's budget file and
// the head's that changes what passes: device capacities and weights
// placement, rules added or removed (a rule is known by its path glob),
// a rule's device, dims, limits, growth allowances and warn_at, and
// waivers. Loosened is set when the head allows more: a bigger limit or
// capacity, more growth, a later warn_at, a new or longer waiver, a
// removed rule, limit or capacity; a change that cannot be compared (a
// growth allowance turned from a percent into an absolute) counts as
// loosened, so that a reviewer looks. A nil file is an empty one.
func Diff(base, head *File) []BudgetChange { return DiffOn(base, head, time.Time{}) }

// DiffOn is Diff on a given day: a waiver the head adds, or whose date it
// moves, that has expired by then excuses nothing, so it is listed as
// expired and not as loosening the gate. The zero day leaves dates out.
func DiffOn(base, head *File, today time.Time) []BudgetChange {
	expired := func(w Waiver) bool {
		if today.IsZero() {
			return false
		}
		y, m, d := today.Date()
		return w.Until.Before(time.Date(y, m, d, 0, 0, 0, 0, time.UTC))
	}
	if base == nil {
		base = &File{}
	}
	if head == nil {
		head = &File{}
	}
	var out []BudgetChange
	add := func(c BudgetChange) { out = append(out, c) }

	for _, name := range unionKeys(base.Devices, head.Devices) {
		bd, hd := base.Devices[name], head.Devices[name]
		key := "devices." + name
		switch {
		case bd == nil:
			add(BudgetChange{Key: key, New: describeDevice(hd)})
		case hd == nil:
			add(BudgetChange{Key: key, Old: describeDevice(bd), Loosened: true})
		default:
			for _, metric := range []string{MetricRAM, MetricFlash} {
				bo, bok := bd.Capacity(metric)
				ho, hok := hd.Capacity(metric)
				if bok == hok && bo == ho {
					continue
				}
				add(BudgetChange{Key: key + "." + metric, Old: capacityText(bd, metric), New: capacityText(hd, metric),
					Loosened: (bok && !hok) || (bok && hok && ho > bo)})
			}
			if bd.Weights != hd.Weights {
				// Weights leaving RAM lower every ram figure of the device.
				add(BudgetChange{Key: key + ".weights", Old: bd.Weights, New: hd.Weights, Loosened: hd.Weights == WeightsFlash})
			}
			if bt, ht := targetText(bd), targetText(hd); bt != ht {
				// Another target changes every latency and energy figure
				// of the device, and which operators it runs; whether that
				// allows more cannot be told without measuring, so a
				// reviewer looks.
				add(BudgetChange{Key: key + ".target", Old: bt, New: ht, Loosened: true})
			}
			for _, c := range diffDeviceSet(key, bd, hd) {
				add(c)
			}
		}
	}

	paired := map[*Rule]*Rule{} // head rule → base rule
	used := map[*Rule]bool{}
	for _, hr := range head.Rules {
		for _, br := range base.Rules {
			if !used[br] && br.Path == hr.Path {
				paired[hr], used[br] = br, true
				break
			}
		}
	}
	for _, br := range base.Rules {
		if !used[br] {
			add(BudgetChange{Key: br.Key(), Path: br.Path, Old: describeRule(br), Loosened: true})
		}
	}
	for _, hr := range head.Rules {
		br := paired[hr]
		if br == nil {
			add(BudgetChange{Key: hr.Key(), Path: hr.Path, New: describeRule(hr)})
			continue
		}
		key := hr.Key()
		bdev, hdev := base.Devices[br.Device], head.Devices[hr.Device]
		if br.Device != hr.Device {
			add(BudgetChange{Key: key + ".device", Path: hr.Path, Old: br.Device, New: hr.Device, Loosened: deviceLooser(bdev, hdev)})
		}
		for _, name := range unionKeys(br.Dims, hr.Dims) {
			bv, bok := br.Dims[name]
			hv, hok := hr.Dims[name]
			if bok == hok && bv == hv {
				continue
			}
			// A smaller dim measures a smaller model.
			add(BudgetChange{Key: key + ".dims." + name, Path: hr.Path, Old: dimText(bv, bok), New: dimText(hv, hok),
				Loosened: bok && (!hok || hv < bv)})
		}
		for _, metric := range Metrics {
			bs, bok := br.Limits[metric]
			hs, hok := hr.Limits[metric]
			if !bok && !hok {
				continue
			}
			var bv, hv int64
			var btext, htext string
			if bok {
				bv, btext = limitText(metric, bs, bdev)
			}
			if hok {
				hv, htext = limitText(metric, hs, hdev)
			}
			if bok && hok && bv == hv && btext == htext {
				continue
			}
			add(BudgetChange{Key: key + ".limits." + metric, Path: hr.Path, Old: btext, New: htext,
				Loosened: bok && (!hok || hv > bv)})
		}
		for _, metric := range Metrics {
			bs, bok := br.Growth[metric]
			hs, hok := hr.Growth[metric]
			if !bok && !hok || bok && hok && bs.Kind == hs.Kind && bs.Value == hs.Value {
				continue
			}
			loosened := bok && !hok
			if bok && hok {
				loosened = (bs.Kind == Percent) != (hs.Kind == Percent) || hs.Value > bs.Value
			}
			add(BudgetChange{Key: key + ".growth." + metric, Path: hr.Path, Old: bs.Text, New: hs.Text, Loosened: loosened})
		}
		if br.WarnAt != hr.WarnAt {
			add(BudgetChange{Key: key + ".warn_at", Path: hr.Path, Old: formatPercent(br.WarnAt), New: formatPercent(hr.WarnAt),
				Loosened: hr.WarnAt > br.WarnAt})
		}
	}

	type wkey struct{ path, metric string }
	bw := map[wkey]int{}
	for i, w := range base.Waivers {
		if _, dup := bw[wkey{w.Path, w.Metric}]; !dup {
			bw[wkey{w.Path, w.Metric}] = i
		}
	}
	seen := map[wkey]bool{}
	for i, w := range head.Waivers {
		k := wkey{w.Path, w.Metric}
		key := fmt.Sprintf("waivers[%d]", i)
		j, ok := bw[k]
		if !ok || seen[k] {
			if expired(w) {
				add(BudgetChange{Key: key, Path: w.Path, New: describeWaiver(w) + " (expired already: it excuses nothing)"})
			} else {
				add(BudgetChange{Key: key, Path: w.Path, New: describeWaiver(w), Loosened: true})
			}
			continue
		}
		seen[k] = true
		old := base.Waivers[j]
		if !old.Until.Equal(w.Until) {
			c := BudgetChange{Key: key + ".until", Path: w.Path, Old: old.Until.Format(time.DateOnly), New: w.Until.Format(time.DateOnly),
				Loosened: w.Until.After(old.Until) && !expired(w)}
			if expired(w) {
				c.New += " (expired already)"
			}
			add(c)
		}
		if strings.Join(old.Excuses, ",") != strings.Join(w.Excuses, ",") {
			add(BudgetChange{Key: key + ".excuses", Path: w.Path, Old: strings.Join(old.Excuses, ", "), New: strings.Join(w.Excuses, ", "),
				Loosened: !expired(w) && len(w.Excuses) > len(old.Excuses)})
		}
		if (old.UpTo == nil) != (w.UpTo == nil) || old.UpTo != nil && *old.UpTo != *w.UpTo {
			add(BudgetChange{Key: key + ".up_to", Path: w.Path, Old: old.UpToText, New: w.UpToText,
				Loosened: !expired(w) && (w.UpTo == nil || old.UpTo != nil && *w.UpTo > *old.UpTo)})
		}
		if old.Reason != w.Reason {
			add(BudgetChange{Key: key + ".reason", Path: w.Path, Old: old.Reason, New: w.Reason})
		}
	}
	for i, w := range base.Waivers {
		if k := (wkey{w.Path, w.Metric}); !seen[k] && bw[k] == i {
			add(BudgetChange{Key: fmt.Sprintf("waivers[%d]", i), Path: w.Path, Old: describeWaiver(w)})
		}
	}
	if out == nil {
		out = []BudgetChange{}
	}
	return out
}

func unionKeys[V any](a, b map[string]V) []string {
	set := map[string]bool{}
	for k := range a {
		set[k] = true
	}
	for k := range b {
		set[k] = true
	}
	keys := make([]string, 0, len(set))
	for k := range set {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	return keys
}

// deviceLooser reports whether moving a rule from device a to device b
// can let more through: a capacity bigger or gone, or weights leaving RAM.
func deviceLooser(a, b *Device) bool {
	if a == nil || b == nil {
		return true
	}
	for _, metric := range []string{MetricRAM, MetricFlash} {
		av, aok := a.Capacity(metric)
		bv, bok := b.Capacity(metric)
		if aok && (!bok || bv > av) {
			return true
		}
	}
	return a.Weights == WeightsRAM && b.Weights == WeightsFlash
}

func capacityText(d *Device, metric string) string {
	q := d.RAM
	if metric == MetricFlash {
		q = d.Flash
	}
	if q == nil {
		return ""
	}
	return q.Text
}

func describeDevice(d *Device) string {
	var parts []string
	if d.RAM != nil {
		parts = append(parts, "ram "+d.RAM.Text)
	}
	if d.Flash != nil {
		parts = append(parts, "flash "+d.Flash.Text)
	}
	parts = append(parts, "weights "+d.Weights)
	return strings.Join(parts, ", ")
}

func describeRule(r *Rule) string {
	parts := []string{"path " + r.Path, "device " + r.Device}
	for _, metric := range Metrics {
		if s, ok := r.Limits[metric]; ok {
			parts = append(parts, metric+" ≤ "+s.Text)
		}
	}
	for _, metric := range Metrics {
		if s, ok := r.Growth[metric]; ok {
			if strings.HasPrefix(s.Text, "-") {
				parts = append(parts, metric+" "+s.Text)
			} else {
				parts = append(parts, metric+" +"+s.Text)
			}
		}
	}
	return strings.Join(parts, ", ")
}

func describeWaiver(w Waiver) string {
	return fmt.Sprintf("%s %s until %s: %s", w.Path, w.Scope(), w.Until.Format(time.DateOnly), w.Reason)
}

func dimText(v int64, ok bool) string {
	if !ok {
		return ""
	}
	return strconv.FormatInt(v, 10)
}

// limitText returns a limit's value in force and its text: "90% (281.6
// KiB)" for a share of the device.
func limitText(metric string, s Setting, dev *Device) (int64, string) {
	if s.Kind != Percent || dev == nil {
		return s.Value, s.Text
	}
	v, _ := resolve(metric, s, dev)
	return v, fmt.Sprintf("%s (%s)", s.Text, FormatValue(metric, v))
}

// targetText is a device's target as one line of YAML, "" when it names
// none.
func targetText(d *Device) string {
	if d == nil || d.Target == nil {
		return ""
	}
	if d.Target.Kind == yaml.ScalarNode {
		return d.Target.Value
	}
	out, err := yaml.Marshal(d.Target)
	if err != nil {
		return "(unprintable)"
	}
	var flow yaml.Node
	if yaml.Unmarshal(out, &flow) == nil && len(flow.Content) > 0 {
		setFlow(flow.Content[0], 0)
		if b, err := yaml.Marshal(flow.Content[0]); err == nil {
			return strings.TrimSpace(string(b))
		}
	}
	return strings.TrimSpace(string(out))
}

func setFlow(n *yaml.Node, depth int) {
	if depth > 8 {
		return
	}
	n.Style |= yaml.FlowStyle
	n.HeadComment, n.LineComment, n.FootComment = "", "", ""
	for _, c := range n.Content {
		setFlow(c, depth+1)
	}
}
