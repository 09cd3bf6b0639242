package main

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/budget"
	"github.com/loadline/loadline/internal/gittest"
)

// committedRepo makes a repository with budgetYAML (or the given budget)
// and models/cam.onnx at width 8 on main, then a second commit that widens
// the model to width 16 (516 params, within the 5k limit).
func committedRepo(t *testing.T, budgetText string) string {
	t.Helper()
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(budgetText))
	writeFile(t, dir, "models/cam.onnx", convModel(t, 8))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "baseline")
	writeFile(t, dir, "models/cam.onnx", convModel(t, 16))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "wider")
	return dir
}

// TestUnmatchedRuleWarns: a rule whose glob matches no file judges nothing;
// the check says so with the rule's line, as a warning (exit 0).
func TestUnmatchedRuleWarns(t *testing.T) {
	dir := committedRepo(t, budgetYAML+`  - path: "models/old-cam/*.onnx"
    device: porch-cam
    limits: {params: 5k}
`)
	code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1", "--no-cache")
	if code != exitOK {
		t.Fatalf("exit %d, want 0 (a warning)\n%s%s", code, out, errs)
	}
	// The second rule starts on line 11 of the budget file, column 5.
	if !strings.Contains(out, `models[1] "models/old-cam/*.onnx"`) || !strings.Contains(out, ":11:5) matches no file") || !strings.Contains(out, "WARN") {
		t.Errorf("no warning naming the rule and its line:\n%s", out)
	}
}

// TestCompareWithoutBudget: compare outside any repository with a budget
// file shows figures and deltas and judges nothing.
func TestCompareWithoutBudget(t *testing.T) {
	dir := t.TempDir()
	writeFile(t, dir, "old.onnx", convModel(t, 8))
	writeFile(t, dir, "new.onnx", convModel(t, 16))
	code, out, errs := inDir(t, dir, "compare", "old.onnx", "new.onnx")
	if code != exitOK {
		t.Fatalf("exit %d, want 0\n%s%s", code, out, errs)
	}
	// Hand-worked params (see convModel): 260 → 516, +256 (+98.5%).
	for _, want := range []string{"no budget file, so figures and deltas only", "params", "260", "516", "+256 (+98.5%)"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "FAIL") || strings.Contains(out, "WARN") {
		t.Errorf("a verdict without a budget:\n%s", out)
	}
	// A budget file named but missing is still an error.
	if code, _, errs := inDir(t, dir, "compare", "--budget", "nope.yaml", "old.onnx", "new.onnx"); code != exitUsage || !strings.Contains(errs, "nope.yaml") {
		t.Errorf("--budget nope.yaml: exit %d, %s", code, errs)
	}
}

// TestPostRequiredNothingPosted: --post-required exits 3 when the report
// could go nowhere: no CI platform, or GitHub without a token and without
// a job summary file.
func TestPostRequiredNothingPosted(t *testing.T) {
	dir := committedRepo(t, budgetYAML)
	for _, k := range []string{"GITHUB_ACTIONS", "GITLAB_CI", "GITHUB_BASE_REF", "CI_MERGE_REQUEST_DIFF_BASE_SHA"} {
		t.Setenv(k, "")
	}
	code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1", "--post", "--post-required")
	if code != exitEnviron || strings.Count(errs, "no supported CI platform") != 1 {
		t.Errorf("no platform: exit %d, want 3 and the reason once\n%s", code, errs)
	}
	if !strings.Contains(out, "models/cam.onnx") {
		t.Errorf("the report is not written when posting fails:\n%s", out)
	}
	// Without --post-required the verdict stands (within budget: 0).
	if code, _, errs := inDir(t, dir, "check", "--base", "HEAD~1", "--post"); code != exitOK || !strings.Contains(errs, "nothing posted") {
		t.Errorf("no platform, not required: exit %d\n%s", code, errs)
	}
	t.Setenv("GITHUB_ACTIONS", "true")
	t.Setenv("GITHUB_REPOSITORY", "wrenfield/porch")
	t.Setenv("GITHUB_EVENT_NAME", "push")
	t.Setenv("GITHUB_TOKEN", "")
	t.Setenv("GITHUB_STEP_SUMMARY", "")
	t.Setenv("GITHUB_OUTPUT", "")
	code, _, errs = inDir(t, dir, "check", "--base", "HEAD~1", "--post", "--post-required")
	if code != exitEnviron || !strings.Contains(errs, "nothing was posted") {
		t.Errorf("GitHub without token or summary: exit %d, want 3\n%s", code, errs)
	}
}

