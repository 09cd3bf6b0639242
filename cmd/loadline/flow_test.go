package main

import (
	"bytes"
	"encoding/json"
	"github.com/loadline/loadline/internal/gittest"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// convModel encodes build.ConvClassifier on an 8×8 image. Hand-worked
// params: conv 3→w, 3×3, bias: 28·w; Gemm w→4 with bias: 4·w + 4. Width 8:
// 260; width 16: 516; width 200: 6,404.
func convModel(t *testing.T, width int64) []byte {
	t.Helper()
	m, err := build.ConvClassifier("cam", 8, width)
	if err != nil {
		t.Fatal(err)
	}
	data, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	return data
}

// budgetYAML is an invented budget: a porch camera with 256 KiB of RAM.
const budgetYAML = `version: 1
devices:
  porch-cam:
    ram: 256KiB
    flash: 1MiB
models:
  - path: "models/**/*.onnx"
    device: porch-cam
    limits: {params: 5k, ram: 90%}
    growth: {macs: 5000%}   # width 8 → 200 is 25×: within
`

func git(t *testing.T, dir string, args ...string) string {
	t.Helper()
	return gittest.Run(t, dir, args...)
}

func newRepo(t *testing.T) string {
	t.Helper()
	return gittest.Init(t)
}

func writeFile(t *testing.T, dir, p string, data []byte) {
	t.Helper()
	full := filepath.Join(dir, p)
	os.MkdirAll(filepath.Dir(full), 0o755)
	if err := os.WriteFile(full, data, 0o644); err != nil {
		t.Fatal(err)
	}
}

var (
	binOnce sync.Once
	binPath string
	binErr  error
)

// loadlineBinary builds the command once per test run, for tests that need
// a real executable (git runs the hook as a program).
func loadlineBinary(t *testing.T) string {
	t.Helper()
	binOnce.Do(func() {
		dir, err := os.MkdirTemp("", "loadline-bin-")
		if err != nil {
			binErr = err
			return
		}
		binPath = filepath.Join(dir, "loadline")
		out, err := exec.Command("go", "build", "-o", binPath, ".").CombinedOutput()
		if err != nil {
			binErr = err
			binPath = string(out)
		}
	})
	if binErr != nil {
		t.Fatalf("building loadline: %v\n%s", binErr, binPath)
	}
	return binPath
}

// inDir runs the CLI in a folder, as a user would from there.
func inDir(t *testing.T, dir string, args ...string) (int, string, string) {
	t.Helper()
	wd, _ := os.Getwd()
	if err := os.Chdir(dir); err != nil {
		t.Fatal(err)
	}
	defer os.Chdir(wd)
	var out, errb bytes.Buffer
	code := run(args, &out, &errb)
	return code, out.String(), errb.String()
}

func TestHookBlocksCommitOverBudget(t *testing.T) {
	bin := loadlineBinary(t)
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(budgetYAML))
	writeFile(t, dir, "models/cam.onnx", convModel(t, 8))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "baseline")

	cmd := exec.Command(bin, "hook", "install")
	cmd.Dir = dir
	// The same git configuration as the commits below: a core.hooksPath in
	// the user's own global config must not move the hook.
	cmd.Env = append(os.Environ(), "HOME="+dir, "XDG_CONFIG_HOME=", "GIT_CONFIG_GLOBAL=", "GIT_CONFIG_NOSYSTEM=1")
	if out, err := cmd.CombinedOutput(); err != nil {
		t.Fatalf("hook install: %v\n%s", err, out)
	}
	// Within budget: the commit goes through.
	writeFile(t, dir, "models/cam.onnx", convModel(t, 16))
	git(t, dir, "add", "-A")
	c := exec.Command("git", "commit", "-q", "-m", "wider, within budget")
	c.Dir = dir
	c.Env = append(os.Environ(), "HOME="+dir, "NO_COLOR=1")
	if out, err := c.CombinedOutput(); err != nil {
		t.Fatalf("a model within budget was refused: %v\n%s", err, out)
	}
	// Over budget (6,404 params > 5k): the commit fails, the report on stderr.
	writeFile(t, dir, "models/cam.onnx", convModel(t, 200))
	git(t, dir, "add", "-A")
	c = exec.Command("git", "commit", "-q", "-m", "much wider")
	c.Dir = dir
	c.Env = append(os.Environ(), "HOME="+dir, "NO_COLOR=1")
	var stdout, stderr bytes.Buffer
	c.Stdout, c.Stderr = &stdout, &stderr
	if err := c.Run(); err == nil {
		t.Fatal("a commit of a model over budget went through")
	}
	if !strings.Contains(stderr.String(), "models/cam.onnx") || !strings.Contains(stderr.String(), "params") {
		t.Errorf("the hook's report is not on stderr:\nstderr:\n%s\nstdout:\n%s", stderr.String(), stdout.String())
	}
	if log := git(t, dir, "log", "--oneline"); len(strings.Split(log, "\n")) != 2 {
		t.Errorf("want 2 commits, log:\n%s", log)
	}
}

