package report

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/loadline/loadline/budget"
)

// This file holds what the three sign-off renderers (HTML, markdown, JSON)
// share: the facts of the report, computed once from a budget.Signoff, so
// the three forms can only differ in layout, never in a figure.

// SignoffSchema names the JSON contract of `loadline signoff --format json`.
const SignoffSchema = "loadline.signoff/v1"

// Windows of the sign-off report.
const (
	// expirySoonDays is how close a waiver's expiry must be, in days from
	// the revision's date, to be highlighted.
	expirySoonDays = 30
	// profileModels is how many of the models closest to a limit get their
	// per-layer memory profile drawn.
	profileModels = 3
)

// trendMetrics are the figures drawn across releases, per device: what a
// device pays in RAM and flash, and the compute.
var trendMetrics = []string{budget.MetricRAM, budget.MetricFlash, budget.MetricMACs}

// shareMetrics are the figures whose share of the device is charted: the
// two a device has a capacity for.
var shareMetrics = []string{budget.MetricRAM, budget.MetricFlash}

// signoffView is the report's facts in reading order.
type signoffView struct {
	s       *budget.Signoff
	verdict budget.Status
	// labels name the points of every trend: the releases oldest first,
	// then the revision signed off.
	labels     []string
	devices    []deviceView
	unassigned []*budget.ModelResult // budgeted by a rule that names no device
	unbudgeted []*budget.ModelResult
	unmeasured []*budget.ModelResult
	waivers    []waiverView
	changes    []modelChange
	// previous is the release the changes are counted from; empty when
	// there is none.
	previous string
	problems []finding
	profiles []*budget.ModelResult
}

type deviceView struct {
	cap     budget.DeviceCapacity
	verdict budget.Status
	models  []*budget.ModelResult
	// totals is the device judged as a whole, when it lists the models
	// it runs (budget's totals.go); nil otherwise.
	totals *budget.DeviceResult
	// timed is set when some model has a latency estimate on the
	// device's target.
	timed  bool
	trends []trend
	shares []share
}

// trend is one metric of a device's models across the releases.
type trend struct {
	metric string
	// capacity is the device's capacity for the metric, drawn as the
	// limit line; nil when the device gives none (or the metric has none).
	capacity *int64
	series   []series
}

// series is one model's values at each point of a trend; nil where the
// model did not exist or could not be measured.
type series struct {
	model  string
	values []*int64
	// limit is the model's own limit for the metric at the revision
	// signed off, when a rule sets an absolute one.
	limit *int64
}

// share is one metric's use of a device by each model, against capacity.
type share struct {
	metric   string
	capacity *int64
	parts    []sharePart
}

type sharePart struct {
	model string
	value int64
}

type waiverView struct {
	w budget.Waiver
	// days left until expiry counted from the revision's date; negative
	// when expired.
	days int
	soon bool
}

// modelChange is how one model moved since the previous release.
type modelChange struct {
	path string
	kind string // added, removed, grown, shrunk, unchanged
	// deltas are the trend metrics that moved, in trendMetrics order.
	deltas []metricDelta
}

type metricDelta struct {
	metric   string
	old, new int64
}

