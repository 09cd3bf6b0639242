package main

import (
	"errors"
	"fmt"
	"strings"
	"testing"

	"github.com/loadline/loadline/check"
	"github.com/loadline/loadline/model/build"
)

// TestPipelineExit: a budget-file error is exit 2, an environment error
// exit 3, however deeply wrapped, and anything else exit 1 (README, "Exit
// codes").
func TestPipelineExit(t *testing.T) {
	for _, tc := range []struct {
		err  error
		want int
	}{
		{&check.BudgetFileError{Err: errors.New("loadline.yaml:3:1: bad")}, exitUsage},
		{fmt.Errorf("reading the budget: %w", &check.BudgetFileError{Err: errors.New("bad")}), exitUsage},
		{&check.EnvError{Err: errors.New("blob missing"), Hint: "git fetch"}, exitEnviron},
		{fmt.Errorf("head: %w", &check.EnvError{Err: errors.New("blob missing")}), exitEnviron},
		{errors.New("m.onnx: not an ONNX model"), exitBudget},
	} {
		var ee *exitError
		if err := pipelineExit(tc.err); !errors.As(err, &ee) || ee.code != tc.want || ee.err != tc.err {
			t.Errorf("pipelineExit(%v) = %v; want exit %d wrapping the error", tc.err, err, tc.want)
		}
	}
}

// TestCheckExitCodes runs check and compare as a user would and reads the
// exit code and message: 2 for a budget file with a mistake, 3 for a
// revision the repository does not have or a folder outside git.
func TestCheckExitCodes(t *testing.T) {
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(budgetYAML, "params: 5k", "mac: 5k", 1)))
	writeFile(t, dir, "models/cam.onnx", convModel(t, 8))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "baseline")
	writeFile(t, dir, "models/cam.onnx", convModel(t, 16))
	git(t, dir, "commit", "-q", "-am", "wider")

	code, _, errs := inDir(t, dir, "check", "--base", "HEAD~1")
	if code != exitUsage || !strings.Contains(errs, "loadline.yaml (at HEAD~1):9:14: models[0].limits: unknown metric \"mac\"") {
		t.Errorf("budget file with an unknown metric: exit %d, want %d with file, line and the key:\n%s", code, exitUsage, errs)
	}
	code, _, errs = inDir(t, dir, "compare", "models/cam.onnx", "models/cam.onnx")
	if code != exitUsage || !strings.Contains(errs, `unknown metric "mac"`) {
		t.Errorf("compare with that budget file: exit %d, want %d:\n%s", code, exitUsage, errs)
	}
	code, _, errs = inDir(t, dir, "check", "--base", "no-such-branch")
	if code != exitEnviron || !strings.Contains(errs, "no-such-branch") {
		t.Errorf("unknown base revision: exit %d, want %d naming it:\n%s", code, exitEnviron, errs)
	}
	code, _, errs = inDir(t, t.TempDir(), "check")
	if code != exitEnviron || !strings.Contains(errs, "not inside a git repository") {
		t.Errorf("outside a repository: exit %d, want %d saying so:\n%s", code, exitEnviron, errs)
	}
}

// TestMeasureLayersText: `loadline measure --layers` prints the per-node
// table in its text form, one row per node of the model, then the top
// contributors and the peak.
func TestMeasureLayersText(t *testing.T) {
	dir := t.TempDir()
	writeFile(t, dir, "cam.onnx", convModel(t, 8))
	m, err := build.ConvClassifier("cam", 8, 8)
	if err != nil {
		t.Fatal(err)
	}
	code, out, errs := inDir(t, dir, "measure", "--layers", "cam.onnx")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{"\n  layers (schedule = file order;", "\n  top MACs\n", "\n  top live memory (graph view)\n", "\n  graph-view peak ", "\n  top live memory (deployed view)\n", "\n  deployed-view peak ", ", judged; live there:\n", "live deployed  offset deployed"} {
		if !strings.Contains(out, want) {
			t.Errorf("missing %q in:\n%s", want, out)
		}
	}
	for i, n := range m.Graph.Nodes {
		if !strings.Contains(out, fmt.Sprintf("\n  %d ", i)) || !strings.Contains(out, " "+n.Op+" ") {
			t.Errorf("no row for node %d (%s) in:\n%s", i, n.Op, out)
		}
	}
}

// TestCompareBindingsNameTheirFlag: --shape and --value work on compare
// (README, Commands); bindings that do not fit the model are an error
// (exit 1) that quotes each flag as written and lists the model's inputs.
func TestCompareBindingsNameTheirFlag(t *testing.T) {
	dir := t.TempDir()
	writeFile(t, dir, "cam.onnx", convModel(t, 8))
	writeFile(t, dir, "loadline.yaml", []byte(budgetYAML))
	code, _, errs := inDir(t, dir, "compare", "cam.onnx", "cam.onnx", "--as", "models/cam.onnx",
		"--shape", "image=1x3x16x16", "--value", "other=2,3")
	for _, want := range []string{
		"--shape image=1x3x16x16: axis 2 of input image is 8 in the model, the binding says 16",
		"--value other=2,3: the model has no input of that name",
		"the model's inputs: image float32[1,3,8,8]",
	} {
		if !strings.Contains(errs, want) {
			t.Errorf("missing %q in:\n%s", want, errs)
		}
	}
	if code != exitBudget {
		t.Errorf("exit %d, want %d", code, exitBudget)
	}
}
