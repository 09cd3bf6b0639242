package check

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
	"github.com/loadline/loadline/model/tflite"
	"github.com/loadline/loadline/report"
)

// runBudget is an invented budget for the pipeline tests: small-model
// params 260 (width 8) and 516 (width 16) pass, 6,404 (width 200) fails.
const runBudget = `version: 1
devices:
  porch-cam: {ram: 4MiB, flash: 16MiB}
models:
  - path: "**/*.onnx"
    device: porch-cam
    limits: {params: 5k}
`

func TestPrePushChecksPushedCommits(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	remoteTip := g.commit("base")
	g.write("m.onnx", smallModel(t, 200))
	local := g.commit("over budget")
	// git's pre-push stdin: <local ref> <local sha> <remote ref> <remote sha>.
	stdin := fmt.Sprintf("refs/heads/main %s refs/heads/main %s\n", local, remoteTip)
	res, _, err := Run(Options{Dir: g.dir, PrePush: strings.NewReader(stdin), NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if res.Verdict != budget.Fail || len(res.Models) != 1 {
		t.Fatalf("verdict %s with %d models, want fail with 1", res.Verdict, len(res.Models))
	}
	// Input that cannot be read is an error, not an empty push: a line
	// longer than the scanner takes used to end the input silently, and
	// the refs after it went unchecked.
	long := strings.Repeat("x", 1<<17) + "\n" + stdin
	if _, _, err := Run(Options{Dir: g.dir, PrePush: strings.NewReader(long), NoCache: true}); err == nil {
		t.Error("unreadable pre-push input passed")
	}
	// A deletion pushes nothing to judge.
	zero := strings.Repeat("0", 40)
	res, _, err = Run(Options{Dir: g.dir, PrePush: strings.NewReader(fmt.Sprintf("(delete) %s refs/heads/old %s\n", zero, remoteTip)), NoCache: true})
	if err != nil || res.Verdict != budget.Pass || len(res.Models) != 0 {
		t.Fatalf("deletion: %v, %+v", err, res)
	}
}

// externalModel is a model whose Conv weight lives in weights.bin beside it.
func externalModel(t *testing.T, width int64) (modelBytes, weightBytes []byte) {
	t.Helper()
	return externalModelAt(t, width, "weights.bin")
}

// externalModelAt is externalModel with the weights at location, a path
// from the model's folder.
func externalModelAt(t *testing.T, width int64, location string) (modelBytes, weightBytes []byte) {
	t.Helper()
	b := build.New("ext", 13)
	x := b.Input("x", model.Float32, 1, 3, 8, 8)
	x = b.Conv("conv", x, build.Conv2D(width, 3, 1, 1))
	b.Output(x)
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	w := m.Graph.Initializers[0]
	weightBytes, err = w.RawBytes()
	if err != nil {
		t.Fatal(err)
	}
	weightBytes = append([]byte{}, weightBytes...)
	w.Data = model.TensorData{}
	data, err := onnx.EncodeWithExternal(m, func(*model.Tensor) (string, int64) { return location, 0 })
	if err != nil {
		t.Fatal(err)
	}
	return data, weightBytes
}

func TestExternalDataAtTheSameRevision(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	m8, w8 := externalModel(t, 8)
	g.write("models/ext/model.onnx", m8)
	g.write("models/ext/weights.bin", w8)
	g.commit("base")
	m16, w16 := externalModel(t, 16)
	g.write("models/ext/model.onnx", m16)
	g.write("models/ext/weights.bin", w16)
	g.commit("wider")
	// The working tree holds something else entirely: what is checked is
	// what is committed.
	g.write("models/ext/weights.bin", []byte("not weights"))
	res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD"})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Models) != 1 {
		t.Fatalf("%d models", len(res.Models))
	}
	m := res.Models[0]
	// Conv 3→w, 3×3, no bias: 27·w params; sparsity scan reads the external
	// bytes, so a wrong or missing file would show as an error.
	if m.Error != "" || m.Base.Params != 27*8 || m.Head.Params != 27*16 {
		t.Fatalf("error %q, params %d → %d; want 216 → 432", m.Error, m.Base.Params, m.Head.Params)
	}
	// flash counts the external weights too: 27·16 float32 = 1,728 bytes
	// beside the model file (hand-worked).
	if m.Head.ExternalBytes != 27*16*4 || m.Head.Flash != m.Head.FileBytes+27*16*4 {
		t.Errorf("external %d, flash %d, file %d: flash must be file + external data", m.Head.ExternalBytes, m.Head.Flash, m.Head.FileBytes)
	}
	// A model whose external file is not committed fails with a message
	// that names it.
	g.git("rm", "-q", "--cached", "models/ext/weights.bin")
	g.git("commit", "-q", "-m", "forgot the weights")
	res, _, err = Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
	if err != nil {
		t.Fatalf("missing external data is the model's error, not the run's: %v", err)
	}
	if len(res.Models) != 1 || !strings.Contains(res.Models[0].Error, "weights.bin") || res.Verdict != budget.Fail {
		t.Fatalf("missing external data: want the model failed with an error naming weights.bin, got %s %+v", res.Verdict, res.Models)
	}
}

func TestShallowCheckIsEnvironmentError(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	base := g.commit("base")
	g.write("m.onnx", smallModel(t, 12))
	g.commit("change")
	clone := filepath.Join(t.TempDir(), "clone")
	if out, err := exec.Command("git", "clone", "-q", "--depth", "1", "file://"+g.dir, clone).CombinedOutput(); err != nil {
		t.Fatalf("clone: %v %s", err, out)
	}
	_, _, err := Run(Options{Dir: clone, Base: base})
	var env *EnvError
	if !errors.As(err, &env) || !strings.Contains(err.Error(), "shallow") {
		t.Fatalf("want an environment error about the shallow clone, got %v", err)
	}
}

func TestGitHubBaseFromEnvironment(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	g.git("branch", "release")
	g.git("checkout", "-q", "-b", "feature")
	g.write("m.onnx", smallModel(t, 200))
	g.commit("change")
	// GITHUB_BASE_REF names the branch; loadline looks it up on origin.
	g.git("update-ref", "refs/remotes/origin/release", "release")
	env := map[string]string{"GITHUB_BASE_REF": "release"}
	res, _, err := Run(Options{Dir: g.dir, Getenv: func(k string) string { return env[k] }, NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if res.Base.Ref != "origin/release" || res.Verdict != budget.Fail {
		t.Fatalf("base %q verdict %s", res.Base.Ref, res.Verdict)
	}
	// A base branch that was not fetched: the hint is a fetch that works
	// (it said git fetch origin origin/develop).
	env["GITHUB_BASE_REF"] = "develop"
	_, _, err = Run(Options{Dir: g.dir, Getenv: func(k string) string { return env[k] }, NoCache: true})
	var ee *EnvError
	if !errors.As(err, &ee) || !strings.Contains(ee.Hint, "git fetch origin +refs/heads/develop:refs/remotes/origin/develop") {
		t.Errorf("unfetched base: %v; want a hint with a fetch of the branch", err)
	}
}

// TestCacheExternalDataOfEachCopy: the same model blob in two folders
// reads the external data beside each copy; a cached entry of one copy
// must not answer for the other.
func TestCacheExternalDataOfEachCopy(t *testing.T) {
	g := newGitRepo(t)
	m8, w8 := externalModel(t, 8)
	g.write("models/a/model.onnx", m8)
	g.write("models/a/weights.bin", w8)
	g.write("models/b/model.onnx", m8) // a copy whose weights were not committed
	g.commit("two copies")
	r, s := snapshotAt(t, g.dir, "HEAD")
	cache := NewCache(r)
	var st Stats
	if m := measureBlobs([]blobJob{{s, "models/a/model.onnx"}}, measure.Options{}, cache, &st)[0]; m.Error != "" {
		t.Fatalf("models/a: %s", m.Error)
	}
	m := measureBlobs([]blobJob{{s, "models/b/model.onnx"}}, measure.Options{}, cache, &st)[0]
	if !strings.Contains(m.Error, "models/b/weights.bin") {
		t.Fatalf("models/b has no weights.bin beside it, yet measured without error (cache hits %d): %q", st.CacheHits.Load(), m.Error)
	}
}

// TestRunModelRenamedAway: a model renamed to a path that is no model is
// judged as removed; it used to be measured at the new path and fail as an
// unsupported format.
func TestRunModelRenamedAway(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	g.git("mv", "m.onnx", "m.onnx.bak")
	g.commit("retire the model")
	res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Models) != 1 || res.Models[0].Path != "m.onnx" || res.Models[0].Change != budget.Removed || res.Models[0].Error != "" || res.Verdict == budget.Fail {
		t.Fatalf("verdict %s, models %+v; want m.onnx removed, no error", res.Verdict, res.Models)
	}
}

// TestExternalDataInASubfolder: external data may sit in a folder below
// the model's; a change to it alone changes the model.
func TestExternalDataInASubfolder(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	m, w := externalModelAt(t, 8, "data/weights.bin")
	g.write("models/ext/model.onnx", m)
	g.write("models/ext/data/weights.bin", w)
	g.commit("base")
	g.write("models/ext/data/weights.bin", make([]byte, len(w))) // pruned to zeros
	g.commit("new weights, same graph")
	for _, cache := range []bool{false, true, true} { // uncached, cold, warm
		res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: !cache})
		if err != nil {
			t.Fatal(err)
		}
		if len(res.Models) != 1 || res.Models[0].Path != "models/ext/model.onnx" || res.Models[0].Error != "" {
			t.Fatalf("cache %v: models %+v; want models/ext/model.onnx modified, measured", cache, res.Models)
		}
	}
}

