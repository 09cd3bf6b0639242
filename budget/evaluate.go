package budget

import (
	"fmt"
	"maps"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/bmatcuk/doublestar/v4"
)

// Input is one model to judge: its path on the head revision (OldPath is
// its path on the base, for renames and removals), how it changed, and the
// measured figures of each side (Base nil for an added model, Head nil for
// a removed one). Error is set when the model could not be measured.
type Input struct {
	Path, OldPath string
	Change        Change
	Base, Head    *Figures
	Error         string
}

// EvalOptions steer Evaluate.
type EvalOptions struct {
	// Strict fails a model matched by no rule instead of warning.
	Strict bool
	// Today decides which waivers have expired; the zero time means now.
	// Only its date counts: a waiver holds through its until day.
	Today time.Time
	// Tree, when not nil, is every file path at the revision judged: a
	// rule whose glob matches none of them is a warning naming its line
	// (a folder renamed, a typo), since it judges nothing.
	Tree []string
}

// RunArena is the activation arena a device runs the model in: for a
// TFLite model the arena its microcontroller runtime plans
// (Memory.Runtime.ArenaBytes, kernel scratch included), for others the
// deployed view's arena. Persistent bytes are apart. ram (Deploy) and the
// device totals (totals.go) both count it.
func (f *Figures) RunArena() int64 {
	if rt := f.Memory.Runtime; rt != nil {
		return rt.ArenaBytes
	}
	return f.Memory.Deployed.ArenaBytes
}

// Deploy returns a copy of fig with RAM and Flash computed for the device.
// This is the one definition of the two device figures:
//
//   - ram = the deployed activation arena (Memory.Deployed.ArenaBytes);
//     for a TFLite model, the arena the microcontroller runtime plans
//     (Memory.Runtime.ArenaBytes, kernel scratch included) plus the
//     persistent bytes of its variable tensors (Memory.PersistentBytes),
//     which that runtime allocates beside the arena. Either way plus
//     ParamBytes when the device keeps weights in RAM (weights: ram), as
//     the runtime copies them there before it runs; when weights live in
//     flash (weights: flash, the default) they are read in place, except
//     those the file does not store (GeneratedParamBytes, computed from
//     constants at load time), which are held in RAM either way.
//   - flash = FileBytes + ExternalBytes, the model as stored (the model
//     file, weights plus graph, and any external data files its weights
//     live in), wherever weights live: with weights: flash they are read
//     from it at run time, and with weights: ram the model must still be
//     stored to be loaded.
//
// A figure that these depend on and that is listed in fig.Unknown makes
// the device figure unknown too, with the reason passed on.
func (d *Device) Deploy(fig *Figures) *Figures {
	if fig == nil {
		return nil
	}
	out := *fig
	out.Unknown = copyUnknown(fig.Unknown)
	out.RAM = addSat(fig.RunArena(), fig.Memory.PersistentBytes)
	if why, ok := fig.Unknown[MetricArena]; ok {
		setUnknown(&out, MetricRAM, "arena: "+why)
	}
	if d.Weights == WeightsRAM {
		out.RAM = addSat(out.RAM, fig.ParamBytes)
		if why, ok := fig.Unknown[MetricWeights]; ok {
			setUnknown(&out, MetricRAM, "weights: "+why)
		}
	} else {
		out.RAM = addSat(out.RAM, fig.GeneratedParamBytes)
	}
	out.Flash = addSat(fig.FileBytes, fig.ExternalBytes)
	if why, ok := fig.Unknown[MetricFile]; ok {
		setUnknown(&out, MetricFlash, "file: "+why)
	}
	return &out
}

func copyUnknown(m map[string]string) map[string]string {
	if len(m) == 0 {
		return nil
	}
	out := make(map[string]string, len(m))
	for k, v := range m {
		out[k] = v
	}
	return out
}

func setUnknown(f *Figures, metric, why string) {
	if f.Unknown == nil {
		f.Unknown = map[string]string{}
	}
	if _, ok := f.Unknown[metric]; !ok {
		f.Unknown[metric] = why
	}
}

