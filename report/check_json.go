package report

import (
	"io"

	"github.com/loadline/loadline/budget"
)

// CheckJSON writes the loadline.check/v1 document: the schema name, then
// the result as budget's types spell it (base, head, verdict, models with
// their figures and checks, budget_changes, waivers, problems, findings).
// Lists are written as [] rather than null, so a consumer can iterate
// without a check; an added model's base figures and a removed model's
// head figures are null.
func CheckJSON(w io.Writer, r *budget.Result) error {
	out := *r
	out.Models = []budget.ModelResult{} // written one by one (writeJSONList)
	out.Verdict = verdict(r)
	out.BudgetChanges = orEmpty(out.BudgetChanges)
	out.Waivers = orEmpty(out.Waivers)
	out.Problems = orEmpty(out.Problems)
	out.Findings = orEmpty(out.Findings)
	out.Devices = orEmpty(out.Devices)
	doc := struct {
		Schema string `json:"schema"`
		*budget.Result
	}{CheckSchema, &out}
	// Reasons read "ram 498 KiB > limit …", not "\u003e".
	return writeJSONList(w, doc, "models", len(r.Models), func(i int) any {
		m := &r.Models[i]
		if m.Checks != nil {
			return m
		}
		c := *m
		c.Checks = []budget.Check{}
		return &c
	}, false)
}

func orEmpty[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}