// TestRuleGlobSelectsOnlyModelFiles: a rule written as a folder glob
// ("models/**") covers the models in it; the notes and data files beside
// them are no models, and must not be measured as ones.
func TestRuleGlobSelectsOnlyModelFiles(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte("version: 1\ndevices:\n  d: {ram: 64MiB}\nmodels:\n  - path: \"models/**\"\n    device: d\n    limits: {params: 1M}\n"))
	g.write("models/kws/m.onnx", smallModel(t, 8))
	g.write("models/kws/README.md", []byte("trained on the May set"))
	g.commit("base")
	g.write("models/kws/m.onnx", smallModel(t, 12))
	g.write("models/kws/README.md", []byte("trained on the June set"))
	g.commit("retrain")
	res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Models) != 1 || res.Models[0].Path != "models/kws/m.onnx" || res.Verdict != budget.Pass {
		t.Fatalf("verdict %s, models %+v; want models/kws/m.onnx alone, passing", res.Verdict, res.Models)
	}
}

// TestBudgetPathSpellings: --budget names the file from the repository
// root; "./loadline.yaml" and an absolute path into the working tree are
// the same file, and a path that leaves the repository is a budget-file
// error that says what to give.
func TestBudgetPathSpellings(t *testing.T) {
	g := newGitRepo(t)
	g.write("ci/budget.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	g.write("m.onnx", smallModel(t, 200))
	g.commit("over budget")
	for _, p := range []string{"ci/budget.yaml", "./ci/budget.yaml", "ci//budget.yaml", filepath.Join(g.dir, "ci", "budget.yaml")} {
		res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", BudgetFile: p, NoCache: true})
		if err != nil {
			t.Errorf("--budget %s: %v", p, err)
			continue
		}
		if res.Verdict != budget.Fail {
			t.Errorf("--budget %s: verdict %s, want fail", p, res.Verdict)
		}
	}
	_, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", BudgetFile: "../budget.yaml", NoCache: true})
	var bf *BudgetFileError
	if !errors.As(err, &bf) || !strings.Contains(err.Error(), "from the repository root") {
		t.Errorf("--budget ../budget.yaml: %v; want a budget-file error naming the repository root", err)
	}
}

// TestStagedIgnoresPullRequestBase: --staged compares the index with HEAD
// also when a pre-commit hook runs inside a pull-request job; the pull
// request's base used to replace HEAD, and without a merge-base, so the
// commits already on the branch were judged as staged changes.
func TestStagedIgnoresPullRequestBase(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	g.git("update-ref", "refs/remotes/origin/main", "HEAD")
	g.git("checkout", "-q", "-b", "feature")
	g.write("m.onnx", smallModel(t, 200))
	g.commit("over budget, already committed")
	env := map[string]string{"GITHUB_BASE_REF": "main"}
	res, _, err := Run(Options{Dir: g.dir, Staged: true, Getenv: func(k string) string { return env[k] }, NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if res.Base.Ref != "HEAD" || len(res.Models) != 0 {
		t.Fatalf("base %q, %d model(s); want HEAD and nothing staged", res.Base.Ref, len(res.Models))
	}
}

// TestStagedIntentToAdd: a file added with git add -N is not staged
// content (git commit leaves it out); its index entry names a blob git
// never wrote, which failed the check as a missing object (exit 3).
func TestStagedIntentToAdd(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	g.write("later.onnx", smallModel(t, 200))
	g.git("add", "-N", "later.onnx")
	res, _, err := Run(Options{Dir: g.dir, Staged: true, NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Models) != 0 || res.Verdict != budget.Pass {
		t.Fatalf("verdict %s, models %+v; want nothing staged", res.Verdict, res.Models)
	}
}

// TestRunDoesNotReadUnrelatedBlobs: listing a revision's files reads its
// trees, not its blobs. A blobless clone lacks the blobs of files nobody
// changed; loading them all (tree.Files) failed the check as a missing
// object and read every model's bytes besides.
func TestRunDoesNotReadUnrelatedBlobs(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.write("docs/manual.txt", []byte("a blob this clone does not have"))
	g.commit("base")
	g.write("m.onnx", smallModel(t, 12))
	g.write("notes.txt", []byte("retrained"))
	g.commit("retrain")
	blob := g.git("rev-parse", "HEAD:docs/manual.txt")
	if err := os.Remove(filepath.Join(g.dir, ".git", "objects", blob[:2], blob[2:])); err != nil {
		t.Fatal(err)
	}
	res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Models) != 1 || res.Models[0].Error != "" {
		t.Fatalf("models %+v; want m.onnx measured", res.Models)
	}
}

// TestUnmeasurableBaseIsNotANewModel: when the base side of a modified
// model cannot be measured, a growth rule says so, with the reason; it
// used to call the model new.
func TestUnmeasurableBaseIsNotANewModel(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte("version: 1\ndevices:\n  d: {ram: 64MiB}\nmodels:\n  - path: \"*.onnx\"\n    device: d\n    limits: {params: 1M}\n    growth: {params: 1%}\n"))
	g.write("m.onnx", []byte("a half-written export"))
	g.commit("base")
	g.write("m.onnx", smallModel(t, 200))
	g.commit("head")
	res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	var growth string
	for _, c := range res.Models[0].Checks {
		if c.Kind == "growth" {
			growth = c.Reason
		}
	}
	if strings.Contains(growth, "new model") || !strings.Contains(growth, "cannot be computed: m.onnx") {
		t.Errorf("growth reason %q; want the base's measuring error, not a new model", growth)
	}
}

// TestNotesBesideAModelDoNotChangeIt: a model is listed for a change
// near it only when it reads the changed file as external data; a README
// edited beside it used to list it as modified in every report.
func TestNotesBesideAModelDoNotChangeIt(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("models/kws/m.onnx", smallModel(t, 8))
	m, w := externalModel(t, 8)
	g.write("models/ext/model.onnx", m)
	g.write("models/ext/weights.bin", w)
	g.write("models/kws/README.md", []byte("May set"))
	g.write("models/ext/README.md", []byte("May set"))
	g.commit("base")
	g.write("models/kws/README.md", []byte("June set"))
	g.write("models/ext/README.md", []byte("June set"))
	g.commit("notes only")
	for _, cache := range []bool{false, true, true} { // uncached, cold, warm
		res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: !cache})
		if err != nil {
			t.Fatal(err)
		}
		if len(res.Models) != 0 {
			t.Fatalf("cache %v: %d model(s) listed, first %s; notes changed, no model did", cache, len(res.Models), res.Models[0].Path)
		}
	}
}