// TestCountsAndRevisionOnce: the closing line counts models (not sides);
// the head's commit is named once, short.
func TestCountsAndRevisionOnce(t *testing.T) {
	dir := committedRepo(t, budgetYAML)
	head := git(t, dir, "rev-parse", "HEAD")
	code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1", "--no-cache")
	if code != exitOK {
		t.Fatalf("exit %d\n%s%s", code, out, errs)
	}
	// One model changed: its base and head were measured, none from cache.
	if !strings.Contains(errs, "loadline: 1 model changed; 0 of 2 figures from cache") {
		t.Errorf("stderr:\n%s", errs)
	}
	if n := strings.Count(out+errs, head[:7]); n != 1 {
		t.Errorf("head commit %s named %d times, want once:\n%s%s", head[:7], n, out, errs)
	}
	if strings.Contains(out+errs, head[:8]) {
		t.Errorf("the commit is shown longer than 7 characters:\n%s%s", out, errs)
	}
}

// TestBudgetTabSaysTab: a tab in the budget file's indentation is named as
// a tab, with its line and column (exit 2).
func TestBudgetTabSaysTab(t *testing.T) {
	dir := committedRepo(t, strings.Replace(budgetYAML, "    ram: 256KiB", "\tram: 256KiB", 1))
	code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1")
	if code != exitUsage {
		t.Fatalf("exit %d, want 2\n%s%s", code, out, errs)
	}
	if !strings.Contains(errs, ":4:1: a tab: YAML indents with spaces only") {
		t.Errorf("stderr:\n%s", errs)
	}
}

// TestHookFromPathAndEscape: installed from PATH, the hook names loadline
// by name, not by an absolute path that breaks when the binary moves; a
// refused commit is told of git commit --no-verify and what it skips.
func TestHookFromPathAndEscape(t *testing.T) {
	bin := loadlineBinary(t)
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(budgetYAML))
	writeFile(t, dir, "models/cam.onnx", convModel(t, 8))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "baseline")
	path := filepath.Dir(bin) + string(os.PathListSeparator) + os.Getenv("PATH")
	env := append(os.Environ(), "PATH="+path, "HOME="+dir, "XDG_CONFIG_HOME=", "GIT_CONFIG_GLOBAL=", "GIT_CONFIG_NOSYSTEM=1", "NO_COLOR=1")
	cmd := exec.Command(bin, "hook", "install") // the binary PATH finds
	cmd.Dir, cmd.Env = dir, env
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("hook install: %v\n%s", err, out)
	}
	script, err := os.ReadFile(filepath.Join(dir, ".git", "hooks", "pre-commit"))
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(script), "'loadline' 'check' '--staged'") || strings.Contains(string(script), bin) {
		t.Errorf("the hook does not find loadline on PATH:\n%s", script)
	}
	// Over budget (6,404 params > 5k): refused, with the way out.
	writeFile(t, dir, "models/cam.onnx", convModel(t, 200))
	git(t, dir, "add", "-A")
	c := exec.Command("git", "commit", "-q", "-m", "much wider")
	c.Dir, c.Env = dir, env
	var stderr bytes.Buffer
	c.Stderr = &stderr
	if err := c.Run(); err == nil {
		t.Fatal("a commit over budget went through")
	}
	for _, want := range []string{"the pre-commit check stopped this (exit 1", "git commit --no-verify", "skips every pre-commit hook"} {
		if !strings.Contains(stderr.String(), want) {
			t.Errorf("stderr lacks %q:\n%s", want, stderr.String())
		}
	}
	// Off PATH, the hook refuses with the same way out rather than
	// letting the change through unchecked.
	c = exec.Command("git", "commit", "-q", "-m", "much wider")
	c.Dir, c.Env = dir, append(env, "PATH=/usr/bin:/bin")
	stderr.Reset()
	c.Stderr = &stderr
	if err := c.Run(); err == nil || !strings.Contains(stderr.String(), "not on this hook's PATH") || !strings.Contains(stderr.String(), "--no-verify") {
		t.Errorf("off PATH: %v\n%s", err, stderr.String())
	}
}

