package check

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"os"
	"path"
	"path/filepath"
	"strings"
	"time"

	"github.com/bmatcuk/doublestar/v4"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/measure"
)

// DefaultBudgetFile is the budget file's path from the repository root.
const DefaultBudgetFile = "loadline.yaml"

// Options are the choices of `loadline check`.
type Options struct {
	Dir        string // a folder inside the repository; "" is the current one
	Base, Head string // revisions; "" picks the defaults (see ResolveRange)
	Staged     bool   // compare the index with HEAD (pre-commit)
	// All judges every model at Head (HEAD when empty) instead of a
	// change: see Audit.
	All bool
	// PrePush, when set, is the pre-push hook's standard input: one line
	// per pushed ref, "<local ref> <local sha> <remote ref> <remote sha>".
	PrePush    io.Reader
	BudgetFile string // repository path of the budget file; "" is loadline.yaml
	// TrustHeadBudget judges a change by its own budget file instead of
	// the base's: the explicit way to let a change loosen its own gate.
	TrustHeadBudget bool
	Strict          bool // an unbudgeted model fails instead of warning
	NoCache         bool
	Getenv          func(string) string // the environment; nil is os.Getenv
	Today           time.Time           // for waiver expiry; zero is now
	Progress        io.Writer           // progress lines; nil is quiet
	// Bindings from the command line apply to every model, over the
	// budget rules' dims: and inputs:.
	Bindings Bindings
	// Detail fills each model's per-layer detail (heaviest layers, live
	// memory over the schedule), which the markdown report shows; without
	// it the per-layer view is measured, or read from the cache, only for
	// the models of a device with a target.
	Detail bool
}

// BudgetFileError is a budget file that cannot be used (exit 2).
type BudgetFileError struct{ Err error }

func (e *BudgetFileError) Error() string { return e.Err.Error() }
func (e *BudgetFileError) Unwrap() error { return e.Err }

var modelExts = []string{".onnx", ".tflite"}

// IsModelPath reports whether a path has a model file extension.
func IsModelPath(p string) bool {
	ext := strings.ToLower(path.Ext(p))
	for _, e := range modelExts {
		if ext == e {
			return true
		}
	}
	return false
}

// Range is a resolved base and head.
type Range struct {
	Base, Head *Snapshot
	// BaseRef and HeadRef say how they were chosen, for reports.
	BaseRef, HeadRef string
}

// ResolveRange picks base and head. Head: --head, else the index with
// --staged, else HEAD. Base: --base (its merge-base with head on a branch),
// else HEAD for --staged (what git commit would add to it, even when a
// pre-commit hook runs on CI), else the pull request's base from the CI
// environment (GitHub's GITHUB_BASE_REF, GitLab's
// CI_MERGE_REQUEST_DIFF_BASE_SHA), else the merge-base of HEAD with the
// default branch.
func ResolveRange(r *Repo, o Options) (*Range, error) {
	getenv := o.Getenv
	if getenv == nil {
		getenv = os.Getenv
	}
	rg := &Range{}
	var err error
	switch {
	case o.Staged:
		if rg.Head, err = r.Index(); err != nil {
			return nil, err
		}
		rg.HeadRef = "index"
	default:
		rg.HeadRef = o.Head
		if rg.HeadRef == "" {
			rg.HeadRef = "HEAD"
		}
		if rg.Head, err = r.Resolve(rg.HeadRef); err != nil {
			return nil, err
		}
	}
	base := o.Base
	mergeBase := true
	if base == "" && !o.Staged {
		if ref := getenv("GITHUB_BASE_REF"); ref != "" {
			base = "origin/" + ref
		} else if sha := getenv("CI_MERGE_REQUEST_DIFF_BASE_SHA"); sha != "" {
			base, mergeBase = sha, false
		}
	}
	if base == "" && o.Staged {
		s, err := r.Resolve("HEAD")
		if err != nil {
			// The first commit of a repository: everything staged is added.
			rg.Base, rg.BaseRef = r.empty(), "empty"
			return rg, nil
		}
		rg.Base, rg.BaseRef = s, "HEAD"
		return rg, nil
	}
	if base == "" {
		if base, err = r.DefaultBranch(); err != nil {
			return nil, err
		}
	}
	b, err := r.Resolve(base)
	if err != nil {
		return nil, err
	}
	rg.Base, rg.BaseRef = b, base
	if mergeBase && rg.Head.tree != nil && b.Commit != rg.Head.Commit {
		mb, err := r.MergeBase(b, rg.Head)
		if err != nil {
			return nil, err
		}
		rg.Base = mb
	}
	return rg, nil
}