// TestModelBehindASymbolicLink: a model path that is a link inside the
// repository (current.onnx -> v1.onnx) is measured as the file it names;
// the link's own blob, the target's path, was measured and failed as not
// an ONNX model. A link that leaves the repository says so.
func TestModelBehindASymbolicLink(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("models/v1.onnx", smallModel(t, 8))
	if err := os.Symlink("v1.onnx", filepath.Join(g.dir, "models", "current.onnx")); err != nil {
		t.Skip("no symbolic links here:", err)
	}
	g.commit("base")
	g.write("models/v2.onnx", smallModel(t, 16))
	os.Remove(filepath.Join(g.dir, "models", "current.onnx"))
	os.Symlink("v2.onnx", filepath.Join(g.dir, "models", "current.onnx"))
	g.commit("current is v2")
	res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	var current *budget.ModelResult
	for i, m := range res.Models {
		if m.Path == "models/current.onnx" {
			current = &res.Models[i]
		}
	}
	// smallModel params: 28·w + 4·w + 4 (hand-worked): 260 at width 8, 516 at 16.
	if current == nil || current.Error != "" || current.Base.Params != 260 || current.Head.Params != 516 {
		t.Fatalf("models %+v; want models/current.onnx measured through the link, 260 → 516 params", res.Models)
	}
	os.Remove(filepath.Join(g.dir, "models", "current.onnx"))
	os.Symlink("../../outside.onnx", filepath.Join(g.dir, "models", "current.onnx"))
	g.commit("a link out of the repository")
	res, _, err = Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Models) != 1 || !strings.Contains(res.Models[0].Error, "symbolic link") {
		t.Fatalf("models %+v; want an error about the link", res.Models)
	}
}

