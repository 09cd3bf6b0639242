package main

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
)

// measureTarget runs measure --json --target and returns the model's
// target entry.
func measureTarget(t *testing.T, dir, file, spec string) (latencyMS, energyUJ float64, raw map[string]any) {
	t.Helper()
	code, out, errs := inDir(t, dir, "measure", "--json", "--target", spec, file)
	if code != exitOK {
		t.Fatalf("measure --target: exit %d\n%s\n%s", code, out, errs)
	}
	var doc struct {
		Models []struct {
			Layers []any          `json:"layers"`
			Target map[string]any `json:"target"`
		} `json:"models"`
	}
	if err := json.Unmarshal([]byte(out), &doc); err != nil {
		t.Fatalf("%v\n%s", err, out)
	}
	tg := doc.Models[0].Target
	for _, k := range []string{"name", "clock_hz", "latency_ms", "energy_uj", "layers", "unsupported"} {
		if _, ok := tg[k]; !ok {
			t.Errorf("target entry lacks %q: %v", k, tg)
		}
	}
	if doc.Models[0].Layers != nil {
		t.Errorf("layers printed without --layers")
	}
	return tg["latency_ms"].(float64), tg["energy_uj"].(float64), tg
}

func TestMeasureTarget(t *testing.T) {
	dir := t.TempDir()
	writeFile(t, dir, "cam.onnx", convModel(t, 8))
	l120, e120, tg := measureTarget(t, dir, "cam.onnx", "m4-reference@120MHz")
	if tg["clock_hz"].(float64) != 120e6 || tg["name"] != "m4-reference" {
		t.Errorf("target %v", tg)
	}
	// Half the clock: every layer's cycles are the same, so the latency
	// doubles and, with power proportional to the clock, the energy stays.
	l60, e60, _ := measureTarget(t, dir, "cam.onnx", "m4-reference@60MHz")
	if d := l60/l120 - 2; d > 1e-9 || d < -1e-9 {
		t.Errorf("latency %v ms at 60 MHz, %v at 120 MHz: want twice", l60, l120)
	}
	if d := e60/e120 - 1; d > 1e-9 || d < -1e-9 {
		t.Errorf("energy %v µJ at 60 MHz, %v at 120 MHz: want the same", e60, e120)
	}
	code, out, _ := inDir(t, dir, "measure", "--target", "m4-reference", "cam.onnx")
	if code != exitOK || !strings.Contains(out, "target m4-reference at 120MHz") || !strings.Contains(out, "where the time goes") ||
		!strings.Contains(out, "measure on the device before release") {
		t.Errorf("text output:\n%s", out)
	}
	code, out, _ = inDir(t, dir, "measure", "--layers", "--target", "m4-reference", "cam.onnx")
	if code != exitOK || !strings.Contains(out, "layers on m4-reference (cycles = max(compute, memory))") || !strings.Contains(out, "compute-bound") {
		t.Errorf("--layers --target:\n%s", out)
	}
	if code, _, errs := inDir(t, dir, "measure", "--target", "m9-turbo", "cam.onnx"); code != exitUsage || !strings.Contains(errs, `unknown target "m9-turbo"`) {
		t.Errorf("unknown target: exit %d, %s", code, errs)
	}
}