// teamBudget budgets the cam folder of gittest.TeamModels. Hand-worked
// params (build.ConvClassifier: conv 3→w 3×3 with bias 28·w, Gemm w→4 with
// bias 4·w+4): detect (w 8) 260, classify (w 16) 516.
const teamBudget = `version: 1
devices:
  doorbell:
    ram: 256KiB
models:
  - path: "models/cam/*.onnx"
    device: doorbell
    limits: {params: PARAMS}
`

// teamRepo commits the cam models of gittest.TeamModels with teamBudget at
// the given params limit on main, then a commit that changes no model.
func teamRepo(t *testing.T, params string) string {
	t.Helper()
	dir := newRepo(t)
	for p, data := range gittest.TeamModels(t) {
		if strings.HasPrefix(p, "models/cam/") {
			writeFile(t, dir, p, data)
		}
	}
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(teamBudget, "PARAMS", params, 1)))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "models and budget")
	writeFile(t, dir, "README.md", []byte("notes\n"))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "notes")
	return dir
}

// TestCheckAllJudgesEveryModel: a change that touches no model judges
// nothing; --all judges every model at the revision.
func TestCheckAllJudgesEveryModel(t *testing.T) {
	dir := teamRepo(t, "400")
	if code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1"); code != exitOK || !strings.Contains(out, "no models changed") {
		t.Fatalf("change check: exit %d\n%s%s", code, out, errs)
	}
	code, out, errs := inDir(t, dir, "check", "--all", "--no-cache")
	if code != exitBudget {
		t.Fatalf("--all: exit %d, want 1 (classify's 516 params > 400)\n%s%s", code, out, errs)
	}
	for _, want := range []string{"every model at HEAD @ ", "1 model over budget, 1 within budget", "models/cam/classify.onnx: params 516 > limit 400 by 116", "models/cam/detect.onnx"} {
		if !strings.Contains(out, want) {
			t.Errorf("--all output lacks %q:\n%s", want, out)
		}
	}
	if !strings.Contains(errs, "loadline: 2 models judged; 0 of 2 figures from cache") {
		t.Errorf("stderr:\n%s", errs)
	}
	// At an earlier revision, and never with a base.
	if code, out, _ := inDir(t, dir, "check", "--all", "--head", "HEAD~1"); code != exitBudget || !strings.Contains(out, "every model at HEAD~1 @ ") {
		t.Errorf("--all --head HEAD~1: exit %d\n%s", code, out)
	}
	if code, _, errs := inDir(t, dir, "check", "--all", "--base", "main"); code != exitUsage || !strings.Contains(errs, "does not combine") {
		t.Errorf("--all --base: exit %d\n%s", code, errs)
	}
}

