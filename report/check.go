package report

import (
	"fmt"
	"sort"
	"strings"

	"github.com/loadline/loadline/budget"
)

// This file holds what the check renderers (text, markdown, JSON, JUnit)
// share: the order models are listed in, the tallies behind the headline,
// and the cells of one check row.

// CheckSchema names the JSON contract of `loadline check --format json`.
const CheckSchema = "loadline.check/v1"

// rank orders models for reading: failures first, then warnings, then
// waived, then passes.
func rank(s budget.Status) int {
	switch s {
	case budget.Fail:
		return 0
	case budget.Warn:
		return 1
	case budget.Waived:
		return 2
	}
	return 3
}

// ordered returns the models worst first, keeping the given order within a
// status (evaluation lists them by path).
func ordered(ms []budget.ModelResult) []*budget.ModelResult {
	out := make([]*budget.ModelResult, len(ms))
	for i := range ms {
		out[i] = &ms[i]
	}
	sort.SliceStable(out, func(i, j int) bool {
		return rank(out[i].Status) < rank(out[j].Status)
	})
	return out
}

// tally counts models by what a reader needs to know first.
type tally struct {
	unmeasured, fail, warn, waived, pass int
	unbudgeted                           int // counted here, not under their status
	removed                              int // removed models, also counted in their status
	total                                int
}

func count(ms []budget.ModelResult) tally {
	var t tally
	for i := range ms {
		t.add(&ms[i])
	}
	return t
}

// add counts one model: a model that could not be measured apart from the
// ones over budget, whatever its status.
func (t *tally) add(m *budget.ModelResult) {
	t.total++
	switch {
	case m.Error != "":
		t.unmeasured++
	case m.Unbudgeted:
		t.unbudgeted++
	case m.Status == budget.Fail:
		t.fail++
	case m.Status == budget.Warn:
		t.warn++
	case m.Status == budget.Waived:
		t.waived++
	default:
		t.pass++
	}
	if m.Change == budget.Removed && m.Error == "" {
		t.removed++
	}
}

// phrases says the tally in words, naming models once: "2 models over
// budget", "1 near a limit", "3 within budget". Removed models are left
// out of "within budget": nothing is judged for them.
func (t tally) phrases() []string {
	var out []string
	add := func(n int, what string) {
		switch {
		case n == 0:
		case len(out) == 0:
			out = append(out, plural(n, "model", "models")+" "+what)
		default:
			out = append(out, fmt.Sprintf("%d %s", n, what))
		}
	}
	add(t.unmeasured, "could not be measured")
	add(t.fail, "over budget")
	add(t.unbudgeted, "matched by no budget rule")
	add(t.warn, "near a limit")
	add(t.waived, "over budget but waived")
	add(t.pass-t.removed, "within budget")
	add(t.removed, "removed")
	if len(out) == 0 {
		out = append(out, "no models changed")
	}
	return out
}

func plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return fmt.Sprintf("%d %s", n, many)
}

// summary is the headline's sentence: the tally of models, and the
// budget-file problems, which can decide the verdict on their own.
func summary(r *budget.Result) string {
	if r.FiguresOnly {
		return plural(len(r.Models), "model", "models") + " compared; no budget file, so figures and deltas only, nothing judged"
	}
	s := strings.Join(count(r.Models).phrases(), ", ")
	if r.Audit && len(r.Models) == 0 {
		s = "no models at this revision"
	}
	if d := devicePhrase(r); d != "" {
		s += "; " + d
	}
	if n := len(findings(r)); n > 0 {
		s += "; " + plural(n, "problem", "problems") + " in the budget file"
	}
	return s
}

// verdict is the result's verdict, or the worst model status when the
// result leaves it empty.
func verdict(r *budget.Result) budget.Status {
	if r.Verdict != "" {
		return r.Verdict
	}
	v := budget.Pass
	for i := range r.Models {
		switch r.Models[i].Status {
		case budget.Fail:
			return budget.Fail
		case budget.Warn:
			v = budget.Warn
		}
	}
	for _, f := range r.Findings {
		switch f.Level {
		case budget.Fail:
			return budget.Fail
		case budget.Warn:
			v = budget.Warn
		}
	}
	return v
}