// TestBudgetFileThatIsAFolder: a loadline.yaml that is a folder is a
// budget-file error that says so; it was reported as no budget file.
func TestBudgetFileThatIsAFolder(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml/devices.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	g.write("m.onnx", smallModel(t, 12))
	g.commit("change")
	for _, staged := range []bool{false, true} {
		o := Options{Dir: g.dir, Base: "HEAD~1", NoCache: true, Staged: staged}
		_, _, err := Run(o)
		var bf *BudgetFileError
		if !errors.As(err, &bf) || !strings.Contains(err.Error(), "is a folder") {
			t.Errorf("staged %v: %v; want a budget-file error saying loadline.yaml is a folder", staged, err)
		}
	}
}

// TestPrePushNewBranchWithoutDefaultBranch: pushing a new branch from a
// repository that has no main, master or origin/HEAD judges its models as
// added; the push used to be refused with exit 3 and a hint (--base) that
// a hook cannot take.
func TestPrePushNewBranchWithoutDefaultBranch(t *testing.T) {
	g := newGitRepo(t)
	g.git("checkout", "-q", "-b", "trunk")
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 200))
	local := g.commit("first")
	stdin := fmt.Sprintf("refs/heads/trunk %s refs/heads/trunk %s\n", local, strings.Repeat("0", 40))
	res, _, err := Run(Options{Dir: g.dir, PrePush: strings.NewReader(stdin), NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if res.Verdict != budget.Fail || len(res.Models) != 1 || res.Models[0].Change != budget.Added {
		t.Fatalf("verdict %s, models %+v; want m.onnx added and over its params limit", res.Verdict, res.Models)
	}
	if len(res.Problems) == 0 || !strings.Contains(res.Problems[0], "no default branch") {
		t.Errorf("problems %q; want a note that there was nothing to compare with", res.Problems)
	}
}

// TestRemovedBudgetFileIsReported: a change that deletes the budget file
// is judged by the base's and says it removes the gate; it went unmentioned.
func TestRemovedBudgetFileIsReported(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	g.git("rm", "-q", "loadline.yaml")
	g.write("m.onnx", smallModel(t, 200))
	g.commit("no more budget")
	res, _, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD", NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if res.Verdict != budget.Fail || len(res.Problems) == 0 || !strings.Contains(res.Problems[0], "loadline.yaml is removed in this change") {
		t.Fatalf("verdict %s, problems %q; want fail by the base's budget and the removal named", res.Verdict, res.Problems)
	}
}