// noDevice copies fig with ram and flash unknown, for a model no rule
// assigns to a device.
func noDevice(fig *Figures, why string) *Figures {
	if fig == nil {
		return nil
	}
	out := *fig
	out.Unknown = copyUnknown(fig.Unknown)
	out.RAM, out.Flash = 0, 0
	setUnknown(&out, MetricRAM, why)
	setUnknown(&out, MetricFlash, why)
	return &out
}

// FiguresOnly lists a model's figures and their deltas without a budget:
// one "figure" check per metric that needs no device (ram and flash do),
// each passing, for reports to show what changed when there is nothing to
// judge by. The result's FiguresOnly flag says so to the reader.
func FiguresOnly(models []Input) *Result {
	res := &Result{Verdict: Pass, Models: []ModelResult{}, BudgetChanges: []BudgetChange{}, Waivers: []Waiver{},
		Problems: []string{}, Findings: []Finding{}, FiguresOnly: true}
	for _, in := range models {
		mr := ModelResult{Path: in.Path, OldPath: in.OldPath, Change: in.Change, Base: in.Base, Head: in.Head,
			Checks: []Check{}, Status: Pass, Error: in.Error}
		if in.Error != "" {
			mr.Status, res.Verdict = Fail, Fail
			res.Models = append(res.Models, mr)
			continue
		}
		for _, metric := range Metrics {
			if metric == MetricRAM || metric == MetricFlash {
				continue
			}
			v, ok := in.Head.Value(metric)
			if !ok {
				continue
			}
			c := Check{Metric: metric, Kind: "figure", Value: v, Status: Pass, Reason: metric + " " + FormatValue(metric, v)}
			if bv, ok := in.Base.Value(metric); ok {
				d := v - bv
				c.Base, c.Delta = &bv, &d
			}
			mr.Checks = append(mr.Checks, c)
		}
		res.Models = append(res.Models, mr)
	}
	return res
}

// Evaluate judges each model against the budget. Every rule whose path
// matches a model applies to it; rules that disagree about the model (its
// device, a dim, a limit, a growth allowance or warn_at) fail the model
// with both places named. Each limit gives a check: fail when the figure
// is above the limit, warn when above warn_at of it, pass otherwise; each
// growth allowance gives a check against the base figure. A waiver in
// force for the model and metric turns a failure into waived, and a model
// whose every failure is waived (and nothing warns) is waived. Removed
// models pass with a note; models that could not be measured fail; models
// no rule matches warn (fail when strict). Expired waivers are failing
// findings. The verdict is the worst status of models and findings.
func (f *File) Evaluate(models []Input, opts EvalOptions) *Result {
	today := opts.Today
	if today.IsZero() {
		today = time.Now()
	}
	y, m, d := today.Date()
	day := time.Date(y, m, d, 0, 0, 0, 0, time.UTC)
	res := &Result{Models: make([]ModelResult, 0, len(models)), BudgetChanges: []BudgetChange{}, Waivers: []Waiver{},
		Problems: []string{}, Findings: []Finding{}}
	e := &evaluation{file: f, strict: opts.Strict, res: res}
	for _, w := range f.Waivers {
		if w.Until.Before(day) {
			// A warning: it fails the checks it excused, of the models it
			// covers, when they are judged (a change to one of them, an
			// audit of all); a change elsewhere goes through with this
			// reminder.
			e.expired = append(e.expired, w)
			res.addFinding(Finding{Level: Warn, Line: w.Line, Column: w.Column,
				Message: fmt.Sprintf("waiver for %s %s expired on %s (%s): it no longer excuses anything; renew it with a later date or remove it",
					w.Path, w.Scope(), w.Until.Format(time.DateOnly), f.place(w.Line, w.Column))})
			continue
		}
		res.Waivers = append(res.Waivers, w)
	}
	e.live = res.Waivers
	if opts.Tree != nil {
		for _, r := range f.Rules {
			if !matchesAny(r.Path, opts.Tree) {
				res.addFinding(Finding{Level: Warn, Line: r.Line, Column: r.Column,
					Message: fmt.Sprintf("%s matches no file: it judges nothing (a folder renamed, or a typo in the glob?)", f.ruleAt(r))})
			}
		}
	}
	for _, in := range models {
		res.Models = append(res.Models, e.model(in))
	}
	res.Verdict = Pass
	for _, mr := range res.Models {
		res.Verdict = worse(res.Verdict, mr.Status)
	}
	for _, fd := range res.Findings {
		res.Verdict = worse(res.Verdict, fd.Level)
	}
	return res
}