// rangeText names what was judged: "base main @ 3f2a9c1 → head HEAD @
// 9b1c2d3", or for an audit "every model at v1.2 @ 3f2a9c1".
func rangeText(r *budget.Result) string {
	if r.Audit {
		return "every model at " + revisionText(r.Head)
	}
	return "base " + revisionText(r.Base) + " → head " + revisionText(r.Head)
}

// revisionText names a revision for people: "origin/main @ 3f2a9c1".
func revisionText(r budget.Revision) string {
	c := r.Commit
	if len(c) > 7 {
		c = c[:7]
	}
	switch {
	case r.Ref == "" && c == "":
		return "working tree"
	case c == "":
		return r.Ref
	case r.Ref == "":
		return c
	}
	return r.Ref + " @ " + c
}

// judged is a check's status cell, or "—" for a figure shown without a
// budget, which has no verdict.
func judged(c *budget.Check, status string) string {
	if c.Kind == "figure" {
		return none
	}
	return status
}

// metricLabel names a check: the metric, and "growth" for a growth check,
// since one metric can have both a limit and a growth check.
func metricLabel(c *budget.Check) string {
	switch c.Kind {
	case "growth":
		return c.Metric + " growth"
	case "total":
		return c.Metric + " total"
	case "period":
		return "latency/period"
	}
	return c.Metric
}

// row is one check in words, the same cells in every table.
type row struct {
	metric, base, head, delta, limit, headroom string
}

const none = "—"

// cells puts one check into words. Figures the model lists as unknown read
// "unknown"; missing base or limit read "—".
func cells(m *budget.ModelResult, c *budget.Check) row {
	r := row{metric: metricLabel(c), base: none, delta: none, limit: none, headroom: none}
	r.head = Figure(c.Metric, c.Value)
	if m.Head != nil {
		if _, unknown := m.Head.Unknown[c.Metric]; unknown {
			r.head = "unknown"
		}
	}
	base, hasBase := int64(0), false
	switch {
	case c.Base != nil:
		base, hasBase = *c.Base, true
	case m.Base != nil:
		// Evaluation sets Base on every check of a model with a base
		// figure; a result built elsewhere may not, and then the model's
		// base figure stands in.
		base, hasBase = m.Base.Value(c.Metric)
	}
	if !hasBase && m.Change == budget.Added {
		r.delta = "new"
	}
	if hasBase {
		r.base = Figure(c.Metric, base)
		d := c.Value - base
		if c.Delta != nil {
			d = *c.Delta
		}
		r.delta = signedFigure(c.Metric, d)
		if base > 0 && d != 0 {
			r.delta += " (" + percent(d, base, true) + ")"
		}
	}
	if c.Limit != nil {
		r.limit = Figure(c.Metric, *c.Limit)
		h := *c.Limit - c.Value
		if c.Headroom != nil {
			h = *c.Headroom
		}
		r.headroom = Figure(c.Metric, h) // no "+" on room left
		if h < 0 {
			r.headroom = signedFigure(c.Metric, h)
		}
		// A share of the limit says how close a figure is to it; for a
		// growth check it would be of the base plus its allowance, which
		// says little, and the delta already gives the growth.
		if *c.Limit > 0 && c.Kind != "growth" {
			r.headroom += " (" + percent(h, *c.Limit, false) + ")"
		}
	}
	if r.head == "unknown" {
		r.delta, r.headroom = none, none
	}
	if c.Unknown { // a growth whose base figure cannot be computed
		r.base, r.delta = "unknown", "unknown"
	}
	return r
}

// percent prints part/whole as a percentage with one decimal, with a sign
// when asked (growth) and always for negatives.
func percent(part, whole int64, sign bool) string {
	p := float64(part) * 100 / float64(whole)
	if sign {
		return fmt.Sprintf("%+.1f%%", p)
	}
	return fmt.Sprintf("%.1f%%", p)
}