// Run checks a change: it finds the models that changed between base and
// head, measures both sides from git objects, and judges them against the
// budget file in force.
func Run(o Options) (*budget.Result, *Stats, error) {
	dir := o.Dir
	if dir == "" {
		dir = "."
	}
	r, err := OpenRepo(dir)
	if err != nil {
		return nil, nil, err
	}
	defer r.Close()
	if o.All {
		return Audit(r, o.Head, o)
	}
	if o.PrePush != nil {
		return runPrePush(r, o)
	}
	rg, err := ResolveRange(r, o)
	if err != nil {
		return nil, nil, err
	}
	return runRange(r, rg, o)
}

// runPrePush checks each pushed ref against what the remote has (or, for a
// new branch, against the default branch), and joins the results.
func runPrePush(r *Repo, o Options) (*budget.Result, *Stats, error) {
	const zero = "0000000000000000000000000000000000000000"
	total := &Stats{}
	var joined *budget.Result
	sc := bufio.NewScanner(o.PrePush)
	var lines [][]string
	for sc.Scan() {
		if f := strings.Fields(sc.Text()); len(f) == 4 {
			lines = append(lines, f)
		}
	}
	if err := sc.Err(); err != nil {
		// A ref left unread would be a push left unchecked.
		return nil, nil, &EnvError{Err: fmt.Errorf("reading the pre-push input (<local ref> <local sha> <remote ref> <remote sha> per line): %w", err), Hint: "run --pre-push from git's pre-push hook (loadline hook install --stage pre-push)"}
	}
	getenv := o.Getenv
	if getenv == nil {
		getenv = os.Getenv
	}
	// The multi-language hook framework passes the range in variables.
	if len(lines) == 0 && getenv("PRE_COMMIT_TO_REF") != "" {
		lines = append(lines, []string{"", getenv("PRE_COMMIT_TO_REF"), "", getenv("PRE_COMMIT_FROM_REF")})
	}
	for _, f := range lines {
		local, remote := f[1], f[3]
		if local == zero || local == "" {
			continue // a deletion: nothing to judge
		}
		po := o
		po.PrePush, po.Head, po.Base = nil, local, remote
		newBranch := remote == zero || remote == ""
		if newBranch {
			po.Base = ""
		}
		var note string
		if !newBranch {
			if _, rerr := r.Resolve(remote); rerr != nil {
				// The remote's tip is not in this clone (someone else pushed,
				// or this is a force push): compare with the default branch
				// rather than refuse the push.
				po.Base, newBranch = "", true
				note = fmt.Sprintf("the remote's %s is at %.12s, which this clone does not have (fetch to compare with it): compared with the default branch instead", f[2], remote)
			}
		}
		rg, err := ResolveRange(r, po)
		if err != nil && newBranch && errors.Is(err, errNoDefaultBranch) {
			// A new branch in a repository without main, master or
			// origin/HEAD: nothing to compare with, so its models are
			// judged as added rather than the push refused.
			head, herr := r.Resolve(local)
			if herr != nil {
				return nil, nil, herr
			}
			rg, err = &Range{Base: r.empty(), BaseRef: "empty", Head: head, HeadRef: local}, nil
			note = strings.TrimPrefix(note+"; ", "; ") + fmt.Sprintf("%s is a new branch and the repository has no default branch (origin/HEAD, main or master) to compare it with: its models are judged as added", f[2])
		}
		if err != nil {
			return nil, nil, err
		}
		res, st, err := runRange(r, rg, po)
		if err != nil {
			return nil, nil, err
		}
		if note != "" {
			res.Problems = append([]string{note}, res.Problems...)
		}
		total.Measured.Add(st.Measured.Load())
		total.CacheHits.Add(st.CacheHits.Load())
		joined = joinResults(joined, res)
	}
	if joined == nil {
		joined = &budget.Result{Verdict: budget.Pass, Models: []budget.ModelResult{}}
	}
	return joined, total, nil
}