func (r *Result) addFinding(fd Finding) {
	r.Findings = append(r.Findings, fd)
	r.Problems = append(r.Problems, fd.Message)
}

// worse returns the worse of two statuses; waived counts as pass.
func worse(a, b Status) Status {
	rank := func(s Status) int {
		switch s {
		case Fail:
			return 2
		case Warn:
			return 1
		}
		return 0
	}
	if rank(b) > rank(a) {
		return b
	}
	return a
}

type evaluation struct {
	file          *File
	strict        bool
	res           *Result
	live, expired []Waiver
}

// source is one rule's entry for a metric.
type source struct {
	rule *Rule
	set  Setting
}

// budgetFor is what every rule matching one model says, merged.
type budgetFor struct {
	rules     []*Rule
	dev       *Device
	limits    map[string][]source
	growth    map[string][]source
	warnAt    int64
	conflicts []string // disagreements about device, dims or warn_at
}

func (f *File) merge(rules []*Rule) *budgetFor {
	b := &budgetFor{rules: rules, limits: map[string][]source{}, growth: map[string][]source{}, warnAt: DefaultWarnAt}
	var devRule, warnRule *Rule
	dims := map[string]*Rule{}
	inputs := map[string]Binding{}
	for _, r := range rules {
		if devRule == nil {
			devRule, b.dev = r, f.Devices[r.Device]
		} else if r.Device != devRule.Device {
			b.conflicts = append(b.conflicts, fmt.Sprintf("rules disagree on the device: %s says %q, %s says %q",
				f.ruleAt(devRule), devRule.Device, f.ruleAt(r), r.Device))
		}
		for _, name := range slices.Sorted(maps.Keys(r.Dims)) {
			if first, ok := dims[name]; ok && first.Dims[name] != r.Dims[name] {
				b.conflicts = append(b.conflicts, fmt.Sprintf("rules disagree on dim %s: %s says %d, %s says %d",
					name, f.ruleAt(first), first.Dims[name], f.ruleAt(r), r.Dims[name]))
			} else if !ok {
				dims[name] = r
			}
		}
		for _, bd := range r.Bindings {
			if bd.Kind == "dim" {
				continue // above
			}
			k := bd.Kind + " " + bd.Name
			if first, ok := inputs[k]; ok && (fmt.Sprint(first.Shape) != fmt.Sprint(bd.Shape) || fmt.Sprint(first.Value) != fmt.Sprint(bd.Value)) {
				b.conflicts = append(b.conflicts, fmt.Sprintf("rules disagree on input %s's %s: %s and %s", bd.Name, bd.Kind, first.Place(f.Name), bd.Place(f.Name)))
			} else if !ok {
				inputs[k] = bd
			}
		}
		if r.WarnAtSet {
			if warnRule == nil {
				warnRule, b.warnAt = r, r.WarnAt
			} else if r.WarnAt != warnRule.WarnAt {
				b.conflicts = append(b.conflicts, fmt.Sprintf("rules disagree on warn_at: %s says %s, %s says %s",
					f.ruleAt(warnRule), formatPercent(warnRule.WarnAt), f.ruleAt(r), formatPercent(r.WarnAt)))
			}
		}
		for metric, s := range r.Limits {
			b.limits[metric] = append(b.limits[metric], source{r, s})
		}
		for metric, s := range r.Growth {
			b.growth[metric] = append(b.growth[metric], source{r, s})
		}
	}
	return b
}

