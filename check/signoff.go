package check

import (
	"errors"
	"fmt"
	"io"
	"path"
	"regexp"
	"sort"
	"strings"
	"time"

	"github.com/go-git/go-git/v5/plumbing"
	"github.com/go-git/go-git/v5/plumbing/object"

	"github.com/loadline/loadline/budget"
)

// SignoffOptions are the choices of `loadline signoff`.
type SignoffOptions struct {
	Dir string // a folder inside the repository; "" is the current one
	Rev string // the revision signed off; "" is HEAD
	// Since names one earlier revision to compare with instead of the
	// release tags.
	Since string
	// Releases is a glob the earlier release tags match ("v2.*"); "" takes
	// tags that look like versions (VersionTag).
	Releases string
	// Last is how many of the newest earlier releases to read; 0 is
	// DefaultReleases.
	Last       int
	BudgetFile string // repository path of the budget file; "" is loadline.yaml
	Strict     bool
	NoCache    bool
	Progress   io.Writer
}

// DefaultReleases is how many earlier releases a sign-off reads unless
// told otherwise.
const DefaultReleases = 10

// VersionTag matches the tag names taken for releases by default: v1,
// 1.2, v1.2.3, v2.0.0-rc1, release tags as most teams spell them.
var VersionTag = regexp.MustCompile(`^v?[0-9]+(\.[0-9]+)*([-+][0-9A-Za-z.+-]+)?$`)

// Signoff gathers a release sign-off: every model at the revision judged
// by that revision's budget file, and the same at the earlier releases,
// each release judged by its own budget file. Blobs already measured (at
// another release, or by an earlier check) come from the cache.
func Signoff(o SignoffOptions) (*budget.Signoff, *Stats, error) {
	dir := o.Dir
	if dir == "" {
		dir = "."
	}
	r, err := OpenRepo(dir)
	if err != nil {
		return nil, nil, err
	}
	defer r.Close()
	rev := o.Rev
	if rev == "" {
		rev = "HEAD"
	}
	snap, err := r.Resolve(rev)
	if err != nil {
		return nil, nil, err
	}
	commit, err := r.r.CommitObject(snap.Commit)
	if err != nil {
		return nil, nil, r.missing(rev, err)
	}
	bpath, err := budgetPath(r, o.BudgetFile)
	if err != nil {
		return nil, nil, err
	}
	file, err := requireBudget(snap, bpath, rev)
	if err != nil {
		return nil, nil, err
	}
	blob, _ := snap.Hash(bpath)
	var cache *Cache
	if !o.NoCache {
		cache = NewCache(r)
		defer cache.Close()
	}
	stats := &Stats{}
	out := &budget.Signoff{
		Revision:        budget.Revision{Ref: rev, Commit: snap.Commit.String()},
		Date:            commit.Committer.When.UTC(),
		BudgetFile:      bpath,
		BudgetBlob:      blob.String(),
		AnalyzerVersion: AnalyzerVersion,
		Devices:         file.Capacities(),
		Releases:        []budget.Release{},
		Missing:         signoffMissing(file),
	}
	progress(o.Progress, "loadline: judging every model at %s\n", rev)
	if out.Current, err = judgeAll(snap, file, bpath, out.Date, o.Strict, cache, stats); err != nil {
		return nil, nil, err
	}
	out.Current.Head = out.Revision

	tags, err := earlierReleases(r, commit, o)
	if err != nil {
		return nil, nil, err
	}
	for i, t := range tags {
		progress(o.Progress, "loadline: release %d of %d: %s\n", i+1, len(tags), t.name)
		rel := budget.Release{Tag: t.name, Commit: t.commit.Hash.String(), Date: t.commit.Committer.When.UTC()}
		rs, err := r.Resolve(t.commit.Hash.String())
		if err == nil {
			var f *budget.File
			if f, err = loadBudget(rs, bpath, t.name); err == nil && f == nil {
				err = fmt.Errorf("%s has no %s", t.name, bpath)
			}
			if err == nil {
				rel.Result, err = judgeAll(rs, f, bpath, rel.Date, o.Strict, cache, stats)
			}
		}
		if err != nil {
			var env *EnvError
			if errors.As(err, &env) {
				return nil, nil, err
			}
			rel.Error, rel.Result = oneLineErr(err), nil
		} else {
			rel.Result.Head = budget.Revision{Ref: t.name, Commit: rel.Commit}
		}
		out.Releases = append(out.Releases, rel)
	}
	return out, stats, nil
}