// TestBudgetTighteningJudgesUnchangedModels: a pull request that only
// tightens a limit is judged by the tighter limit at once, on every model
// the rule covers, though none of them changed.
func TestBudgetTighteningJudgesUnchangedModels(t *testing.T) {
	dir := teamRepo(t, "600")
	git(t, dir, "checkout", "-q", "-b", "tighten")
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(teamBudget, "PARAMS", "400", 1)))
	git(t, dir, "commit", "-q", "-am", "params limit 400")
	code, out, errs := inDir(t, dir, "check", "--base", "main")
	if code != exitBudget {
		t.Fatalf("exit %d, want 1: the tightened limit is in force on its own change\n%s%s", code, out, errs)
	}
	for _, want := range []string{"models/cam/classify.onnx: params 516 > limit 400", "not changed: judged again because the budget file's rules for it changed", "models[0].limits.params"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
}

// TestBudgetLooseningNotInForce: a pull request that raises a limit is
// still judged by the base's, and the report says which edits are not in
// force and how to land them; --trust-head-budget applies them.
func TestBudgetLooseningNotInForce(t *testing.T) {
	dir := teamRepo(t, "400")
	git(t, dir, "checkout", "-q", "-b", "loosen")
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(teamBudget, "PARAMS", "600", 1)))
	git(t, dir, "commit", "-q", "-am", "params limit 600")
	code, out, errs := inDir(t, dir, "check", "--base", "main")
	if code != exitBudget {
		t.Fatalf("exit %d, want 1: a change cannot loosen its own gate\n%s%s", code, out, errs)
	}
	for _, want := range []string{"params 516 > limit 400", "not in force until it merges: models[0].limits.params (models/cam/*.onnx)",
		"two steps", "--trust-head-budget", "LOOSENED"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if code, out, errs := inDir(t, dir, "check", "--base", "main", "--trust-head-budget"); code != exitOK || !strings.Contains(out, "judged by the head's budget file") {
		t.Errorf("--trust-head-budget: exit %d\n%s%s", code, out, errs)
	}
}

// TestInitThenCheckAllPasses: the starter budget for a repository of
// several models, committed as written, passes check --all with no warning:
// limits sit below warn_at, each model is measured with its own dims, the
// figures that need an input's value have no limit but a comment naming
// it, and no limit is a share of a placeholder capacity.
func TestInitThenCheckAllPasses(t *testing.T) {
	dir := newRepo(t)
	for p, data := range gittest.TeamModels(t) {
		writeFile(t, dir, p, data)
	}
	if code, _, errs := inDir(t, dir, "init"); code != exitOK {
		t.Fatalf("init: exit %d\n%s", code, errs)
	}
	text, err := os.ReadFile(filepath.Join(dir, "loadline.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	starter := string(text)
	for _, want := range []string{
		`dims: {"N": 1, frames: 1}`, // the spotter's own dim names
		"# macs: not limited: cannot be computed until the value of input target_shape is bound",
		"# ram: 512KiB", "PLACEHOLDER",
		`"models/cam/*.onnx"`, `"models/kws/*.onnx"`, `"models/misc/*.onnx"`,
	} {
		if !strings.Contains(starter, want) {
			t.Errorf("starter lacks %q:\n%s", want, starter)
		}
	}
	if strings.Contains(starter, "batch") {
		t.Errorf("starter binds a dim the models lack:\n%s", starter)
	}
	bf, err := budget.Parse("loadline.yaml", text)
	if err != nil {
		t.Fatal(err)
	}
	for _, d := range bf.Devices {
		if d.RAM != nil || d.Flash != nil {
			t.Errorf("device %s has a capacity that is no placeholder", d.Name)
		}
	}
	for _, r := range bf.Rules {
		for m, l := range r.Limits {
			if l.Kind == budget.Percent {
				t.Errorf("%s: %s limit %s is a share of a placeholder", r.Path, m, l.Text)
			}
		}
	}
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "models and starter budget")
	code, out, errs := inDir(t, dir, "check", "--all", "--no-cache")
	if code != exitOK {
		t.Fatalf("check --all: exit %d, want 0\n%s%s\n%s", code, out, errs, starter)
	}
	if !strings.Contains(out, "loadline: pass — 4 models within budget") || strings.Contains(out, "WARN") || strings.Contains(out, "unknown") {
		t.Errorf("check --all warns or leaves a figure unjudged:\n%s\n%s", out, starter)
	}
	// The same with the strictest fail-on: no warning to fail on.
	if code, out, _ := inDir(t, dir, "check", "--all", "--fail-on", "warn"); code != exitOK {
		t.Errorf("check --all --fail-on warn: exit %d\n%s", code, out)
	}
}

// growthRepo commits loadline.yaml with the given growth allowance for
// models/cam/m.onnx, the model first as the team model `from`, then as
// `to` (gittest.TeamModels paths).
func growthRepo(t *testing.T, growth, from, to string) string {
	t.Helper()
	models := gittest.TeamModels(t)
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(`version: 1
devices:
  doorbell: {ram: 256KiB}
models:
  - path: "models/cam/*.onnx"
    device: doorbell
    growth: {`+growth+`}
`))
	writeFile(t, dir, "models/cam/m.onnx", models[from])
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "first")
	writeFile(t, dir, "models/cam/m.onnx", models[to])
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "second")
	return dir
}