func joinResults(a, b *budget.Result) *budget.Result {
	if a == nil {
		return b
	}
	a.Models = append(a.Models, b.Models...)
	a.BudgetChanges = append(a.BudgetChanges, b.BudgetChanges...)
	a.Problems = append(a.Problems, b.Problems...)
	a.Verdict = worse(a.Verdict, b.Verdict)
	a.Head = b.Head
	return a
}

func worse(a, b budget.Status) budget.Status {
	rank := map[budget.Status]int{budget.Pass: 0, budget.Waived: 0, budget.Warn: 1, budget.Fail: 2}
	if rank[b] > rank[a] {
		return b
	}
	return a
}

// loadBudget reads and parses the budget file at a snapshot; nil when the
// snapshot has none.
func loadBudget(s *Snapshot, p, ref string) (*budget.File, error) {
	if _, ok := s.Hash(p); !ok {
		if s.isFolder(p) {
			return nil, &BudgetFileError{Err: fmt.Errorf("%s at %s is a folder, not a budget file: name the file inside it with --budget %s/loadline.yaml", p, ref, p)}
		}
		return nil, nil
	}
	data, err := s.Read(p)
	if err != nil {
		return nil, err
	}
	f, err := budget.Parse(p+" (at "+ref+")", data)
	if err == nil {
		err = checkTargets(f)
	}
	if err != nil {
		return nil, &BudgetFileError{Err: err}
	}
	return f, nil
}

// budgetPath turns --budget into a path from the repository root, as the
// git trees name files: "./loadline.yaml" and an absolute path inside the
// working tree are accepted, a path outside the repository is refused.
func budgetPath(r *Repo, p string) (string, error) {
	if p == "" {
		return DefaultBudgetFile, nil
	}
	rel := p
	if filepath.IsAbs(p) {
		var err error
		if rel, err = filepath.Rel(r.Root, p); err != nil {
			rel = ".."
		}
	}
	rel = path.Clean(filepath.ToSlash(rel))
	if rel == "." || rel == ".." || strings.HasPrefix(rel, "../") || path.IsAbs(rel) {
		return "", &BudgetFileError{Err: fmt.Errorf("--budget %q: give the budget file's path from the repository root (%s), e.g. loadline.yaml; it is read from git objects, not the working tree", p, r.Root)}
	}
	return rel, nil
}

