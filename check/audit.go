package check

import (
	"fmt"
	"time"

	"github.com/loadline/loadline/budget"
)

// Audit judges every model in the tree at rev (HEAD when empty) against
// rev's own budget file: not only the models a change touched. It is the
// pipeline of `loadline check --all`, and a library call for whatever
// needs every model's verdict at one revision (a release tag's, say):
// models are read from git objects, measured through the cache, and judged
// as unchanged, so growth is not judged (there is no base) and every limit
// is. An expired waiver fails the checks of the models it covers, since
// all of them are judged. o.Dir, o.Base, o.Staged, o.PrePush and
// o.TrustHeadBudget are not used; o.BudgetFile, o.Strict, o.NoCache,
// o.Today and o.Progress are.
func Audit(r *Repo, rev string, o Options) (*budget.Result, *Stats, error) {
	if rev == "" {
		rev = "HEAD"
	}
	snap, err := r.Resolve(rev)
	if err != nil {
		return nil, nil, err
	}
	bpath, err := budgetPath(r, o.BudgetFile)
	if err != nil {
		return nil, nil, err
	}
	bf, err := loadBudget(snap, bpath, rev)
	if err != nil {
		return nil, nil, err
	}
	if bf == nil {
		return nil, nil, &BudgetFileError{Err: fmt.Errorf("no budget file: %s is not in %s (write one with loadline init, or name it with --budget)", bpath, rev)}
	}
	tree, err := snap.Paths()
	if err != nil {
		return nil, nil, err
	}
	want := judged(bpath, bf)
	var paths []string
	for _, p := range tree {
		if want(p) {
			paths = append(paths, p)
		}
	}
	if o.Progress != nil && len(paths) > 0 {
		fmt.Fprintf(o.Progress, "loadline: measuring %s\n", plural(len(paths), "model", "models"))
	}
	var cache *Cache
	if !o.NoCache {
		cache = NewCache(r)
	}
	stats := &Stats{}
	jobs := make([]blobJob, len(paths))
	dims := make([]map[string]int64, len(paths))
	for i, p := range paths {
		jobs[i], dims[i] = blobJob{snap, p}, dimsOf(p, bf)
	}
	metrics, _ := measureJobs(jobs, dims, cache, stats)
	if err := envError(metrics); err != nil {
		return nil, nil, err
	}
	inputs := make([]budget.Input, len(paths))
	for i, p := range paths {
		inputs[i] = budget.Input{Path: p, Change: budget.Unchanged, Head: Figures(metrics[i]), Error: metrics[i].Error}
	}
	today := o.Today
	if today.IsZero() {
		today = time.Now()
	}
	res := bf.Evaluate(inputs, budget.EvalOptions{Strict: o.Strict, Today: today, Tree: tree})
	for i := range res.Models {
		res.Models[i].Detail = DetailOf(metrics[i])
	}
	res.Audit = true
	res.Head = budget.Revision{Ref: rev, Commit: commitOf(snap)}
	return res, stats, nil
}
