package check

import (
	"strings"
	"testing"

	"github.com/loadline/loadline/budget"
)

// TestSignoffReadsReleases builds a repository with release tags and
// checks what the sign-off gathers: the version tags that are ancestors of
// the revision, oldest first, each judged by its own budget file, and the
// second run measuring nothing. Params of smallModel: 32·width + 4
// (build.ConvClassifier, hand-worked in its test): 260, 516, 772.
func TestSignoffReadsReleases(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("models/m.onnx", smallModel(t, 8))
	g.commit("one")
	g.git("tag", "v1.0.0")
	g.git("tag", "experiment") // not a version: not a release
	g.write("models/m.onnx", smallModel(t, 16))
	g.commit("two")
	g.git("tag", "-a", "v1.1.0", "-m", "annotated release")
	// A release on a branch the revision does not contain is not earlier.
	g.git("checkout", "-q", "-b", "side")
	g.write("models/m.onnx", smallModel(t, 200))
	g.commit("side")
	g.git("tag", "v9.0.0")
	g.git("checkout", "-q", "main")
	g.write("models/m.onnx", smallModel(t, 24))
	g.write("models/new.onnx", smallModel(t, 8))
	head := g.commit("three")

	s, stats, err := Signoff(SignoffOptions{Dir: g.dir})
	if err != nil {
		t.Fatal(err)
	}
	if s.Revision.Commit != head || s.BudgetBlob == "" || s.AnalyzerVersion != AnalyzerVersion || s.Date.IsZero() {
		t.Errorf("header %+v", s)
	}
	var tags []string
	for _, r := range s.Releases {
		tags = append(tags, r.Tag)
		if r.Error != "" || r.Result == nil {
			t.Errorf("release %s: %q", r.Tag, r.Error)
		}
	}
	if strings.Join(tags, ",") != "v1.0.0,v1.1.0" {
		t.Fatalf("releases %v, want v1.0.0,v1.1.0", tags)
	}
	params := func(r *budget.Result, p string) int64 {
		for _, m := range r.Models {
			if m.Path == p && m.Head != nil {
				return m.Head.Params
			}
		}
		return -1
	}
	if a, b, c := params(s.Releases[0].Result, "models/m.onnx"), params(s.Releases[1].Result, "models/m.onnx"), params(s.Current, "models/m.onnx"); a != 260 || b != 516 || c != 772 {
		t.Errorf("params across releases %d, %d, %d; want 260, 516, 772", a, b, c)
	}
	if len(s.Current.Models) != 2 || s.Current.Verdict != budget.Pass {
		t.Errorf("current: %d models, verdict %s", len(s.Current.Models), s.Current.Verdict)
	}
	if stats.Measured.Load() != 3 {
		t.Errorf("first run measured %d blobs, want 3: three versions of m.onnx; new.onnx is the blob of v1.0.0's m.onnx, measured once", stats.Measured.Load())
	}
	_, again, err := Signoff(SignoffOptions{Dir: g.dir})
	if err != nil {
		t.Fatal(err)
	}
	if again.Measured.Load() != 0 {
		t.Errorf("second run measured %d blobs, want 0 (all cached)", again.Measured.Load())
	}

	for _, c := range []struct {
		o    SignoffOptions
		want string
	}{
		{SignoffOptions{Releases: "v1.0*"}, "v1.0.0"},
		{SignoffOptions{Last: 1}, "v1.1.0"},
		{SignoffOptions{Since: "HEAD~2"}, "HEAD~2"},
		{SignoffOptions{Rev: "v1.1.0"}, "v1.0.0"},
		{SignoffOptions{Releases: "experiment"}, "experiment"},
	} {
		c.o.Dir = g.dir
		s, _, err := Signoff(c.o)
		if err != nil {
			t.Fatal(err)
		}
		var got []string
		for _, r := range s.Releases {
			got = append(got, r.Tag)
		}
		if strings.Join(got, ",") != c.want {
			t.Errorf("%+v: releases %v, want %s", c.o, got, c.want)
		}
	}
}

// TestSignoffReleaseWithoutBudget: a release made before the budget file
// existed is listed with the reason, not dropped and not judged by today's
// file.
func TestSignoffReleaseWithoutBudget(t *testing.T) {
	g := newGitRepo(t)
	g.write("models/m.onnx", smallModel(t, 8))
	g.commit("before budgets")
	g.git("tag", "v0.9")
	g.write("loadline.yaml", []byte(runBudget))
	g.commit("budget")
	s, _, err := Signoff(SignoffOptions{Dir: g.dir, NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(s.Releases) != 1 || s.Releases[0].Result != nil || !strings.Contains(s.Releases[0].Error, "has no loadline.yaml") {
		t.Fatalf("releases %+v", s.Releases)
	}
	if _, _, err := Signoff(SignoffOptions{Dir: g.dir, Rev: "v0.9"}); err == nil {
		t.Error("signing off a revision without a budget file passed")
	}
}
