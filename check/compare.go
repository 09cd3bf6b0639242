package check

import (
	"errors"
	"fmt"
	"io/fs"
	"path/filepath"
	"time"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/measure"
)

// CompareOptions are the choices of `loadline compare`.
type CompareOptions struct {
	Old, New   string // model files
	BudgetFile string // the budget file; "" is ./loadline.yaml
	// As is the repository path whose budget rule applies; "" is New's
	// path as given.
	As     string
	Strict bool
	Today  time.Time
	// Bindings from the command line, over the budget rule's.
	Bindings Bindings
}

// Compare judges two model files outside git: OLD as the base, NEW as the
// head, under the rule that matches As.
func Compare(o CompareOptions) (*budget.Result, error) {
	bpath := o.BudgetFile
	if bpath == "" {
		bpath = DefaultBudgetFile
	}
	f, err := budget.Load(bpath)
	if o.BudgetFile == "" && errors.Is(err, fs.ErrNotExist) {
		// No budget file here and none asked for: the figures and their
		// deltas are still worth seeing, with no verdicts.
		f, err = nil, nil
	}
	if err == nil {
		err = checkTargets(f)
	}
	if err != nil {
		return nil, &BudgetFileError{Err: err}
	}
	as := o.As
	if as == "" {
		as = filepath.ToSlash(filepath.Clean(o.New))
	}
	// Rules that disagree on a binding are reported by Evaluate.
	var rule []budget.Binding
	name := ""
	if f != nil {
		rule, _ = f.Bindings(as)
		name = f.Name
	}
	// The files are named on the command line: a --dim, --shape or
	// --value naming nothing in them is an error.
	bound := bindingsFor(name, rule, o.Bindings, true)
	ms := MeasureFiles([]string{o.Old, o.New}, bound.options(measure.Options{Layers: true}))
	for _, m := range ms {
		bound.judge(m)
	}
	in := budget.Input{Path: as, Change: budget.Modified}
	if ms[0].Error != "" {
		return nil, fmt.Errorf("%s", ms[0].Error)
	}
	in.Base = DeviceFigures(f, as, ms[0])
	in.Head = DeviceFigures(f, as, ms[1])
	if ms[1].Error != "" {
		in.Error = ms[1].Error
	}
	today := o.Today
	if today.IsZero() {
		today = time.Now()
	}
	var res *budget.Result
	if f == nil {
		res = budget.FiguresOnly([]budget.Input{in})
	} else {
		res = f.Evaluate([]budget.Input{in}, budget.EvalOptions{Strict: o.Strict, Today: today})
	}
	for i := range res.Models {
		res.Models[i].Detail = DetailOf(ms[1])
	}
	res.Base = budget.Revision{Ref: o.Old}
	res.Head = budget.Revision{Ref: o.New}
	if res.BudgetChanges == nil {
		res.BudgetChanges = []budget.BudgetChange{}
	}
	return res, nil
}