func runRange(r *Repo, rg *Range, o Options) (*budget.Result, *Stats, error) {
	bpath, err := budgetPath(r, o.BudgetFile)
	if err != nil {
		return nil, nil, err
	}
	baseBudget, err := loadBudget(rg.Base, bpath, rg.BaseRef)
	if err != nil {
		return nil, nil, err
	}
	headBudget, err := loadBudget(rg.Head, bpath, rg.HeadRef)
	if err != nil {
		return nil, nil, err
	}
	var notes []string
	inForce := baseBudget
	// both: the stricter of the base's and the head's file is in force, a
	// limit at a time (budget.Stricter).
	both := false
	switch {
	case o.TrustHeadBudget && headBudget != nil:
		inForce = headBudget
		if baseBudget != nil {
			notes = append(notes, "judged by the head's budget file (--trust-head-budget): this change may loosen its own gate")
		}
	case baseBudget == nil && headBudget != nil:
		inForce = headBudget
		notes = append(notes, fmt.Sprintf("%s is new in this change; its models are judged by it", bpath))
	case baseBudget != nil && headBudget == nil:
		// The base's file judges this change, but once it merges no
		// budget is in force: the reviewer must see that.
		notes = append(notes, fmt.Sprintf("%s is removed in this change: it is judged by %s's, and after it merges no budget file is in force", bpath, rg.BaseRef))
	case baseBudget != nil && headBudget != nil:
		both = true
	}
	if inForce == nil {
		return nil, nil, &BudgetFileError{Err: fmt.Errorf("no budget file: %s is in neither %s nor %s (write one with loadline init, or name it with --budget)", bpath, rg.BaseRef, rg.HeadRef)}
	}
	files := []*budget.File{inForce}
	if both {
		files = []*budget.File{baseBudget, headBudget}
	}
	want := judged(bpath)
	all, err := Diff(rg.Base, rg.Head, func(p string) bool { return p != bpath })
	if err != nil {
		return nil, nil, err
	}
	covered := func(p string) bool {
		for _, f := range files {
			if len(f.Match(p)) > 0 {
				return true
			}
		}
		return false
	}
	all = pairMoves(all, covered)
	// A submodule at a path a rule matches is no model file: it is left
	// out of the change whether it moved or not (the index holds no file
	// for it), and the report says so.
	subNotes, err := submoduleNotes(rg.Head, covered)
	if err != nil {
		return nil, nil, err
	}
	notes = append(notes, subNotes...)
	changes, err := withDataChanges(rg, all, want)
	if err != nil {
		return nil, nil, err
	}
	tree, err := rg.Head.Paths()
	if err != nil {
		return nil, nil, err
	}
	var budgetChanges []budget.BudgetChange
	if baseBudget != nil && headBudget != nil {
		day := o.Today
		if day.IsZero() {
			day = time.Now()
		}
		budgetChanges = budget.DiffOn(baseBudget, headBudget, day)
	}
	// A change to the budget file judges again every model its changed
	// rules, devices or waivers concern, changed by this change or not: a
	// tightened limit that an unchanged model breaks shows on this change.
	if len(budgetChanges) > 0 {
		listed := map[string]bool{}
		for _, c := range changes {
			listed[c.Path] = true
		}
		for _, p := range tree {
			if !listed[p] && want(p) && concerns(budgetChanges, baseBudget, headBudget, p) {
				h, _ := rg.Head.Hash(p)
				changes = append(changes, FileChange{Path: p, Kind: string(budget.Unchanged), OldHash: h, NewHash: h})
			}
		}
	}
	if o.Progress != nil && len(changes) > 0 {
		// The report names the revisions; the progress line does not repeat them.
		fmt.Fprintf(o.Progress, "loadline: measuring %s\n", plural(len(changes), "model", "models"))
	}
	var cache *Cache
	if !o.NoCache {
		cache = NewCache(r)
		defer cache.Close()
	}
	stats := &Stats{}
	var jobs []blobJob
	var dims []*boundSet
	pairs := make([]pair, len(changes))
	dimsFor := func(p string) *boundSet {
		// Rules that disagree on a binding are reported by Evaluate, which
		// fails the model; measure it with what the rules give meanwhile.
		return bindingsOf(p, o.Bindings, files...)
	}
	for i, c := range changes {
		pairs[i] = pair{-1, -1}
		rulePath := c.Path
		if c.OldPath != "" && !covered(c.Path) {
			rulePath = c.OldPath // moved out of every rule: judged by its old one
		}
		bound := dimsFor(rulePath) // read only: both sides share it
		if c.Kind != "removed" {
			pairs[i].head = len(jobs)
			jobs = append(jobs, blobJob{rg.Head, c.Path})
			dims = append(dims, bound)
		}
		if c.Kind != "added" && c.Kind != string(budget.Unchanged) {
			old := c.Path
			if c.OldPath != "" {
				old = c.OldPath
			}
			pairs[i].base = len(jobs)
			jobs = append(jobs, blobJob{rg.Base, old})
			// Both sides are measured with the dims of the head's rule, so
			// that they compare like with like.
			dims = append(dims, bound)
		}
	}
	metrics, deps := measureJobs(jobs, dims, runsTogether(inForce), o.Detail || withTarget(files...), cache, stats)
	changes, pairs = dropUnreadData(changes, pairs, all, metrics, deps)
	// A missing object is the environment's fault, not the model's.
	if err := envError(metrics); err != nil {
		return nil, nil, err
	}
	inputs := make([]budget.Input, len(changes))
	for i, c := range changes {
		in := budget.Input{Path: c.Path, OldPath: c.OldPath, Change: budget.Change(c.Kind)}
		if pairs[i].head >= 0 {
			m := metrics[pairs[i].head]
			in.Head = DeviceFigures(inForce, c.Path, m)
			if m.Error != "" {
				in.Error = m.Error
			}
		}
		if pairs[i].base >= 0 {
			// A base that cannot be measured is passed on with every
			// figure unknown and the reason, so a growth rule says why it
			// was not judged instead of taking the model for a new one.
			in.Base = DeviceFigures(inForce, c.Path, metrics[pairs[i].base])
		}
		inputs[i] = in
	}
	today := o.Today
	if today.IsZero() {
		today = time.Now()
	}
	eo := budget.EvalOptions{Strict: o.Strict, Today: today, Tree: tree}
	var res *budget.Result
	if both {
		res = budget.Stricter(baseBudget.Evaluate(inputs, eo), headBudget.Evaluate(inputs, eo))
	} else {
		res = inForce.Evaluate(inputs, eo)
	}
	headJob := make(map[string]int, len(changes))
	for j, c := range changes {
		if pairs[j].head >= 0 {
			headJob[c.Path] = pairs[j].head
		}
	}
	for i := range res.Models {
		if res.Models[i].Change == budget.Unchanged {
			res.Models[i].Notes = append(res.Models[i].Notes, "not changed: judged again because the budget file's rules for it changed")
		}
		if j, ok := headJob[res.Models[i].Path]; ok && o.Detail {
			res.Models[i].Detail = DetailOf(metrics[j])
		}
	}
	res.Base = budget.Revision{Ref: rg.BaseRef, Commit: commitOf(rg.Base)}
	res.Head = budget.Revision{Ref: rg.HeadRef, Commit: commitOf(rg.Head)}
	res.BudgetChanges = budgetChanges
	if res.BudgetChanges == nil {
		res.BudgetChanges = []budget.BudgetChange{}
	}
	// The devices that run a changed model are judged as a whole; a
	// change to the budget file re-judges every device.
	touched := map[string]bool{}
	for _, c := range changes {
		touched[c.Path] = true
		if c.OldPath != "" {
			touched[c.OldPath] = true
		}
	}
	if len(res.BudgetChanges) > 0 {
		touched = nil
	}
	dj := &deviceJudge{file: inForce, cli: o.Bindings, cache: cache, stats: stats}
	if err := dj.judge(res, rg.Base, rg.Head, touched); err != nil {
		return nil, nil, err
	}
	res.FoldDevices()
	if both {
		notes = append(notes, wayOut(bpath, res.BudgetChanges)...)
	}
	res.Notes = notes
	res.Problems = append(append([]string{}, notes...), res.Problems...)
	return res, stats, nil
}

