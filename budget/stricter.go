package budget

import "slices"

// Stricter joins the judgements of one change under the base revision's
// budget file (base) and under the head's (head), both made from the same
// inputs in the same order, into the judgement in force on a pull request:
// a change may tighten its own gate, never loosen it. Per model, each check
// (a metric's limit or growth) stands as the stricter of the two: the
// worse status, and on a tie the smaller limit; a check that only one file
// makes stands as that file makes it (a new limit tightens; a limit the
// head removes is still in force). A model that only one file budgets is
// judged by that file. A waiver excuses a check only when both files hold
// it, since a waiver the head adds or extends loosens the gate. Findings
// about a model come from both judgements; findings about the file as a
// whole (an expired waiver, a rule that matches nothing) from the head's,
// the file that will be in force once the change merges.
func Stricter(base, head *Result) *Result {
	if base == nil {
		return head
	}
	if head == nil || len(base.Models) != len(head.Models) {
		return base
	}
	out := &Result{Base: head.Base, Head: head.Head, Models: make([]ModelResult, len(base.Models)),
		BudgetChanges: head.BudgetChanges, Waivers: []Waiver{}, Problems: []string{}, Findings: []Finding{}}
	keep := map[string]bool{} // model paths whose findings stand
	for i := range base.Models {
		b, h := &base.Models[i], &head.Models[i]
		switch {
		case b.Unbudgeted && !h.Unbudgeted:
			out.Models[i] = *h
		case h.Unbudgeted && !b.Unbudgeted:
			out.Models[i] = *b
		default:
			out.Models[i] = stricterModel(b, h)
		}
		if !out.Models[i].Unbudgeted {
			keep[out.Models[i].Path] = true
		}
	}
	seen := map[string]bool{}
	add := func(fd Finding) {
		if seen[fd.Message] {
			return
		}
		seen[fd.Message] = true
		out.addFinding(fd)
	}
	for _, r := range []*Result{base, head} {
		for _, fd := range r.Findings {
			switch {
			case fd.Path == "" && r == head:
				add(fd)
			case fd.Path != "" && (keep[fd.Path] || isUnbudgetedIn(out, fd.Path)):
				add(fd)
			}
		}
	}
	inBase := map[[2]string]bool{}
	for _, w := range base.Waivers {
		inBase[[2]string{w.Path, w.Metric}] = true
	}
	for _, w := range head.Waivers {
		if inBase[[2]string{w.Path, w.Metric}] {
			out.Waivers = append(out.Waivers, w)
		}
	}
	out.Verdict = Pass
	for _, mr := range out.Models {
		out.Verdict = worse(out.Verdict, mr.Status)
	}
	for _, fd := range out.Findings {
		out.Verdict = worse(out.Verdict, fd.Level)
	}
	return out
}

func isUnbudgetedIn(r *Result, p string) bool {
	for _, m := range r.Models {
		if m.Unbudgeted && (m.Path == p || m.OldPath == p) {
			return true
		}
	}
	return false
}

// stricterModel joins one model's two judgements check by check.
func stricterModel(b, h *ModelResult) ModelResult {
	out := *h
	out.Checks = []Check{}
	type key struct{ metric, kind string }
	hs := map[key]*Check{}
	for i := range h.Checks {
		hs[key{h.Checks[i].Metric, h.Checks[i].Kind}] = &h.Checks[i]
	}
	used := map[key]bool{}
	for i := range b.Checks {
		bc := &b.Checks[i]
		k := key{bc.Metric, bc.Kind}
		hc, ok := hs[k]
		used[k] = true
		if !ok {
			out.Checks = append(out.Checks, *bc)
			continue
		}
		out.Checks = append(out.Checks, stricterCheck(*bc, *hc))
	}
	for i := range h.Checks {
		if !used[key{h.Checks[i].Metric, h.Checks[i].Kind}] {
			out.Checks = append(out.Checks, h.Checks[i])
		}
	}
	out.Notes = nil
	for _, n := range append(append([]string{}, b.Notes...), h.Notes...) {
		if !slices.Contains(out.Notes, n) { // both files say it: once
			out.Notes = append(out.Notes, n)
		}
	}
	if out.Error == "" {
		out.Error = b.Error
	}
	// The chosen checks are each the worse of the two, so the worse of
	// the two statuses also covers what no check says (an error, rules
	// that disagree).
	out.Status = worse(b.Status, h.Status)
	if out.Status == Pass || out.Status == Waived {
		out.Status = Pass
		for _, c := range out.Checks {
			if c.Status == Waived {
				out.Status = Waived
			}
		}
	}
	return out
}

// stricterCheck is the stricter of one check under two budget files: the
// worse status; on a tie the smaller limit.
func stricterCheck(b, h Check) Check {
	rb, rh := checkRank(b.Status), checkRank(h.Status)
	switch {
	case rb > rh:
		return b
	case rh > rb:
		return h
	case b.Limit != nil && h.Limit != nil && *b.Limit < *h.Limit:
		return b
	}
	return h
}

// checkRank orders statuses for Stricter: a waived check is better than
// a failure and worse than a pass, since it is a failure excused.
func checkRank(s Status) int {
	switch s {
	case Fail:
		return 3
	case Warn:
		return 2
	case Waived:
		return 1
	}
	return 0
}
