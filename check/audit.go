package check

import (
	"fmt"
	"io"
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
	bf, err := requireBudget(snap, bpath, rev)
	if err != nil {
		return nil, nil, err
	}
	var cache *Cache
	if !o.NoCache {
		cache = NewCache(r)
		defer cache.Close()
	}
	today := o.Today
	if today.IsZero() {
		today = time.Now()
	}
	stats := &Stats{}
	res, err := judgeSnapshot(snap, bf, bpath, budget.EvalOptions{Strict: o.Strict, Today: today}, o.Bindings, o.Detail, cache, stats, o.Progress)
	if err != nil {
		return nil, nil, err
	}
	res.Audit = true
	res.Head = budget.Revision{Ref: rev, Commit: commitOf(snap)}
	return res, stats, nil
}

// requireBudget is the budget file at a revision, which an audit of the
// revision cannot do without: its absence is a budget-file error.
func requireBudget(snap *Snapshot, bpath, rev string) (*budget.File, error) {
	bf, err := loadBudget(snap, bpath, rev)
	if err != nil {
		return nil, err
	}
	if bf == nil {
		return nil, &BudgetFileError{Err: fmt.Errorf("no budget file: %s is not in %s (write one with loadline init, or name it with --budget)", bpath, rev)}
	}
	return bf, nil
}

// judgeSnapshot measures every model of a snapshot (through the cache)
// and judges each, unchanged, against the budget file f: the state of a
// revision, not a change. A rule that matches no file of the snapshot is
// a warning. It is the core of Audit (check --all) and of the sign-off's
// every model at every release. With detail each model carries its
// per-layer detail.
func judgeSnapshot(s *Snapshot, f *budget.File, bpath string, eo budget.EvalOptions, cli Bindings, detail bool, cache *Cache, stats *Stats, progress io.Writer) (*budget.Result, error) {
	tree, err := s.Paths()
	if err != nil {
		return nil, err
	}
	want := judged(bpath)
	var paths []string
	for _, p := range tree {
		if want(p) {
			paths = append(paths, p)
		}
	}
	if progress != nil && len(paths) > 0 {
		fmt.Fprintf(progress, "loadline: measuring %s\n", plural(len(paths), "model", "models"))
	}
	jobs := make([]blobJob, len(paths))
	dims := make([]*boundSet, len(paths))
	for i, p := range paths {
		jobs[i], dims[i] = blobJob{s, p}, bindingsOf(p, cli, f)
	}
	metrics, _ := measureJobs(jobs, dims, runsTogether(f), detail || withTarget(f), cache, stats)
	if err := envError(metrics); err != nil {
		return nil, err
	}
	inputs := make([]budget.Input, len(paths))
	for i, p := range paths {
		inputs[i] = budget.Input{Path: p, Change: budget.Unchanged, Head: DeviceFigures(f, p, metrics[i]), Error: metrics[i].Error}
	}
	eo.Tree = tree
	res := f.Evaluate(inputs, eo)
	for i := range res.Models {
		if detail {
			res.Models[i].Detail = DetailOf(metrics[i])
		}
	}
	dj := &deviceJudge{file: f, cli: cli, cache: cache, stats: stats}
	if err := dj.judge(res, nil, s, nil); err != nil {
		return nil, err
	}
	res.FoldDevices()
	notes, err := submoduleNotes(s, func(p string) bool { return len(f.Match(p)) > 0 })
	if err != nil {
		return nil, err
	}
	res.Notes = append(res.Notes, notes...)
	res.Problems = append(notes, res.Problems...)
	res.Audit = true
	return res, nil
}