func (e *evaluation) model(in Input) ModelResult {
	f := e.file
	mr := ModelResult{Path: in.Path, OldPath: in.OldPath, Change: in.Change, Checks: []Check{}, Status: Pass}
	if mr.Change == "" {
		switch {
		case in.Base == nil && in.Head != nil:
			mr.Change = Added
		case in.Head == nil && in.Base != nil:
			mr.Change = Removed
		default:
			mr.Change = Modified
		}
	}
	p := cleanPath(in.Path)
	if mr.Change == Removed && in.OldPath != "" {
		p = cleanPath(in.OldPath)
	}
	matched := f.Match(p)
	movedFrom := ""
	if len(matched) == 0 && in.OldPath != "" && mr.Change != Removed {
		// Moved out of every rule: judged by the rules that covered it
		// at its old path, or moving it would turn a failure into an
		// unbudgeted warning.
		if old := f.Match(cleanPath(in.OldPath)); len(old) > 0 {
			matched, movedFrom = old, cleanPath(in.OldPath)
		}
	}
	b := f.merge(matched)
	deviceConflict := false
	for _, r := range b.rules {
		deviceConflict = deviceConflict || r.Device != b.rules[0].Device
	}
	globs := make([]string, len(b.rules))
	for i, r := range b.rules {
		globs[i] = r.Path
	}
	mr.Rule = strings.Join(globs, ", ")
	if movedFrom != "" {
		mr.Notes = append(mr.Notes, fmt.Sprintf("moved from %s, out of every budget rule: judged by the rule that covered it there (%s)", movedFrom, mr.Rule))
	}
	switch {
	case deviceConflict:
		why := "the rules matching this model disagree on its device"
		mr.Base, mr.Head = noDevice(in.Base, why), noDevice(in.Head, why)
	case b.dev != nil:
		mr.Device = b.dev.Name
		mr.Base, mr.Head = b.dev.Deploy(in.Base), b.dev.Deploy(in.Head)
	default:
		why := "no rule names a device for this model"
		mr.Base, mr.Head = noDevice(in.Base, why), noDevice(in.Head, why)
	}
	if mr.Change == Removed {
		mr.Notes = append(mr.Notes, "removed: nothing to judge")
		return mr
	}
	if len(b.rules) == 0 {
		mr.Unbudgeted = true
		mr.Status = Warn
		if e.strict {
			mr.Status = Fail
		}
		e.res.addFinding(Finding{Level: mr.Status, Path: p,
			Message: fmt.Sprintf("%s is not budgeted: no models entry in %s matches it", p, f.Name)})
	}
	switch {
	case in.Error != "":
		mr.Error, mr.Status = in.Error, Fail
		return mr
	case mr.Unbudgeted:
		return mr
	case mr.Head == nil:
		mr.Error, mr.Status = "no figures for the head revision", Fail
		return mr
	}
	if len(b.conflicts) > 0 {
		for _, c := range b.conflicts {
			mr.Notes = append(mr.Notes, c)
			e.res.addFinding(Finding{Level: Fail, Path: p, Message: p + ": " + c})
		}
		mr.Status = Fail
		if deviceConflict {
			// No limit is judged while the rules disagree on where the
			// model runs: every ram and flash figure depends on it.
			return mr
		}
	}
	if b.dev != nil && b.dev.Target != nil && len(b.limits[MetricUnsupported]) == 0 && len(b.rules) > 0 {
		// A device that names a target runs every operator of the model
		// or fails: an implicit limit of 0 unsupported operators, which
		// a rule may raise and a waiver may excuse.
		b.limits[MetricUnsupported] = []source{{b.rules[0], Setting{Quantity: Quantity{Text: "0", Kind: Plain}, Line: b.dev.Target.Line, Column: b.dev.Target.Column}}}
	}
	for _, metric := range Metrics {
		if srcs := b.limits[metric]; len(srcs) > 0 {
			c := e.limit(p, metric, srcs, b, mr.Base, mr.Head)
			if metric == MetricUnsupported && c.Value > 0 && mr.Head != nil && mr.Head.Target != nil {
				c.Reason += ": " + strings.Join(mr.Head.Target.Unsupported, "; ")
			}
			mr.Checks = append(mr.Checks, c)
		}
		// An unchanged model (an audit, or a model re-judged because the
		// budget file changed) has no growth to judge.
		if srcs := b.growth[metric]; len(srcs) > 0 && (mr.Change != Unchanged || in.Base != nil) {
			mr.Checks = append(mr.Checks, e.growth(p, metric, srcs, mr.Base, mr.Head))
		}
	}
	waived := false
	for _, c := range mr.Checks {
		mr.Status = worse(mr.Status, c.Status)
		waived = waived || c.Status == Waived
	}
	if mr.Status == Pass && waived {
		// Over budget but excused: reports list it apart from the models
		// within budget; the verdict still counts it as a pass.
		mr.Status = Waived
	}
	return mr
}