// TestGrowthAgainstUnknownBase: when the base's figure cannot be computed
// the growth is unknown, with the reason: a warning, a failure with
// --strict; never a silent pass.
func TestGrowthAgainstUnknownBase(t *testing.T) {
	// The reshaper's MACs need its target_shape input's value; the
	// detector's are known.
	dir := growthRepo(t, "macs: 10%", "models/misc/reshaper.onnx", "models/cam/detect.onnx")
	code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1")
	if code != exitOK {
		t.Fatalf("exit %d, want 0 (a warning)\n%s%s", code, out, errs)
	}
	for _, want := range []string{"WARN", "macs growth unknown: the base figure cannot be computed: 1 node(s) unresolved, first reshape (Reshape)"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if code, out, _ := inDir(t, dir, "check", "--base", "HEAD~1", "--strict"); code != exitBudget || !strings.Contains(out, "macs growth unknown") {
		t.Errorf("--strict: exit %d, want 1\n%s", code, out)
	}
}

// TestRequiredShrink: a negative growth allowance requires the figure to
// fall by at least that much.
func TestRequiredShrink(t *testing.T) {
	// Hand-worked params (see teamBudget): classify 516 → detect 260, a
	// fall of 49.6 %; the other way a rise of 98.5 %.
	dir := growthRepo(t, "params: -5%", "models/cam/classify.onnx", "models/cam/detect.onnx")
	code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1")
	if code != exitOK || !strings.Contains(out, "pass") {
		t.Fatalf("a fall of 49.6%% against a required 5%%: exit %d\n%s%s", code, out, errs)
	}
	dir = growthRepo(t, "params: -5%", "models/cam/detect.onnx", "models/cam/classify.onnx")
	code, out, errs = inDir(t, dir, "check", "--base", "HEAD~1")
	if code != exitBudget || !strings.Contains(out, "params grew 98.5% (260 → 516), must fall by at least 5%") {
		t.Errorf("a rise against a required fall: exit %d\n%s%s", code, out, errs)
	}
}

// waiverBudget is teamBudget with a params limit of 400 and one waiver for
// the classifier (516 params, see teamBudget).
const waiverBudget = `version: 1
devices:
  doorbell:
    ram: 256KiB
models:
  - path: "models/cam/*.onnx"
    device: doorbell
    limits: {params: 400}
waivers:
  - path: models/cam/classify.onnx
    metric: params
    excuses: limit
    up_to: 600
    until: UNTIL
    reason: pruned in the next release
`

// TestWaiverCeiling: a waiver excuses a figure up to its ceiling, which
// the report shows; above it the check fails and says so.
func TestWaiverCeiling(t *testing.T) {
	dir := newRepo(t)
	for p, data := range gittest.TeamModels(t) {
		if strings.HasPrefix(p, "models/cam/") {
			writeFile(t, dir, p, data)
		}
	}
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(waiverBudget, "UNTIL", "2099-01-31", 1)))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "models, budget and waiver")
	code, out, errs := inDir(t, dir, "check", "--all")
	if code != exitOK {
		t.Fatalf("--all: exit %d, want 0 (516 params waived up to 600)\n%s%s", code, out, errs)
	}
	for _, want := range []string{"params 516 > limit 400 by 116; waived up to 600 until 2099-01-31: pruned in the next release", "params limit, up to 600 until 2099-01-31"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	// Width 32: 28·32 + 4·32 + 4 = 1,028 params, above the ceiling.
	writeFile(t, dir, "models/cam/classify.onnx", convModel(t, 32))
	git(t, dir, "commit", "-q", "-am", "wider classifier")
	code, out, errs = inDir(t, dir, "check", "--base", "HEAD~1")
	if code != exitBudget || !strings.Contains(out, "params 1.03 k > limit 400 by 628; above its waiver's ceiling of 600 (loadline.yaml (at HEAD):10:5)") {
		t.Errorf("above the ceiling: exit %d, want 1\n%s%s", code, out, errs)
	}
}

