package report

import (
	"bytes"
	"encoding/json"
	"io"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/display"
)

// CheckJSON writes the loadline.check/v1 document: the schema name, then
// the result as budget's types spell it (base, head, verdict, models with
// their figures and checks, budget_changes, waivers, problems, findings).
// Lists are written as [] rather than null, so a consumer can iterate
// without a check; an added model's base figures and a removed model's
// head figures are null.
func CheckJSON(w io.Writer, r *budget.Result) error {
	out := *r
	out.Models = make([]budget.ModelResult, len(r.Models))
	for i, m := range r.Models {
		if m.Checks == nil {
			m.Checks = []budget.Check{}
		}
		out.Models[i] = m
	}
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
	// Encoded flat, then indented into a buffer sized once: the indenting
	// encoder grows its buffers step by step, which on a report of
	// thousands of models was most of the time it took.
	var flat bytes.Buffer
	enc := json.NewEncoder(&flat)
	enc.SetEscapeHTML(false) // reasons read "ram 498 KiB > limit …", not "\u003e"
	if err := enc.Encode(doc); err != nil {
		return err
	}
	var buf bytes.Buffer
	buf.Grow(2*flat.Len() + 64)
	if err := json.Indent(&buf, flat.Bytes(), "", "  "); err != nil {
		return err
	}
	// Paths stay exactly as git names them; only the CI command opener
	// is written in another JSON spelling of the same string.
	_, err := w.Write(display.GuardJSON(buf.Bytes()))
	return err
}

func orEmpty[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}
