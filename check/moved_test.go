package check

import (
	"strings"
	"testing"

	"github.com/loadline/loadline/budget"
)

// movedBudget covers models/ only: params 5k (width 8 gives 260 params,
// width 200 gives 6,404: over).
const movedBudget = `version: 1
devices:
  porch-cam: {ram: 4MiB, flash: 16MiB}
models:
  - path: "models/**/*.onnx"
    device: porch-cam
    limits: {params: 5k}
`

// wantJudgedByOldRule checks that the moved model fails by the rule of its
// old path, and that the report says so.
func wantJudgedByOldRule(t *testing.T, res *budget.Result, newPath, oldPath string) {
	t.Helper()
	var m *budget.ModelResult
	for i := range res.Models {
		if res.Models[i].Path == newPath {
			m = &res.Models[i]
		}
		if res.Models[i].Path == oldPath {
			t.Errorf("the old path is listed on its own too: %+v", res.Models[i])
		}
	}
	if m == nil {
		t.Fatalf("%s not in the report: %+v", newPath, res.Models)
	}
	if res.Verdict != budget.Fail || m.Status != budget.Fail || m.Unbudgeted || m.OldPath != oldPath || m.Rule != "models/**/*.onnx" {
		t.Fatalf("verdict %s, model %+v: want a failure judged by models/**/*.onnx", res.Verdict, m)
	}
	note := strings.Join(m.Notes, "\n")
	if !strings.Contains(note, "moved from "+oldPath) || !strings.Contains(note, "models/**/*.onnx") {
		t.Fatalf("notes %q do not say the model was judged by its old rule", m.Notes)
	}
}

// TestMovedOutOfEveryRuleJudgedByOldRule: moving an over-budget model to a
// path no rule matches used to make it an unbudgeted warning (exit 0).
func TestMovedOutOfEveryRuleJudgedByOldRule(t *testing.T) {
	t.Run("renamed", func(t *testing.T) {
		g := newGitRepo(t)
		g.write("loadline.yaml", []byte(movedBudget))
		g.write("models/cam.onnx", smallModel(t, 200)) // already over, say waived once
		g.commit("base")
		g.git("rm", "-q", "models/cam.onnx")
		g.write("elsewhere/cam.onnx", smallModel(t, 200)) // the same bytes: a rename to git
		g.commit("move it out of the rule")
		res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		wantJudgedByOldRule(t, res, "elsewhere/cam.onnx", "models/cam.onnx")
	})
	t.Run("moved and grown", func(t *testing.T) {
		// Too different for git's rename detection: a removal and an
		// addition, paired by the file name.
		g := newGitRepo(t)
		g.write("loadline.yaml", []byte(movedBudget))
		g.write("models/cam.onnx", smallModel(t, 8))
		g.commit("base")
		g.git("rm", "-q", "models/cam.onnx")
		g.write("elsewhere/cam.onnx", smallModel(t, 200))
		g.commit("move and grow")
		res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		wantJudgedByOldRule(t, res, "elsewhere/cam.onnx", "models/cam.onnx")
		m := res.Models[0]
		if m.Base == nil || m.Base.Params != 260 || m.Head.Params != 6404 {
			t.Fatalf("base %+v head %+v: want both sides measured (260 → 6,404 params, hand-worked 32·width + 4)", m.Base, m.Head)
		}
	})
	t.Run("staged", func(t *testing.T) {
		g := newGitRepo(t)
		g.write("loadline.yaml", []byte(movedBudget))
		g.write("models/cam.onnx", smallModel(t, 8))
		g.commit("base")
		g.git("rm", "-q", "models/cam.onnx")
		g.write("elsewhere/cam.onnx", smallModel(t, 200))
		g.git("add", "-A")
		res, _, err := Run(Options{Dir: g.dir, Staged: true, NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		wantJudgedByOldRule(t, res, "elsewhere/cam.onnx", "models/cam.onnx")
	})
	t.Run("a new model stays unbudgeted", func(t *testing.T) {
		// Nothing covered was removed: an added model no rule matches is
		// what it always was, a warning.
		g := newGitRepo(t)
		g.write("loadline.yaml", []byte(movedBudget))
		g.write("models/cam.onnx", smallModel(t, 8))
		g.commit("base")
		g.write("elsewhere/cam.onnx", smallModel(t, 200))
		g.commit("add a second copy")
		res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		if len(res.Models) != 1 || !res.Models[0].Unbudgeted || res.Verdict != budget.Warn {
			t.Fatalf("verdict %s, models %+v: want one unbudgeted warning", res.Verdict, res.Models)
		}
	})
	t.Run("tflite moved where no rule names it", func(t *testing.T) {
		// A .tflite file is judged only where a rule names it; moved out
		// of that rule it stays judged, not dropped as a removal.
		g := newGitRepo(t)
		g.write("loadline.yaml", []byte("version: 1\ndevices:\n  d: {ram: 1MiB}\nmodels:\n  - path: \"budgeted/*\"\n    device: d\n    limits: {params: 1M}\n"))
		g.write("budgeted/b.tflite", []byte("TFL3 one"))
		g.commit("base")
		g.git("rm", "-q", "budgeted/b.tflite")
		g.write("free/b.tflite", []byte("TFL3 one"))
		g.commit("move")
		res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		if len(res.Models) != 1 || res.Models[0].Path != "free/b.tflite" || res.Models[0].Rule != "budgeted/*" || res.Models[0].Change != budget.Renamed {
			t.Fatalf("models %+v: want free/b.tflite judged by budgeted/*", res.Models)
		}
	})
}

// TestSubmoduleAtModelPathSkipped: a submodule whose path a model rule
// matches is no model file. check --base used to fail it ("not in HEAD")
// while --staged left it out silently; both skip it now, with a note.
func TestSubmoduleAtModelPathSkipped(t *testing.T) {
	lib := newGitRepo(t)
	lib.write("README", []byte("a vendored repository\n"))
	lib.commit("lib")

	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(movedBudget))
	g.write("models/cam.onnx", smallModel(t, 8))
	g.commit("base")
	// protocol.file.allow: git refuses local submodules by default since 2.38.
	g.git("-c", "protocol.file.allow=always", "submodule", "add", "-q", lib.dir, "models/vendor.onnx")
	g.write("models/cam.onnx", smallModel(t, 16))

	wantSkipped := func(t *testing.T, res *budget.Result) {
		t.Helper()
		if len(res.Models) != 1 || res.Models[0].Path != "models/cam.onnx" || res.Verdict != budget.Pass {
			t.Fatalf("verdict %s, models %+v: want only models/cam.onnx, passing", res.Verdict, res.Models)
		}
		if !strings.Contains(strings.Join(res.Problems, "\n"), "models/vendor.onnx is a git submodule") {
			t.Fatalf("problems %q: no note of the submodule", res.Problems)
		}
	}
	t.Run("staged", func(t *testing.T) {
		g.git("add", "-A")
		res, _, err := Run(Options{Dir: g.dir, Staged: true, NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		wantSkipped(t, res)
	})
	t.Run("base", func(t *testing.T) {
		g.commit("vendor a submodule")
		res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		wantSkipped(t, res)
	})
	t.Run("audit", func(t *testing.T) {
		r, err := OpenRepo(g.dir)
		if err != nil {
			t.Fatal(err)
		}
		res, _, err := Audit(r, "HEAD", Options{NoCache: true})
		if err != nil {
			t.Fatal(err)
		}
		wantSkipped(t, res)
	})
}