// TestExpiredWaiver: an expired waiver warns a change that touches none
// of its models, naming it and its date; it fails a change to a model it
// covers, and --all, where that model's check is no longer excused.
func TestExpiredWaiver(t *testing.T) {
	dir := newRepo(t)
	for p, data := range gittest.TeamModels(t) {
		if strings.HasPrefix(p, "models/cam/") {
			writeFile(t, dir, p, data)
		}
	}
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(waiverBudget, "UNTIL", "2020-01-31", 1)))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "models, budget and waiver")
	writeFile(t, dir, "models/cam/detect.onnx", convModel(t, 8)) // 260 params: within
	git(t, dir, "commit", "-q", "-am", "retrain the detector")
	code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1")
	if code != exitOK || !strings.Contains(out, "WARN  waiver for models/cam/classify.onnx params limit, up to 600 expired on 2020-01-31 (loadline.yaml (at HEAD):10:5)") {
		t.Errorf("unrelated change: exit %d, want 0 with a warning naming the waiver\n%s%s", code, out, errs)
	}
	if code, out, _ := inDir(t, dir, "check", "--all"); code != exitBudget || !strings.Contains(out, "params 516 > limit 400 by 116; its waiver expired on 2020-01-31") {
		t.Errorf("--all: exit %d, want 1\n%s", code, out)
	}
	writeFile(t, dir, "models/cam/classify.onnx", convModel(t, 20)) // 644 params
	git(t, dir, "commit", "-q", "-am", "retrain the classifier")
	if code, out, _ := inDir(t, dir, "check", "--base", "HEAD~1"); code != exitBudget || !strings.Contains(out, "its waiver expired on 2020-01-31") {
		t.Errorf("a change to the waived model: exit %d, want 1\n%s", code, out)
	}
}

// TestWaiverAddedExpired: a waiver added with a date already past is
// listed as expired, not as loosening the gate.
func TestWaiverAddedExpired(t *testing.T) {
	dir := teamRepo(t, "600")
	git(t, dir, "checkout", "-q", "-b", "late-waiver")
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(teamBudget, "PARAMS", "600", 1)+`waivers:
  - {path: models/cam/classify.onnx, metric: params, until: 2020-01-31, reason: too late}
`))
	git(t, dir, "commit", "-q", "-am", "a waiver")
	code, out, errs := inDir(t, dir, "check", "--base", "main")
	if code != exitOK {
		t.Fatalf("exit %d\n%s%s", code, out, errs)
	}
	if !strings.Contains(out, "(expired already: it excuses nothing)") || strings.Contains(out, "LOOSENED") {
		t.Errorf("the late waiver is not listed as expired, or is called loosened:\n%s", out)
	}
}
