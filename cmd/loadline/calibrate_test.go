package main

import (
	"fmt"
	"path/filepath"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/target"
)

func TestCalibrateMLPerfTiny(t *testing.T) {
	// The four MLPerf Tiny models with their published reference-kernel
	// latencies and energies (target.MLPerfTinyReference:
	// mlcommons/tiny_results_v0.5 closed/reference, Nucleo-L4R5ZI): the
	// printed target is the shipped m4-reference's fit, and it reads back.
	dir := corpus.TFLiteDir(t)
	args := []string{"calibrate", "--name", "nucleo-l4r5zi"}
	for _, r := range target.MLPerfTinyReference {
		args = append(args, fmt.Sprintf("%s=%gms,%guJ", filepath.Join(dir, r.Model+".tflite"), r.LatencyMS, r.EnergyUJ))
	}
	var out, errs strings.Builder
	if code := run(args, &out, &errs); code != exitOK {
		t.Fatalf("exit %d\n%s\n%s", code, out.String(), errs.String())
	}
	text := out.String()
	for _, want := range []string{"fitted conv, depthwise, dense, power", "leave-one-out error", "kws_ref_model.tflite", "(+7.4 %)", "name: nucleo-l4r5zi",
		"conv:        {per_unit: 6.718", "# cycles per MAC; fitted"} {
		if !strings.Contains(text, want) {
			t.Errorf("output lacks %q:\n%s", want, text)
		}
	}
	if strings.Contains(text, "UNDER-DETERMINED") {
		t.Errorf("four models, three classes: not under-determined\n%s", text)
	}
	var doc struct {
		Target yaml.Node `yaml:"target"`
	}
	if err := yaml.Unmarshal([]byte(text), &doc); err != nil {
		t.Fatal(err)
	}
	tg, err := target.FromYAML(&doc.Target)
	if err != nil {
		t.Fatalf("%v\n%s", err, text)
	}
	ref := target.Builtin["m4-reference"]
	for _, c := range []target.Class{target.Conv, target.Depthwise, target.Dense} {
		if d := tg.Classes[c].PerUnit/ref.Classes[c].PerUnit - 1; d > 0.01 || d < -0.01 {
			t.Errorf("%s: %v cycles/MAC, shipped %v", c, tg.Classes[c].PerUnit, ref.Classes[c].PerUnit)
		}
	}

	// One model for three classes is under-determined, and says so.
	out.Reset()
	errs.Reset()
	if code := run([]string{"calibrate", filepath.Join(dir, "kws_ref_model.tflite") + "=181.9ms"}, &out, &errs); code != exitOK {
		t.Fatalf("exit %d %s", code, errs.String())
	}
	if !strings.Contains(out.String(), "UNDER-DETERMINED: 3 numbers (conv, depthwise, dense) from 1 measurement") || !strings.Contains(errs.String(), "under-determined") {
		t.Errorf("one model:\n%s\n%s", out.String(), errs.String())
	}
}

func TestCalibrateONNXAndErrors(t *testing.T) {
	// Two ONNX models timed as the shipped m4-reference estimates them.
	// build.ConvClassifier's conv and Gemm MACs both grow with the width,
	// so the two mixes are proportional: conv and dense cannot be told
	// apart, and calibrate says so. Fitting conv alone gives the base's
	// number back with zero error.
	dir := t.TempDir()
	writeFile(t, dir, "a.onnx", convModel(t, 8))
	writeFile(t, dir, "b.onnx", convModel(t, 64))
	la, _, _ := measureTarget(t, dir, "a.onnx", "m4-reference")
	lb, _, _ := measureTarget(t, dir, "b.onnx", "m4-reference")
	ma, mb := fmt.Sprintf("a.onnx=%.6fms", la), fmt.Sprintf("b.onnx=%.6fms", lb)
	code, out, errs := inDir(t, dir, "calibrate", "--fit", "conv,dense", ma, mb)
	if code != exitOK || !strings.Contains(out, "UNDER-DETERMINED: the 2 models mix conv, dense in proportions too alike") {
		t.Errorf("conv and dense: exit %d\n%s\n%s", code, out, errs)
	}
	code, out, errs = inDir(t, dir, "calibrate", "--fit", "conv", ma, mb)
	if code != exitOK || strings.Contains(out, "UNDER-DETERMINED") || !strings.Contains(out, "conv:        {per_unit: 6.72,") || !strings.Contains(out, "(+0.0 %)") {
		t.Errorf("conv alone: exit %d\n%s\n%s", code, out, errs)
	}
	for _, bad := range []struct{ args []string }{
		{[]string{"calibrate", "a.onnx"}},
		{[]string{"calibrate", "a.onnx=12"}},
		{[]string{"calibrate", "a.onnx=12ms,5ms"}},
		{[]string{"calibrate", "--fit", "convolution", "a.onnx=12ms"}},
		{[]string{"calibrate", "--base", "m9", "a.onnx=12ms"}},
	} {
		if code, _, _ := inDir(t, dir, bad.args...); code != exitUsage {
			t.Errorf("%v: exit %d, want %d", bad.args, code, exitUsage)
		}
	}
}