// newSignoffView computes the report's facts.
func newSignoffView(s *budget.Signoff) *signoffView {
	v := &signoffView{s: s}
	cur := s.Current
	if cur == nil {
		cur = &budget.Result{}
	}
	v.verdict = verdict(cur)
	for i := range s.Releases {
		v.labels = append(v.labels, s.Releases[i].Tag)
	}
	v.labels = append(v.labels, revisionLabel(s.Revision))

	byDevice := map[string][]*budget.ModelResult{}
	for _, m := range ordered(cur.Models) {
		switch {
		case m.Change == budget.Removed:
			continue
		case m.Error != "":
			v.unmeasured = append(v.unmeasured, m)
		case m.Unbudgeted:
			v.unbudgeted = append(v.unbudgeted, m)
		case m.Device == "":
			v.unassigned = append(v.unassigned, m)
		default:
			byDevice[m.Device] = append(byDevice[m.Device], m)
		}
	}
	for _, dc := range s.Devices {
		dv := deviceView{cap: dc, verdict: budget.Pass, models: byDevice[dc.Name]}
		for _, m := range dv.models {
			dv.verdict = worseStatus(dv.verdict, m.Status)
			if m.Head != nil && m.Head.Target != nil {
				dv.timed = true
			}
		}
		for i := range cur.Devices {
			if cur.Devices[i].Name == dc.Name {
				dv.totals = &cur.Devices[i]
				dv.verdict = worseStatus(dv.verdict, dv.totals.Status)
			}
		}
		metrics := trendMetrics
		if dv.timed {
			metrics = append(append([]string{}, trendMetrics...), budget.MetricLatency)
		}
		for _, metric := range metrics {
			dv.trends = append(dv.trends, v.trendOf(dc, metric, dv.models))
		}
		for _, metric := range shareMetrics {
			sh := share{metric: metric, capacity: capacityOf(dc, metric)}
			for _, m := range dv.models {
				if val, ok := m.Head.Value(metric); ok {
					sh.parts = append(sh.parts, sharePart{m.Path, val})
				}
			}
			dv.shares = append(dv.shares, sh)
		}
		v.devices = append(v.devices, dv)
	}

	for _, w := range cur.Waivers {
		days := int(math.Ceil(w.Until.Sub(s.Date).Hours() / 24))
		v.waivers = append(v.waivers, waiverView{w: w, days: days, soon: days >= 0 && days <= expirySoonDays})
	}
	sort.SliceStable(v.waivers, func(i, j int) bool { return v.waivers[i].w.Until.Before(v.waivers[j].w.Until) })

	v.changes, v.previous = changesSince(s)
	v.problems = findings(cur)
	v.profiles = closestToLimit(cur, profileModels)
	return v
}

// revisionLabel names the revision signed off on a chart's axis.
func revisionLabel(r budget.Revision) string {
	if r.Ref != "" && r.Ref != "HEAD" {
		return r.Ref
	}
	if len(r.Commit) >= 7 {
		return r.Commit[:7]
	}
	return "HEAD"
}

func worseStatus(a, b budget.Status) budget.Status {
	if rank(b) < rank(a) && b != budget.Waived {
		return b
	}
	return a
}

func capacityOf(dc budget.DeviceCapacity, metric string) *int64 {
	switch metric {
	case budget.MetricRAM:
		return dc.RAM
	case budget.MetricFlash:
		return dc.Flash
	}
	return nil
}

// trendOf is one metric of the device's current models at every release.
// A model is followed by its path; one renamed between releases starts a
// new line.
func (v *signoffView) trendOf(dc budget.DeviceCapacity, metric string, models []*budget.ModelResult) trend {
	t := trend{metric: metric, capacity: capacityOf(dc, metric)}
	for _, m := range models {
		sr := series{model: m.Path}
		for i := range v.s.Releases {
			sr.values = append(sr.values, releaseValue(v.s.Releases[i].Result, m.Path, metric))
		}
		sr.values = append(sr.values, releaseValue(v.s.Current, m.Path, metric))
		for i := range m.Checks {
			c := &m.Checks[i]
			if c.Metric == metric && c.Kind != "growth" && c.Limit != nil {
				l := *c.Limit
				sr.limit = &l
			}
		}
		t.series = append(t.series, sr)
	}
	return t
}

// releaseValue is a model's figure in one release's result; nil when the
// model is absent there or the figure unknown.
func releaseValue(r *budget.Result, path, metric string) *int64 {
	m := findModel(r, path)
	if m == nil || m.Error != "" || m.Change == budget.Removed {
		return nil
	}
	val, ok := m.Head.Value(metric)
	if !ok {
		return nil
	}
	return &val
}

func findModel(r *budget.Result, path string) *budget.ModelResult {
	if r == nil {
		return nil
	}
	for i := range r.Models {
		if r.Models[i].Path == path {
			return &r.Models[i]
		}
	}
	return nil
}