// wayOut says which of a change's own budget edits are not in force while
// it is judged (those that loosen the gate; tightenings are in force at
// once) and how teams land such a change.
func wayOut(bpath string, changes []budget.BudgetChange) []string {
	var loose []string
	for _, c := range changes {
		if c.Loosened {
			k := c.Key
			if c.Path != "" {
				k += " (" + c.Path + ")"
			}
			loose = append(loose, k)
		}
	}
	if len(loose) == 0 {
		return nil
	}
	return []string{fmt.Sprintf("this change edits %s; each limit in force is the stricter of the base's and this change's, so these edits, which loosen the gate, are not in force until it merges: %s. To land them: merge the budget edit on its own first and the models after it (two steps, each reviewed), or have whoever runs CI pass --trust-head-budget for this change",
		bpath, strings.Join(loose, ", "))}
}

// submoduleNotes says of each submodule of s at a model path that a rule
// covers that it is no model file and is not measured.
func submoduleNotes(s *Snapshot, covered func(string) bool) ([]string, error) {
	subs, err := s.Submodules()
	if err != nil {
		return nil, err
	}
	var notes []string
	for _, p := range subs {
		if IsModelPath(p) && covered(p) {
			notes = append(notes, fmt.Sprintf("%s is a git submodule, not a model file: not measured, though a budget rule matches its path", p))
		}
	}
	return notes, nil
}