// kwsModel is a small int8 keyword-spotting network in TFLite, built with
// the encoder, whose first convolution has width filters.
func kwsModel(t *testing.T, width int32) []byte {
	t.Helper()
	b := tflite.NewBuilder(tflite.Int8)
	x := b.Input("mfcc", 1, 49, 10, 1)
	y := b.Conv2D("conv", x, width, 3, 2, true, "RELU")
	y = b.DepthwiseConv2D("dw", y, 3, 1, true, "RELU")
	y = b.AveragePool2D("pool", y)
	y = b.Reshape("flat", y, 1, width)
	b.Output(b.Softmax("prob", b.FullyConnected("fc", y, 12, "NONE")))
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	data, err := tflite.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	return data
}

// TestTFLiteModelGrows: a .tflite model that grows in a real repository is
// judged as an ONNX model is: measured from git objects, its ram the
// runtime arena plus persistent bytes, the growth failing the check, the
// reports naming it, and the second check answered from the cache. A
// changed .tflite file no rule names is a model too (reported as matched
// by no rule).
func TestTFLiteModelGrows(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte("version: 1\ndevices:\n  timer: {ram: 256KiB, flash: 1MiB}\nmodels:\n  - path: \"models/**/*.tflite\"\n    device: timer\n    limits: {ram: 64KiB}\n    growth: {macs: 10%}\n"))
	g.write("models/kws/kws.tflite", kwsModel(t, 16))
	g.write("free/other.tflite", kwsModel(t, 8))
	g.commit("base")
	g.write("models/kws/kws.tflite", kwsModel(t, 32))
	g.write("free/other.tflite", kwsModel(t, 9))
	g.commit("wider")
	res, st, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD"})
	if err != nil {
		t.Fatal(err)
	}
	if res.Verdict != budget.Fail || len(res.Models) != 2 {
		t.Fatalf("verdict %s, %d models; want fail with both .tflite files judged", res.Verdict, len(res.Models))
	}
	var kws *budget.ModelResult
	for i := range res.Models {
		if res.Models[i].Path == "models/kws/kws.tflite" {
			kws = &res.Models[i]
		}
	}
	if kws == nil || kws.Head == nil || kws.Base == nil || kws.Error != "" {
		t.Fatalf("models %+v", res.Models)
	}
	// MACs grow with the conv's width: conv 25·5·32 × 9·1, depthwise ×9,
	// FC 32·12: twice the width, about twice the MACs, far past 10 %.
	var macsFailed bool
	for _, c := range kws.Checks {
		macsFailed = macsFailed || (c.Metric == budget.MetricMACs && c.Status == budget.Fail)
	}
	if !macsFailed || kws.Head.MACs <= kws.Base.MACs {
		t.Errorf("checks %+v: want the MACs growth to fail", kws.Checks)
	}
	rt := kws.Head.Memory.Runtime
	if rt == nil || kws.Head.RAM != rt.ArenaBytes+kws.Head.Memory.PersistentBytes {
		t.Errorf("head ram %d, runtime %+v: ram of a TFLite model is the runtime arena plus persistent bytes", kws.Head.RAM, rt)
	}
	var md, ju bytes.Buffer
	if err := report.CheckMarkdown(&md, res, report.MarkdownOptions{}); err != nil {
		t.Fatal(err)
	}
	if err := report.CheckJUnit(&ju, res); err != nil {
		t.Fatal(err)
	}
	for name, out := range map[string]string{"markdown": md.String(), "junit": ju.String()} {
		if !strings.Contains(out, "models/kws/kws.tflite") || !strings.Contains(out, "free/other.tflite") {
			t.Errorf("%s report does not name both models:\n%s", name, out)
		}
	}
	if st.Measured.Load() != 4 {
		t.Errorf("measured %d, want 4 (two models at two revisions)", st.Measured.Load())
	}
	again, st2, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD"})
	if err != nil {
		t.Fatal(err)
	}
	if st2.Measured.Load() != 0 || st2.CacheHits.Load() != 4 || again.Verdict != res.Verdict {
		t.Errorf("second check: measured %d, cache hits %d, verdict %s; want everything from the cache", st2.Measured.Load(), st2.CacheHits.Load(), again.Verdict)
	}
}

// TestPrePushRemoteTipMissing: when the remote's tip is not in the local
// clone (a force push, or someone else's push not fetched), the pushed
// commits are compared with the default branch and the push is judged,
// not refused.
func TestPrePushRemoteTipMissing(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	g.git("checkout", "-q", "-b", "topic")
	g.write("m.onnx", smallModel(t, 200))
	local := g.commit("over budget")
	unknown := strings.Repeat("ab", 20)
	stdin := fmt.Sprintf("refs/heads/topic %s refs/heads/topic %s\n", local, unknown)
	res, _, err := Run(Options{Dir: g.dir, PrePush: strings.NewReader(stdin), NoCache: true})
	if err != nil {
		t.Fatalf("the push was refused: %v", err)
	}
	if res.Verdict != budget.Fail || len(res.Problems) == 0 || !strings.Contains(res.Problems[0], "does not have") {
		t.Fatalf("verdict %s, problems %q", res.Verdict, res.Problems)
	}
}