// waivedText is what a waived check adds to its reason.
func waivedText(w *budget.Waiver) string {
	s := "; waived until " + w.Until.Format("2006-01-02")
	if w.Reason != "" {
		s += ": " + w.Reason
	}
	return s
}

// waiverText is one waiver in words: "ram until 2027-01-31: reason".
func waiverText(w *budget.Waiver) string {
	s := w.Scope() + " until " + w.Until.Format("2006-01-02")
	if w.Reason != "" {
		s += ": " + w.Reason
	}
	return s
}

// modelNote is what the model row says when the model has no checks to
// show: removed, not measured, or not covered by a rule.
func modelNote(m *budget.ModelResult) string {
	switch {
	case m.Error != "":
		return "could not be measured: " + oneLine(m.Error)
	case m.Unbudgeted:
		return "no rule in the budget file matches this model"
	case len(m.Notes) > 0:
		return oneLine(strings.Join(m.Notes, "; "))
	case m.Change == budget.Removed:
		return "removed"
	case len(m.Checks) == 0:
		return "no limits apply"
	}
	return ""
}

// withWaiver is a check's reason, with its waiver unless evaluation has
// already written it in.
func withWaiver(c *budget.Check) string {
	r := oneLine(c.Reason)
	if c.Waiver != nil && !strings.Contains(r, "; waived") {
		r += waivedText(c.Waiver)
	}
	return r
}

// checkText is a check's reason as a line after the model's path:
// evaluation starts its reasons with the metric ("ram 498 KiB > limit …");
// one that does not is labelled.
func checkText(c *budget.Check) string {
	r := withWaiver(c)
	if !strings.HasPrefix(r, c.Metric+" ") {
		r = metricLabel(c) + ": " + r
	}
	if c.Source != "" {
		r += " — " + c.Source // where the budget file sets it
	}
	return r
}

// finding is a budget-file problem with its level.
type finding struct {
	level budget.Status
	text  string
}

// findings are the result's problems, with the level Findings gives them;
// problems without one count as warnings.
func findings(r *budget.Result) []finding {
	var out []finding
	if len(r.Findings) > 0 {
		for _, f := range r.Findings {
			lvl := f.Level
			if lvl != budget.Fail {
				lvl = budget.Warn
			}
			out = append(out, finding{lvl, oneLine(f.Message)})
		}
		return out
	}
	isNote := map[string]bool{}
	for _, n := range r.Notes {
		isNote[n] = true
	}
	for _, p := range r.Problems {
		if !isNote[p] { // notes have their own section
			out = append(out, finding{budget.Warn, oneLine(p)})
		}
	}
	return out
}

// shortNote is modelNote for a table cell, the full text being listed
// below the table (see modelLine).
func shortNote(m *budget.ModelResult) string {
	switch {
	case m.Error != "":
		return "could not be measured"
	case m.Unbudgeted:
		return "no budget rule matches"
	case len(m.Checks) == 0 && len(m.Notes) > 0 && m.Change != budget.Removed:
		return "not judged; see why below"
	}
	return modelNote(m)
}

// modelLine reports whether a model needs a line of its own below the
// table, for what its checks cannot say: not measured, not budgeted, or not
// judged for a reason its notes give.
func modelLine(m *budget.ModelResult) bool {
	return m.Error != "" || m.Unbudgeted || len(m.Checks) == 0 && len(m.Notes) > 0 && m.Change != budget.Removed
}

// changeNote says how the model changed, for the line that names it; empty
// for a plain modification.
func changeNote(m *budget.ModelResult) string {
	switch m.Change {
	case budget.Added:
		return "added"
	case budget.Removed:
		return "removed"
	case budget.Renamed:
		if m.OldPath != "" {
			return "renamed from " + m.OldPath
		}
		return "renamed"
	case budget.Unchanged:
		return "unchanged"
	}
	return ""
}

// oneLine folds line breaks so a message stays in its table cell.
func oneLine(s string) string {
	s = strings.ReplaceAll(s, "\r\n", " ")
	return strings.NewReplacer("\n", " ", "\r", " ", "\t", " ").Replace(s)
}