// signoffMissing names what the report cannot state for this budget
// file, so a reader knows what is left out and how to add it.
func signoffMissing(f *budget.File) []string {
	var together, targets bool
	for _, d := range f.Devices {
		together = together || len(d.Models) > 0
		targets = targets || d.Target != nil
	}
	var out []string
	if !together {
		out = append(out, "Device totals: no device of the budget file lists the models it runs together (devices.NAME.models), so each model is judged on its own and a device's shared flash, RAM and core time are not.")
	}
	if !targets {
		out = append(out, "Latency, energy and operator support: no device names a target (devices.NAME.target), so none are estimated.")
	}
	return out
}

func progress(w io.Writer, format string, args ...any) {
	if w != nil {
		fmt.Fprintf(w, format, args...)
	}
}

func oneLineErr(err error) string {
	return strings.NewReplacer("\n", " ", "\r", " ").Replace(err.Error())
}

// judgeAll measures every model of a snapshot and judges each, unchanged,
// against the budget file: the state of a revision, not a change.
// Waivers expire by the revision's own date, as they stood when it was
// made. It is the audit's core (judgeSnapshot), as check --all runs it.
func judgeAll(s *Snapshot, f *budget.File, bpath string, day time.Time, strict bool, cache *Cache, stats *Stats) (*budget.Result, error) {
	// The sign-off shows every model's live memory over its schedule.
	return judgeSnapshot(s, f, bpath, budget.EvalOptions{Strict: strict, Today: day}, Bindings{}, true, cache, stats, nil)
}

type releaseTag struct {
	name   string
	commit *object.Commit
}

// earlierReleases lists the releases to compare with, oldest first: the
// --since revision alone, or the newest o.Last tags matching the pattern
// whose commits are ancestors of the revision signed off (the revision's
// own commit excluded: it is the release being signed).
func earlierReleases(r *Repo, head *object.Commit, o SignoffOptions) ([]releaseTag, error) {
	if o.Since != "" {
		h, err := r.r.ResolveRevision(plumbing.Revision(o.Since))
		if err != nil {
			return nil, r.missing(o.Since, err)
		}
		c, err := r.r.CommitObject(*h)
		if err != nil {
			return nil, r.missing(o.Since, err)
		}
		return []releaseTag{{o.Since, c}}, nil
	}
	if o.Releases != "" {
		if _, err := path.Match(o.Releases, ""); err != nil {
			return nil, fmt.Errorf("--releases %q: %w", o.Releases, err)
		}
	}
	refs, err := r.r.Tags()
	if err != nil {
		return nil, &EnvError{Err: fmt.Errorf("listing tags: %w", err)}
	}
	var out []releaseTag
	err = refs.ForEach(func(ref *plumbing.Reference) error {
		name := ref.Name().Short()
		if o.Releases != "" {
			if ok, _ := path.Match(o.Releases, name); !ok {
				return nil
			}
		} else if !VersionTag.MatchString(name) {
			return nil
		}
		h, err := r.r.ResolveRevision(plumbing.Revision("refs/tags/" + name))
		if err != nil {
			return nil // a tag of a tree or blob is no release
		}
		c, err := r.r.CommitObject(*h)
		if err != nil || c.Hash == head.Hash {
			return nil
		}
		if ok, err := c.IsAncestor(head); err != nil || !ok {
			return nil
		}
		out = append(out, releaseTag{name, c})
		return nil
	})
	if err != nil {
		return nil, err
	}
	sort.Slice(out, func(i, j int) bool {
		ti, tj := out[i].commit.Committer.When, out[j].commit.Committer.When
		if !ti.Equal(tj) {
			return ti.Before(tj)
		}
		return out[i].name < out[j].name
	})
	last := o.Last
	if last <= 0 {
		last = DefaultReleases
	}
	if len(out) > last {
		out = out[len(out)-last:]
	}
	return out, nil
}