func TestCheckLatencyBudgetONNX(t *testing.T) {
	// A device with a target and a latency limit set between the estimates
	// of the narrow and the wide model: the narrow one passes, the wide
	// one fails, in a real repository.
	dir := newRepo(t)
	writeFile(t, dir, "narrow.onnx", convModel(t, 8))
	writeFile(t, dir, "wide.onnx", convModel(t, 200))
	narrow, _, _ := measureTarget(t, dir, "narrow.onnx", "m4-reference@120MHz")
	wide, _, _ := measureTarget(t, dir, "wide.onnx", "m4-reference@120MHz")
	limit := (narrow + wide) / 2
	budget := fmt.Sprintf(`version: 1
devices:
  board: {ram: 1MiB, target: m4-reference@120MHz}
models:
  - path: "models/**/*.onnx"
    device: board
    limits: {latency: %.3fms}
    growth: {energy: 5000%%}
`, limit)
	writeFile(t, dir, "loadline.yaml", []byte(budget))
	writeFile(t, dir, "models/cam.onnx", convModel(t, 8))
	git(t, dir, "add", "loadline.yaml", "models")
	git(t, dir, "commit", "-q", "-m", "baseline")
	git(t, dir, "checkout", "-q", "-b", "narrow")
	writeFile(t, dir, "models/cam.onnx", convModel(t, 10))
	git(t, dir, "commit", "-q", "-am", "a little wider")
	code, out, errs := inDir(t, dir, "check", "--base", "main")
	if code != exitOK || !strings.Contains(out, "latency") {
		t.Fatalf("narrow model under %.3f ms: exit %d\n%s\n%s", limit, code, out, errs)
	}
	git(t, dir, "checkout", "-q", "main")
	git(t, dir, "checkout", "-q", "-b", "wider")
	writeFile(t, dir, "models/cam.onnx", convModel(t, 200))
	git(t, dir, "commit", "-q", "-am", "wider")
	code, out, errs = inDir(t, dir, "check", "--base", "main", "--format", "json")
	if code != exitBudget {
		t.Fatalf("wide model over %.3f ms: exit %d\n%s\n%s", limit, code, out, errs)
	}
	for _, want := range []string{`"metric": "latency"`, `"metric": "energy"`, `"metric": "unsupported"`, `"latency_ms"`} {
		if !strings.Contains(out, want) {
			t.Errorf("check JSON lacks %s:\n%s", want, out)
		}
	}
	// A bad target is a budget-file error with its place.
	writeFile(t, dir, "loadline.yaml", []byte(strings.Replace(budget, "target: m4-reference@120MHz", "target: {base: m4-reference, clock: fast}", 1)))
	git(t, dir, "commit", "-q", "-am", "bad target")
	code, _, errs = inDir(t, dir, "check", "--base", "HEAD", "--head", "HEAD")
	if code != exitUsage || !strings.Contains(errs, "loadline.yaml") || !strings.Contains(errs, "devices.board.target.clock") || !strings.Contains(errs, ":3:") {
		t.Errorf("bad target: exit %d\n%s", code, errs)
	}
}

// TestCheckLatencyBudgetMLPerfTiny: a budget of latency 250ms on a device
// whose target is the M4 reference kernels at 120 MHz passes the keyword
// spotting model (published 181.9 ms, MLPerf Tiny v0.5 closed/reference,
// Nucleo-L4R5ZI) and fails the visual wake words model (published
// 600.6 ms), in a real git repository.
func TestCheckLatencyBudgetMLPerfTiny(t *testing.T) {
	shared := corpus.TFLiteDir(t)
	read := func(name string) []byte {
		data, err := os.ReadFile(filepath.Join(shared, name))
		if err != nil {
			t.Fatal(err)
		}
		return data
	}
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(`version: 1
devices:
  sensor-board:
    ram: 640KiB
    flash: 2MiB
    target: m4-reference@120MHz
models:
  - path: "models/**/*.tflite"
    device: sensor-board
    limits: {latency: 250ms}
`))
	writeFile(t, dir, "models/kws.tflite", read("kws_ref_model.tflite"))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "keyword spotting")
	code, out, errs := inDir(t, dir, "check", "--all", "--format", "json")
	if code != exitOK {
		t.Fatalf("KWS under 250 ms: exit %d\n%s\n%s", code, out, errs)
	}
	if !strings.Contains(out, `"metric": "latency"`) || !strings.Contains(out, `"status": "pass"`) {
		t.Errorf("KWS check:\n%s", out)
	}
	git(t, dir, "checkout", "-q", "-b", "vww")
	writeFile(t, dir, "models/vww.tflite", read("vww_96_int8.tflite"))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "visual wake words")
	code, out, errs = inDir(t, dir, "check", "--base", "main")
	if code != exitBudget {
		t.Fatalf("VWW over 250 ms: exit %d\n%s\n%s", code, out, errs)
	}
	if !strings.Contains(out, "models/vww.tflite") || !strings.Contains(out, "latency") || !strings.Contains(out, "250.0 ms") {
		t.Errorf("VWW report:\n%s", out)
	}
}