// resolve returns a limit in the metric's unit, and for a share of the
// device the words that explain it ("90% of porch-cam's 312.9 KiB").
func resolve(metric string, s Setting, dev *Device) (int64, string) {
	if s.Kind != Percent {
		return s.Value, ""
	}
	capacity, _ := dev.Capacity(metric)
	return share(capacity, s.Value), fmt.Sprintf("%s of %s's %s", formatPercent(s.Value), dev.Name, FormatValue(metric, capacity))
}

func (e *evaluation) limit(p, metric string, srcs []source, b *budgetFor, base, head *Figures) Check {
	f := e.file
	s := srcs[0]
	lim, explain := resolve(metric, s.set, b.dev)
	c := Check{Metric: metric, Kind: "limit", Source: f.place(s.set.Line, s.set.Column)}
	for _, o := range srcs[1:] {
		if ol, oexplain := resolve(metric, o.set, b.dev); ol != lim {
			c.Status = Fail
			c.Reason = fmt.Sprintf("rules disagree on the %s limit: %s says %s, %s says %s",
				metric, f.ruleAt(s.rule), describeLimit(metric, s.set, lim, explain), f.ruleAt(o.rule), describeLimit(metric, o.set, ol, oexplain))
			e.res.addFinding(Finding{Level: Fail, Path: p, Line: o.set.Line, Column: o.set.Column, Message: p + ": " + c.Reason})
			return c
		}
	}
	c.Limit = &lim
	what := FormatValue(metric, lim)
	if explain != "" {
		what += " (" + explain + ")"
	}
	v, ok := head.Value(metric)
	if !ok {
		c.Status, c.Reason = Fail, "cannot be computed: "+unknownWhy(head, metric)
		return e.waive(p, c)
	}
	c.Value = v
	if bv, ok := base.Value(metric); ok {
		delta := v - bv
		c.Base, c.Delta = &bv, &delta
	}
	room := lim - v
	c.Headroom = &room
	fv := FormatValue(metric, v)
	switch {
	case v > lim:
		c.Status = Fail
		c.Reason = fmt.Sprintf("%s %s > limit %s by %s", metric, fv, what, FormatValue(metric, v-lim))
	case v > share(lim, b.warnAt):
		c.Status = Warn
		c.Reason = fmt.Sprintf("%s %s is %s of limit %s, past warn_at %s; %s left",
			metric, fv, percentOf(v, lim), what, formatPercent(b.warnAt), FormatValue(metric, room))
	default:
		c.Status = Pass
		c.Reason = fmt.Sprintf("%s %s ≤ limit %s, %s left", metric, fv, what, FormatValue(metric, room))
	}
	return e.waive(p, c)
}

func describeLimit(metric string, s Setting, lim int64, explain string) string {
	if explain != "" {
		return fmt.Sprintf("%s = %s", explain, FormatValue(metric, lim))
	}
	return s.Text
}

func unknownWhy(f *Figures, metric string) string {
	if f != nil {
		if why := f.Unknown[metric]; why != "" {
			return why
		}
	}
	return "no figure"
}

// percentOf prints v as a share of whole with one decimal: "95.9%".
func percentOf(v, whole int64) string {
	if whole == 0 {
		return "∞%"
	}
	return strconv.FormatFloat(float64(v)/float64(whole)*100, 'f', 1, 64) + "%"
}

