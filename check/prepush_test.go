package check

import (
	"fmt"
	"strings"
	"testing"

	"github.com/loadline/loadline/budget"
)

// TestPrePushSeveralRefs: a push of two branches at once (git gives one
// pre-push line per ref) judges each range and joins them: every range's
// models are listed, and the verdict is the worst of them whatever the
// order of the lines.
func TestPrePushSeveralRefs(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	base := g.commit("base")
	g.write("m.onnx", smallModel(t, 16))
	within := g.commit("wider, within the params limit")
	g.git("checkout", "-q", "-b", "wide", base)
	g.write("m.onnx", smallModel(t, 200))
	over := g.commit("much wider, over the params limit")
	lines := []string{
		fmt.Sprintf("refs/heads/main %s refs/heads/main %s", within, base),
		fmt.Sprintf("refs/heads/wide %s refs/heads/wide %s", over, base),
	}
	for _, order := range [][]string{lines, {lines[1], lines[0]}} {
		res, _, err := Run(Options{Dir: g.dir, PrePush: strings.NewReader(strings.Join(order, "\n") + "\n"), NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		var st []budget.Status
		for _, m := range res.Models {
			st = append(st, m.Status)
		}
		if res.Verdict != budget.Fail || len(res.Models) != 2 {
			t.Errorf("%q: verdict %s with model statuses %v; want fail with two models", order[0][:15], res.Verdict, st)
		}
	}
	// The within-budget branch alone passes.
	res, _, err := Run(Options{Dir: g.dir, PrePush: strings.NewReader(lines[0] + "\n"), NoCache: true})
	if err != nil || res.Verdict != budget.Pass || len(res.Models) != 1 {
		t.Fatalf("main alone: %v, verdict %v", err, res)
	}
}