// changesSince lists how every model moved since the newest earlier
// release that could be read: added, removed, grown (any trend metric
// rose), shrunk (some fell, none rose) or unchanged.
func changesSince(s *budget.Signoff) ([]modelChange, string) {
	var prev *budget.Release
	for i := len(s.Releases) - 1; i >= 0; i-- {
		if s.Releases[i].Result != nil && s.Releases[i].Error == "" {
			prev = &s.Releases[i]
			break
		}
	}
	if prev == nil || s.Current == nil {
		return nil, ""
	}
	live := func(r *budget.Result) map[string]*budget.ModelResult {
		out := map[string]*budget.ModelResult{}
		for i := range r.Models {
			if r.Models[i].Change != budget.Removed {
				out[r.Models[i].Path] = &r.Models[i]
			}
		}
		return out
	}
	before, after := live(prev.Result), live(s.Current)
	var out []modelChange
	for p, m := range after {
		old, ok := before[p]
		if !ok {
			out = append(out, modelChange{path: p, kind: "added"})
			continue
		}
		mc := modelChange{path: p, kind: "unchanged"}
		for _, metric := range trendMetrics {
			o, ok1 := old.Head.Value(metric)
			n, ok2 := m.Head.Value(metric)
			if ok1 && ok2 && o != n {
				mc.deltas = append(mc.deltas, metricDelta{metric, o, n})
				if n > o {
					mc.kind = "grown"
				} else if mc.kind != "grown" {
					mc.kind = "shrunk"
				}
			}
		}
		out = append(out, mc)
	}
	for p := range before {
		if _, ok := after[p]; !ok {
			out = append(out, modelChange{path: p, kind: "removed"})
		}
	}
	order := map[string]int{"grown": 0, "added": 1, "removed": 2, "shrunk": 3, "unchanged": 4}
	sort.Slice(out, func(i, j int) bool {
		if order[out[i].kind] != order[out[j].kind] {
			return order[out[i].kind] < order[out[j].kind]
		}
		return out[i].path < out[j].path
	})
	return out, prev.Tag
}

// closestToLimit picks the n models with the least of an allowance left
// (tightness) whose per-layer live memory is known, for their profiles.
func closestToLimit(r *budget.Result, n int) []*budget.ModelResult {
	if r == nil {
		return nil
	}
	var cands []*budget.ModelResult
	for i := range r.Models {
		m := &r.Models[i]
		if m.Detail != nil && len(m.Detail.LiveBytes) > 0 && !math.IsInf(tightness(m), 1) {
			cands = append(cands, m)
		}
	}
	sort.SliceStable(cands, func(i, j int) bool { return tightness(cands[i]) < tightness(cands[j]) })
	if len(cands) > n {
		cands = cands[:n]
	}
	return cands
}

// limitCheck is the model's absolute limit check for a metric, if any.
func limitCheck(m *budget.ModelResult, metric string) *budget.Check {
	for i := range m.Checks {
		if m.Checks[i].Metric == metric && m.Checks[i].Kind != "growth" {
			return &m.Checks[i]
		}
	}
	return nil
}

// worstCheck is the check that decided a model's status: the first with
// the model's status, else the tightest.
func worstCheck(m *budget.ModelResult) *budget.Check {
	for i := range m.Checks {
		if m.Checks[i].Status == m.Status && m.Status != budget.Pass {
			return &m.Checks[i]
		}
	}
	return nil
}

// waiverWhen says a waiver's expiry in words, from the revision's date.
func (w waiverView) when() string {
	switch {
	case w.days < 0:
		return "expired"
	case w.days == 0:
		return "expires on the revision's date"
	case w.days == 1:
		return "expires in 1 day"
	case w.soon:
		return "expires in " + strconv.Itoa(w.days) + " days"
	}
	return strconv.Itoa(w.days) + " days left"
}

// signoffDate prints a date as the report does.
func signoffDate(t time.Time) string {
	if t.IsZero() {
		return "unknown"
	}
	return t.UTC().Format("2006-01-02 15:04 UTC")
}

// shortCommit is a commit as people read it.
func shortCommit(c string) string {
	if len(c) > 12 {
		return c[:12]
	}
	return c
}

// missingLine joins the parts the report cannot state yet.
func missingLine(s *budget.Signoff) string {
	return strings.Join(s.Missing, " ")
}

// signoffRow is one model in a device's table, in words; the HTML and
// markdown tables print the same cells.
type signoffRow struct {
	path, status                    string
	ram, flash, macs, params        string
	ramLimit, flashLimit, macsLimit string
	headroom, reason                string
}