func TestLoosenedBudgetStillJudgedByBase(t *testing.T) {
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(budgetYAML))
	writeFile(t, dir, "models/cam.onnx", convModel(t, 8))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "baseline")
	git(t, dir, "checkout", "-q", "-b", "feature")
	// The change raises its own params limit to let a wider model through.
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(budgetYAML, "params: 5k", "params: 50k", 1)))
	writeFile(t, dir, "models/cam.onnx", convModel(t, 200))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "wider model, looser budget")

	code, out, errs := inDir(t, dir, "check", "--base", "main", "--format", "json")
	if code != exitBudget {
		t.Fatalf("exit %d, want %d (judged by the base's budget); stderr: %s", code, exitBudget, errs)
	}
	var doc struct {
		Schema        string `json:"schema"`
		Verdict       string `json:"verdict"`
		BudgetChanges []struct {
			Key      string `json:"key"`
			Old, New string
			Loosened bool `json:"loosened"`
		} `json:"budget_changes"`
		Models []struct {
			Path   string `json:"path"`
			Change string `json:"change"`
			Checks []struct {
				Metric, Status, Reason string
				Value                  int64
			} `json:"checks"`
		} `json:"models"`
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatalf("not JSON: %v\n%s", err, out)
	}
	if doc.Schema != "loadline.check/v1" || doc.Verdict != "fail" {
		t.Errorf("schema %q verdict %q", doc.Schema, doc.Verdict)
	}
	loosened := false
	for _, c := range doc.BudgetChanges {
		if strings.Contains(c.Key, "params") && c.Loosened {
			loosened = true
		}
	}
	if !loosened {
		t.Errorf("the loosened params limit is not listed: %+v", doc.BudgetChanges)
	}
	failedParams := false
	for _, m := range doc.Models {
		for _, c := range m.Checks {
			if c.Metric == "params" && c.Status == "fail" && c.Value == 6404 {
				failedParams = true
			}
		}
	}
	if !failedParams {
		t.Errorf("params 6,404 should fail the base's 5k limit: %s", out)
	}
	// With the explicit flag the head's budget is in force and it passes.
	if code, out, errs := inDir(t, dir, "check", "--base", "main", "--trust-head-budget"); code != exitOK {
		t.Errorf("--trust-head-budget: exit %d\n%s\n%s", code, out, errs)
	}
}

func TestCompareWiderModel(t *testing.T) {
	dir := t.TempDir()
	writeFile(t, dir, "loadline.yaml", []byte(budgetYAML))
	writeFile(t, dir, "old.onnx", convModel(t, 8))
	writeFile(t, dir, "wide.onnx", convModel(t, 200))
	writeFile(t, dir, "ok.onnx", convModel(t, 16))
	code, out, errs := inDir(t, dir, "compare", "old.onnx", "wide.onnx", "--as", "models/cam.onnx")
	if code != exitBudget {
		t.Fatalf("wider model: exit %d, want %d\n%s\n%s", code, exitBudget, out, errs)
	}
	// The report says which figure, by how much, against which limit.
	for _, want := range []string{"params", "6.40 k", "5.00 k"} {
		if !strings.Contains(out, want) {
			t.Errorf("compare output lacks %q:\n%s", want, out)
		}
	}
	if code, out, errs := inDir(t, dir, "compare", "old.onnx", "ok.onnx", "--as", "models/cam.onnx"); code != exitOK {
		t.Errorf("within budget: exit %d\n%s\n%s", code, out, errs)
	}
}

func TestInitWritesAParsableBudget(t *testing.T) {
	dir := t.TempDir()
	writeFile(t, dir, "models/cam/a.onnx", convModel(t, 8))
	writeFile(t, dir, "models/kws/b.onnx", convModel(t, 16))
	code, _, errs := inDir(t, dir, "init")
	if code != exitOK {
		t.Fatalf("init: exit %d: %s", code, errs)
	}
	text, err := os.ReadFile(filepath.Join(dir, "loadline.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`"models/cam/*.onnx"`, `"models/kws/*.onnx"`, "params: 318", "warn_at: 90%"} {
		// Hand-worked: 260 params + 10 % headroom = 286, and 286 must stay
		// within warn_at 90 % of the limit: ⌈286 / 0.9⌉ = ⌈317.8⌉ = 318.
		if !strings.Contains(string(text), want) {
			t.Errorf("starter budget lacks %q:\n%s", want, text)
		}
	}
	// --headroom 0: today's figure at warn_at, ⌈260 / 0.9⌉ = ⌈288.9⌉ = 289.
	if code, out, errs := inDir(t, dir, "init", "--headroom", "0", "--stdout"); code != exitOK || !strings.Contains(out, "params: 289\n") {
		t.Errorf("init --headroom 0: exit %d, want today's params (260) at warn_at of the limit (289):\n%s%s", code, out, errs)
	}
	if code, _, _ := inDir(t, dir, "init"); code != exitUsage {
		t.Errorf("init over an existing file: exit %d, want %d", code, exitUsage)
	}
	// The starter judges today's models as within budget.
	code, out, errs := inDir(t, dir, "compare", "models/cam/a.onnx", "models/cam/a.onnx")
	if code != exitOK {
		t.Errorf("today's model against the starter budget: exit %d\n%s\n%s", code, out, errs)
	}
}

// TestHookInstallEnvironmentError: a core.hooksPath that names a file is
// the environment's problem (exit 3), with a message that names the path
// and says what to change.
func TestHookInstallEnvironmentError(t *testing.T) {
	dir := newRepo(t)
	writeFile(t, dir, "hooks", []byte("not a folder"))
	git(t, dir, "config", "core.hooksPath", "hooks")
	t.Setenv("GIT_CONFIG_NOSYSTEM", "1")
	code, _, errs := inDir(t, dir, "hook", "install")
	if code != exitEnviron || !strings.Contains(errs, "core.hooksPath") {
		t.Errorf("exit %d, want %d with a hint about core.hooksPath:\n%s", code, exitEnviron, errs)
	}
}