// pairMoves finds models moved out of every rule: a removed model file
// that a rule covers and an added model file that no rule covers, with the
// same file name, the only such pair for that name, become one rename, so
// that the model is judged by the rule that covered it. Git's rename
// detection pairs a moved file only while its content stays similar; a
// model moved and grown at once would otherwise escape its budget as a new,
// unbudgeted file (a warning).
func pairMoves(all []FileChange, covered func(string) bool) []FileChange {
	removed := map[string][]int{}
	added := map[string][]int{}
	for i, c := range all {
		switch {
		case c.Kind == "removed" && IsModelPath(c.Path) && covered(c.Path):
			removed[path.Base(c.Path)] = append(removed[path.Base(c.Path)], i)
		case c.Kind == "added" && IsModelPath(c.Path) && !covered(c.Path):
			added[path.Base(c.Path)] = append(added[path.Base(c.Path)], i)
		}
	}
	drop := map[int]bool{}
	for name, rs := range removed {
		as := added[name]
		if len(rs) != 1 || len(as) != 1 {
			continue
		}
		r, a := &all[rs[0]], &all[as[0]]
		*a = FileChange{Path: a.Path, OldPath: r.Path, Kind: "renamed", OldHash: r.OldHash, NewHash: a.NewHash}
		drop[rs[0]] = true
	}
	if len(drop) == 0 {
		return all
	}
	out := make([]FileChange, 0, len(all)-len(drop))
	for i, c := range all {
		if !drop[i] {
			out = append(out, c)
		}
	}
	return out
}

// judged returns which paths are models to judge: files with a model
// extension (.onnx, .tflite) other than the budget file. A folder glob
// ("models/**") also matches the notes and external data beside the
// models, which are no models to measure.
func judged(bpath string) func(string) bool {
	return func(p string) bool {
		return p != bpath && IsModelPath(p)
	}
}

// dimsOf returns the dims a model is measured with: the first file's
// value of each dim, then the next file's for dims it leaves unbound (the
// base's before the head's, so that a change cannot shrink a dim to pass,
// but can bind one a new model needs).
func bindingsOf(p string, cli Bindings, files ...*budget.File) *boundSet {
	var all []budget.Binding
	name := ""
	seen := map[string]bool{}
	for _, f := range files {
		if name == "" {
			name = f.Name
		}
		bs, _ := f.Bindings(p)
		for _, b := range bs {
			if k := b.Kind + "\x00" + b.Name; !seen[k] {
				seen[k] = true
				all = append(all, b)
			}
		}
	}
	return bindingsFor(name, all, cli, false)
}

// concerns reports whether one of the budget changes can change how the
// model at p is judged: a change in a rule or waiver whose glob matches p,
// or in the device of a rule that matches p, in either file.
func concerns(changes []budget.BudgetChange, base, head *budget.File, p string) bool {
	devices := map[string]bool{}
	for _, f := range []*budget.File{base, head} {
		for _, r := range f.Match(p) {
			devices[r.Device] = true
		}
	}
	for _, c := range changes {
		if c.Path != "" {
			if ok, _ := doublestar.Match(c.Path, p); ok {
				return true
			}
			continue
		}
		for d := range devices {
			if c.Key == "devices."+d || strings.HasPrefix(c.Key, "devices."+d+".") {
				return true
			}
		}
	}
	return false
}

// measureJobs measures blobs, each with its dims, sharing one pool per set
// of dims, with the cache; it returns each job's figures and the files
// besides the model that its measurement read. With layers the figures
// carry the per-layer view (measured, or read from the cache, only then).
func measureJobs(jobs []blobJob, dims []*boundSet, digests, layers bool, cache *Cache, stats *Stats) ([]*measure.Metrics, [][]string) {
	metrics := make([]*measure.Metrics, len(jobs))
	deps := make([][]string, len(jobs))
	groups := map[string][]int{}
	var order []string
	keys := map[*boundSet]string{} // a set shared by both sides of a model is keyed once
	for i, d := range dims {
		k, ok := keys[d]
		if !ok {
			k = d.key()
			keys[d] = k
		}
		if _, ok := groups[k]; !ok {
			order = append(order, k)
		}
		groups[k] = append(groups[k], i)
	}
	for _, k := range order {
		idx := groups[k]
		sub := make([]blobJob, len(idx))
		for j, i := range idx {
			sub[j] = jobs[i]
		}
		out := measureBlobs(sub, dims[idx[0]].options(measure.Options{Layers: layers, Digests: digests}), cache, stats)
		for j, i := range idx {
			metrics[i], deps[i] = out[j].Metrics, out[j].deps
			dims[i].judge(metrics[i])
		}
	}
	return metrics, deps
}