func (e *evaluation) growth(p, metric string, srcs []source, base, head *Figures) Check {
	f := e.file
	s := srcs[0]
	c := Check{Metric: metric, Kind: "growth", Source: f.place(s.set.Line, s.set.Column)}
	for _, o := range srcs[1:] {
		if (o.set.Kind == Percent) != (s.set.Kind == Percent) || o.set.Value != s.set.Value {
			c.Status = Fail
			c.Reason = fmt.Sprintf("rules disagree on the %s growth allowed: %s says %s, %s says %s",
				metric, f.ruleAt(s.rule), s.set.Text, f.ruleAt(o.rule), o.set.Text)
			e.res.addFinding(Finding{Level: Fail, Path: p, Line: o.set.Line, Column: o.set.Column, Message: p + ": " + c.Reason})
			return c
		}
	}
	allowedText := FormatValue(metric, s.set.Value)
	if s.set.Kind == Percent {
		allowedText = formatPercent(s.set.Value)
	}
	v, ok := head.Value(metric)
	if !ok {
		c.Status, c.Reason = Fail, "cannot be computed: "+unknownWhy(head, metric)
		return e.waive(p, c)
	}
	c.Value = v
	if base == nil {
		c.Status, c.Reason = Pass, fmt.Sprintf("%s growth not judged: no base figure (new model)", metric)
		return c
	}
	bv, ok := base.Value(metric)
	if !ok {
		// Not a pass: the growth is unknown. A warning, a failure when
		// strict; a waiver may excuse it like any failure.
		c.Unknown = true
		c.Status = Warn
		c.Reason = fmt.Sprintf("%s growth unknown: the base figure cannot be computed: %s", metric, unknownWhy(base, metric))
		if e.strict {
			c.Status = Fail
			return e.waive(p, c)
		}
		return c
	}
	c.Base = &bv
	delta := v - bv
	c.Delta = &delta
	var allowed int64
	if s.set.Kind == Percent {
		allowed = addSat(bv, share(bv, s.set.Value))
	} else {
		allowed = addSat(bv, s.set.Value)
	}
	c.Limit = &allowed
	room := allowed - v
	c.Headroom = &room
	fromTo := fmt.Sprintf("(%s → %s)", FormatValue(metric, bv), FormatValue(metric, v))
	var moved string
	switch {
	case delta == 0:
		moved = fmt.Sprintf("%s unchanged at %s", metric, FormatValue(metric, v))
	case s.set.Kind == Percent && bv > 0:
		verb := "grew"
		if delta < 0 {
			verb = "fell"
		}
		moved = fmt.Sprintf("%s %s %s %s", metric, verb, percentOf(abs(delta), bv), fromTo)
	case delta > 0:
		moved = fmt.Sprintf("%s grew %s %s", metric, FormatValue(metric, delta), fromTo)
	default:
		moved = fmt.Sprintf("%s fell %s %s", metric, FormatValue(metric, -delta), fromTo)
	}
	if s.set.Value < 0 {
		c.Reason = moved + ", must fall by at least " + strings.TrimPrefix(allowedText, "-")
	} else {
		c.Reason = moved + ", allowed " + allowedText
	}
	c.Status = Pass
	if v > allowed {
		c.Status = Fail
	}
	return e.waive(p, c)
}

func abs(v int64) int64 {
	if v < 0 {
		return -v
	}
	return v
}

// waive turns a failing check into Waived when a waiver in force names the
// model and metric, and notes an expired one that would have.
func (e *evaluation) waive(p string, c Check) Check {
	if c.Status != Fail {
		return c
	}
	var above *Waiver
	for i := range e.live {
		w := &e.live[i]
		if w.Metric != c.Metric || !matchPath(w.Path, p) {
			continue
		}
		if w.Covers(c.Kind, c.Value) {
			c.Status = Waived
			c.Waiver = w
			c.Reason += "; waived"
			if w.UpTo != nil {
				c.Reason += " up to " + FormatValue(w.Metric, *w.UpTo)
			}
			c.Reason += fmt.Sprintf(" until %s: %s", w.Until.Format(time.DateOnly), w.Reason)
			return c
		}
		if w.UpTo != nil && c.Value > *w.UpTo && contains(w.Excuses, c.Kind) {
			above = w
		}
	}
	if above != nil {
		c.Reason += fmt.Sprintf("; above its waiver's ceiling of %s (%s)", FormatValue(above.Metric, *above.UpTo), e.file.place(above.Line, above.Column))
		return c
	}
	for _, w := range e.expired {
		if w.Metric == c.Metric && matchPath(w.Path, p) && contains(w.Excuses, c.Kind) {
			c.Reason += fmt.Sprintf("; its waiver expired on %s (%s)", w.Until.Format(time.DateOnly), e.file.place(w.Line, w.Column))
			break
		}
	}
	return c
}

func matchesAny(glob string, paths []string) bool {
	for _, p := range paths {
		if matchPath(glob, p) {
			return true
		}
	}
	return false
}

func matchPath(glob, p string) bool {
	ok, _ := doublestar.Match(glob, p)
	return ok
}
