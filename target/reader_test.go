package target_test

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model/format"
	"github.com/loadline/loadline/model/tflite"
	"github.com/loadline/loadline/target"
)

// measured reads a model with loadline's own reader and measures it with
// the per-layer view.
func measured(t testing.TB, path string, data []byte) *measure.Metrics {
	t.Helper()
	if data == nil {
		var err error
		if data, err = os.ReadFile(path); err != nil {
			t.Fatal(err)
		}
	}
	m, err := format.Open(path, data, format.Options{})
	if err != nil {
		t.Fatal(err)
	}
	met, err := measure.Measure(m, int64(len(data)), measure.Options{Layers: true})
	if err != nil {
		t.Fatal(err)
	}
	return met
}

// TestBuiltinTargetsOnReader: the shipped targets, on the four MLPerf Tiny
// models as loadline's TFLite reader and measure see them, estimate each
// of the eight published latencies within 15 % and each of the four
// reference-kernel energies within 10 % (target.MLPerfTinyReference and
// target.MLPerfTinyOptimized: mlcommons/tiny_results_v0.5 closed/reference
// and tiny_results_v1.0 closed/OctoML microtvm_cmsis_nn, Nucleo-L4R5ZI
// Cortex-M4F at 120 MHz); a calibration repeated on the reader's figures
// gives back the shipped numbers within 1 %.
func TestBuiltinTargetsOnReader(t *testing.T) {
	dir := corpus.TFLiteDir(t)
	for _, name := range []string{"m4-reference", "m4-optimized"} {
		t.Run(name, func(t *testing.T) {
			shipped := target.Builtin[name]
			energyMax := 15.0
			if name == "m4-reference" {
				energyMax = 10 // the four reference runs: energy within 10 %
			}
			var samples []target.Sample
			for _, row := range target.Calibration[name] {
				m := measured(t, filepath.Join(dir, row.Model+".tflite"), nil)
				e := measure.Estimate(m, shipped, target.WeightsFlash)
				if len(e.Uncosted) > 0 || len(e.Unsupported) > 0 || e.SupportNote != "" {
					t.Errorf("%s: uncosted %+v unsupported %+v note %q", row.Model, e.Uncosted, e.Unsupported, e.SupportNote)
				}
				errL := (e.LatencyMS - row.LatencyMS) / row.LatencyMS * 100
				errE := (e.EnergyUJ - row.EnergyUJ) / row.EnergyUJ * 100
				t.Logf("%-24s %8.2f ms (published %7.2f) %+6.1f %%   %7.0f µJ (published %6.0f) %+6.1f %%", row.Model, e.LatencyMS, row.LatencyMS, errL, e.EnergyUJ, row.EnergyUJ, errE)
				if errL > 15 || errL < -15 {
					t.Errorf("%s: latency %.1f ms, published %.1f ms: %+.1f %%", row.Model, e.LatencyMS, row.LatencyMS, errL)
				}
				if errE > energyMax || errE < -energyMax {
					t.Errorf("%s: energy %.0f µJ, published %.0f µJ: %+.1f %%", row.Model, e.EnergyUJ, row.EnergyUJ, errE)
				}
				samples = append(samples, target.Sample{Name: row.Model, Nodes: measure.TargetNodes(m.Layers), LatencyMS: row.LatencyMS, EnergyUJ: row.EnergyUJ})
			}
			fit, err := target.Calibrate(shipped, samples, nil, target.WeightsFlash)
			if err != nil {
				t.Fatal(err)
			}
			for _, c := range fit.Free {
				got, want := shipped.Classes[c].PerUnit, fit.Target.Classes[c].PerUnit
				if d := (got - want) / want; d > 0.01 || d < -0.01 {
					t.Errorf("%s per_unit: shipped %.4g, the reader's figures fit %.4g", c, got, want)
				}
			}
			for _, s := range fit.LeaveOneOut {
				t.Logf("leave-one-out %-24s %8.2f ms (published %7.2f) %+6.1f %%", s.Name, s.EstimatedMS, s.MeasuredMS, s.ErrorPct)
			}
		})
	}
}

// TestSharedModelsSupport: every operator of every shared TFLite model, as
// the reader decodes it, is classified and supported by the
// microcontroller runtime (all of them use builtins it registers).
func TestSharedModelsSupport(t *testing.T) {
	files, _ := filepath.Glob(filepath.Join(corpus.TFLiteDir(t), "*.tflite"))
	if len(files) < 13 {
		t.Fatalf("%d shared models", len(files))
	}
	tgt := target.Builtin["m4-reference"]
	for _, f := range files {
		m := measured(t, f, nil)
		e := measure.Estimate(m, tgt, target.WeightsFlash)
		if len(e.Unsupported) > 0 || e.SupportNote != "" {
			t.Errorf("%s: unsupported %+v %q", filepath.Base(f), e.Unsupported, e.SupportNote)
		}
		if len(e.Uncosted) > 0 {
			t.Errorf("%s: uncosted %+v", filepath.Base(f), e.Uncosted)
		}
		ops := map[string]int{}
		for _, l := range m.Layers {
			ops[l.Op]++
		}
		t.Logf("%-32s %2d operators %v: supported; %.2f ms on m4-reference", filepath.Base(f), len(m.Layers), ops, e.LatencyMS)
	}
}

// TestCustomOperatorUnsupported: a TFLite model with a custom operator
// (hand-made with the test encoder: input float32 [1,4] → custom
// "FancyWindow" → RELU) is reported unsupported on the microcontroller
// runtime, by the operator's name.
func TestCustomOperatorUnsupported(t *testing.T) {
	mod := &tflite.Model{
		Version: 3,
		OperatorCodes: []tflite.OperatorCode{
			{DeprecatedBuiltinCode: 32, CustomCode: "FancyWindow", Version: 1}, // CUSTOM
			{DeprecatedBuiltinCode: 19, BuiltinCode: 19, Version: 1},           // RELU
		},
		Subgraphs: []tflite.Subgraph{{
			Name: "main",
			Tensors: []tflite.Tensor{
				{Shape: []int32{1, 4}, Type: 0, Name: "x"},
				{Shape: []int32{1, 4}, Type: 0, Name: "w"},
				{Shape: []int32{1, 4}, Type: 0, Name: "y"},
			},
			Inputs: []int32{0}, Outputs: []int32{2},
			Operators: []tflite.Operator{
				{OpcodeIndex: 0, Inputs: []int32{0}, Outputs: []int32{1}},
				{OpcodeIndex: 1, Inputs: []int32{1}, Outputs: []int32{2}},
			},
		}},
		Buffers: []tflite.Buffer{{}},
	}
	data, err := tflite.Encode(mod)
	if err != nil {
		t.Fatal(err)
	}
	m := measured(t, "fancy.tflite", data)
	e := measure.Estimate(m, target.Builtin["m4-reference"], target.WeightsFlash)
	if len(e.Unsupported) != 1 || e.Unsupported[0].Op != "FancyWindow" ||
		!strings.Contains(e.Unsupported[0].Reason, "tflite-micro has no kernel for custom operator FancyWindow") {
		t.Errorf("unsupported %+v (layers %+v)", e.Unsupported, m.Layers)
	}
	if len(e.Uncosted) != 1 || e.Uncosted[0].Op != "FancyWindow" {
		t.Errorf("uncosted %+v", e.Uncosted)
	}
}