// withTarget reports whether a device of the budget files names a target:
// its estimates are made from the per-layer view.
func withTarget(files ...*budget.File) bool {
	for _, f := range files {
		if f == nil {
			continue
		}
		for _, d := range f.Devices {
			if d != nil && d.Target != nil {
				return true
			}
		}
	}
	return false
}

// envError is the first measurement error caused by a missing object: the
// environment's fault, not the model's.
func envError(metrics []*measure.Metrics) error {
	for _, m := range metrics {
		if m != nil && m.Error != "" && isEnvMessage(m.Error) {
			return &EnvError{Err: errors.New(m.Error)}
		}
	}
	return nil
}

// pair indexes a change's head and base jobs; -1 when the side is absent.
type pair struct{ base, head int }

// dropUnreadData removes the models listed only because a file near them
// changed (viaData) whose measurement read none of the changed files: a
// README edited beside a model does not change the model. A side that
// could not be measured keeps the model listed, since what it would have
// read is unknown.
func dropUnreadData(changes []FileChange, pairs []pair, all []FileChange, metrics []*measure.Metrics, deps [][]string) ([]FileChange, []pair) {
	touched := map[string]bool{}
	for _, c := range all {
		touched[c.Path] = true
		if c.OldPath != "" {
			touched[c.OldPath] = true
		}
	}
	reads := func(job int) bool {
		if job < 0 {
			return false
		}
		if metrics[job].Error != "" {
			return true
		}
		for _, d := range deps[job] {
			if touched[d] {
				return true
			}
		}
		return false
	}
	keptChanges := make([]FileChange, 0, len(changes))
	keptPairs := make([]pair, 0, len(changes))
	for i, c := range changes {
		if c.viaData && !reads(pairs[i].head) && !reads(pairs[i].base) {
			continue
		}
		keptChanges = append(keptChanges, c)
		keptPairs = append(keptPairs, pairs[i])
	}
	return keptChanges, keptPairs
}

func commitOf(s *Snapshot) string {
	if s.tree == nil {
		return ""
	}
	return s.Commit.String()
}

// isEnvMessage recognises measurement errors caused by missing objects.
func isEnvMessage(msg string) bool {
	return strings.Contains(msg, "is missing from the object store") || strings.Contains(msg, "not in the local LFS store")
}

// withDataChanges keeps the changes of model files and adds, as modified,
// the unchanged models of a folder in or below which another file changed:
// a model whose external data file (weights.bin beside model.onnx, or
// data/weights.bin under it) changed, or was removed, has changed too,
// though its own blob has not.
func withDataChanges(rg *Range, all []FileChange, want func(string) bool) ([]FileChange, error) {
	var out []FileChange
	dataDirs := map[string]bool{}
	listed := map[string]bool{}
	for _, c := range all {
		if c.OldPath != "" {
			if n, ok := narrowRename(c, want); ok {
				out = append(out, n)
				listed[n.Path] = true
				if n.Kind == "renamed" {
					continue
				}
			}
		} else if want(c.Path) {
			out = append(out, c)
			listed[c.Path] = true
			continue
		}
		// External data lies in the model's folder or below it, so a
		// changed file concerns the models of its folder and of every
		// folder above.
		for _, p := range []string{c.Path, c.OldPath} {
			for d := path.Dir(p); p != "" && !dataDirs[d]; d = path.Dir(d) {
				dataDirs[d] = true
				if d == "." || d == "/" {
					break
				}
			}
		}
	}
	if len(dataDirs) == 0 {
		return out, nil
	}
	paths, err := rg.Head.Paths()
	if err != nil {
		return nil, err
	}
	for _, p := range paths {
		if listed[p] || !want(p) || !dataDirs[path.Dir(p)] {
			continue
		}
		oh, inBase := rg.Base.Hash(p)
		nh, _ := rg.Head.Hash(p)
		if inBase {
			out = append(out, FileChange{Path: p, Kind: "modified", OldHash: oh, NewHash: nh, viaData: true})
		}
	}
	sortChanges(out)
	return out, nil
}

// plural says a count with its noun: "1 model", "3 models".
func plural(n int, one, many string) string {
	if n == 1 {
		return "1 " + one
	}
	return fmt.Sprintf("%d %s", n, many)
}