// rowOf puts a model's figures, limits and status into words.
func rowOf(m *budget.ModelResult) signoffRow {
	r := signoffRow{path: m.Path, status: statusWord(m.Status)}
	fig := func(metric string) string {
		if m.Head == nil {
			return none
		}
		if _, unknown := m.Head.Unknown[metric]; unknown {
			return "unknown"
		}
		v, ok := m.Head.Value(metric)
		if !ok {
			return none
		}
		return Figure(metric, v)
	}
	lim := func(metric string) string {
		if c := limitCheck(m, metric); c != nil && c.Limit != nil {
			return Figure(metric, *c.Limit)
		}
		return none
	}
	r.ram, r.flash, r.macs, r.params = fig(budget.MetricRAM), fig(budget.MetricFlash), fig(budget.MetricMACs), fig(budget.MetricParams)
	r.ramLimit, r.flashLimit, r.macsLimit = lim(budget.MetricRAM), lim(budget.MetricFlash), lim(budget.MetricMACs)
	r.headroom = none
	if t := tightness(m); !math.IsInf(t, 1) {
		r.headroom = percent(int64(math.Round(t*1000)), 1000, false) + " of its tightest allowance left"
		if t < 0 {
			r.headroom = "over by " + percent(int64(math.Round(-t*1000)), 1000, false) + " of its tightest allowance"
		}
	}
	if c := worstCheck(m); c != nil {
		r.reason = withWaiver(c)
	} else if n := modelNote(m); n != "" {
		r.reason = n
	}
	return r
}

// deltaText is a change of one figure: "1.2 MiB → 1.3 MiB (+8.1%)".
func deltaText(d metricDelta) string {
	s := d.metric + " " + Figure(d.metric, d.old) + " → " + Figure(d.metric, d.new)
	if d.old > 0 {
		s += " (" + percent(d.new-d.old, d.old, true) + ")"
	}
	return s
}

// capacityText is a device capacity in words.
func capacityText(v *int64, metric string) string {
	if v == nil {
		return "not given"
	}
	return Figure(metric, *v)
}

// deviceSummary is a device's verdict line: how many models, and how many
// fail or warn.
func deviceSummary(d deviceView) string {
	var fail, warn, waived int
	for _, m := range d.models {
		switch m.Status {
		case budget.Fail:
			fail++
		case budget.Warn:
			warn++
		case budget.Waived:
			waived++
		}
	}
	s := plural(len(d.models), "model", "models")
	if fail > 0 {
		s += ", " + strconv.Itoa(fail) + " over budget"
	}
	if warn > 0 {
		s += ", " + strconv.Itoa(warn) + " near a limit"
	}
	if waived > 0 {
		s += ", " + strconv.Itoa(waived) + " waived"
	}
	return s
}

// metricTitle names a metric at the start of a heading or sentence.
func metricTitle(metric string) string {
	switch metric {
	case budget.MetricRAM:
		return "RAM"
	case budget.MetricMACs:
		return "MACs"
	case budget.MetricFLOPs:
		return "FLOPs"
	}
	return capitalise(metric)
}

// timeRows are the device's models with their estimates on its target:
// model, target, latency, energy, the operators its runtime lacks.
func timeRows(d deviceView) [][]string {
	var out [][]string
	for _, m := range d.models {
		if m.Head == nil || m.Head.Target == nil {
			continue
		}
		t := m.Head.Target
		lat, _ := m.Head.Value(budget.MetricLatency)
		en, _ := m.Head.Value(budget.MetricEnergy)
		uns := none
		if len(t.Unsupported) > 0 {
			uns = strings.Join(t.Unsupported, "; ")
		}
		target := t.Name
		if t.ClockHz > 0 {
			target += fmt.Sprintf(" @ %g MHz", t.ClockHz/1e6)
		}
		out = append(out, []string{m.Path, target, Figure(budget.MetricLatency, lat), Figure(budget.MetricEnergy, en), uns})
	}
	return out
}

// totalsRows are a device's totals as check rows: total, head, limit,
// headroom, status, reason.
func totalsRows(d *budget.DeviceResult) [][]string {
	var out [][]string
	for i := range d.Checks {
		c := &d.Checks[i]
		rc := deviceCells(d, c)
		out = append(out, []string{rc.metric, rc.head, rc.limit, rc.headroom, statusWord(c.Status), oneLine(c.Reason)})
	}
	return out
}

// totalsLines are each model's part of the totals and the constants
// stored in several models, in words.
func totalsLines(d *budget.DeviceResult) []string {
	var out []string
	for i := range d.Models {
		out = append(out, deviceShareText(&d.Models[i]))
	}
	for i := range d.Shared {
		out = append(out, "shared: "+sharedText(&d.Shared[i]))
	}
	for _, n := range d.Notes {
		out = append(out, "note: "+oneLine(n))
	}
	return out
}
