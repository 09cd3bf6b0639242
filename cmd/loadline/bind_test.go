package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/model"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// writeRateSwitch writes a model that branches on a scalar input: audio
// float32 [1, ?] (length unnamed in the file) and rate int64 []; If rate >
// 8000 it frames audio as [1,1,32,16] (512 samples), else as [1,1,16,16]
// (256), each followed by a 3×3 Conv to 8 channels, padding 1.
func writeRateSwitch(t *testing.T, dir string) string {
	t.Helper()
	b := build.New("rate_switch", 13)
	audio := b.InputShape("audio", model.Float32, model.Shape{model.Known(1), model.Sym("?1")})
	rate := b.Input("rate", model.Int64)
	cond := b.Greater("is_wide", rate, b.ConstInts("eight_k", model.Int64, nil, []int64{8000}))
	branch := func(prefix string, h, w int64) func(*build.Builder) []build.Value {
		return func(s *build.Builder) []build.Value {
			x := s.Reshape(prefix+"_frames", audio, 1, 1, h, w)
			x = s.Conv(prefix+"_conv", x, build.Conv2D(8, 3, 1, 1))
			return []build.Value{s.Flatten(prefix+"_flat", s.GlobalAveragePool(prefix+"_pool", x), 1)}
		}
	}
	outs := b.If("select", cond, branch("wide", 32, 16), branch("narrow", 16, 16))
	if len(outs) == 1 {
		b.Output(outs[0])
	}
	m, err := b.Model()
	if err != nil {
		t.Fatal(err)
	}
	data, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(dir, "rate.onnx")
	if err := os.WriteFile(p, data, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestMeasureBindings: --shape and --value decide the If; unbound, the
// text says which bindings are missing; a binding naming nothing is an
// error listing the inputs; a size of 0 is a usage error. MACs are
// hand-worked: 8·32·16 outputs × 1 channel × 3·3 = 36,864 for the branch
// taken at 16 kHz.
func TestMeasureBindings(t *testing.T) {
	dir := t.TempDir()
	p := writeRateSwitch(t, dir)
	var out, errb bytes.Buffer
	if code := run([]string{"measure", "--json", "--shape", "audio=1x512", "--value", "rate=16000", p}, &out, &errb); code != 0 {
		t.Fatalf("exit %d: %s", code, errb.String())
	}
	var doc struct {
		Models []struct {
			MACs       int64 `json:"macs"`
			Unresolved []any `json:"unresolved"`
		} `json:"models"`
	}
	if err := json.Unmarshal(out.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	if m := doc.Models[0]; m.MACs != 8*32*16*9 || len(m.Unresolved) != 0 { // hand-worked: 36,864
		t.Errorf("MACs %d, unresolved %v; want 36864 and none", m.MACs, m.Unresolved)
	}

	out.Reset()
	errb.Reset()
	run([]string{"measure", p}, &out, &errb)
	for _, want := range []string{"input  audio float32[1,audio.1]", "needs bindings:", "audio.1  input audio, axis 1", "bind with --dim audio.1=N", "rate     input rate, its value", "bind with --value rate=V"} {
		if !strings.Contains(strings.ReplaceAll(out.String(), "   ", "  "), want) && !strings.Contains(out.String(), want) {
			t.Errorf("unbound output lacks %q:\n%s", want, out.String())
		}
	}

	out.Reset()
	errb.Reset()
	if code := run([]string{"measure", "--dim", "batch=1", p}, &out, &errb); code != exitBudget || !strings.Contains(out.String(), "dim binding batch: the model has no input dim of that name; the model's inputs: audio float32[1,audio.1] (dim audio.1); rate int64[] (a value)") {
		t.Errorf("a dim naming nothing: exit %d\n%s", code, out.String())
	}
	for _, bad := range [][]string{{"--dim", "audio.1=0"}, {"--shape", "audio=1x-2"}, {"--value", "rate=fast"}, {"--shape", "=1x2"}} {
		errb.Reset()
		if code := run(append([]string{"measure"}, append(bad, p)...), &out, &errb); code != exitUsage {
			t.Errorf("%v: exit %d, want %d (%s)", bad, code, exitUsage, errb.String())
		}
	}
}

// TestCompareBudgetInputs: a budget rule's inputs: bind the model; a
// rule's dim naming nothing in a model left waiting for a binding is an
// error that points at the dims entry.
func TestCompareBudgetInputs(t *testing.T) {
	dir := t.TempDir()
	p := writeRateSwitch(t, dir)
	budgetFile := func(binding string) string {
		f := filepath.Join(dir, "loadline.yaml")
		os.WriteFile(f, []byte("version: 1\ndevices:\n  kws: {ram: 64KiB}\nmodels:\n  - path: \"**\"\n    device: kws\n"+binding+"    limits: {macs: 40k}\n"), 0o644)
		return f
	}
	var out, errb bytes.Buffer
	b := budgetFile("    inputs: {audio: [1, 512], rate: 16000}\n")
	if code := run([]string{"compare", "--budget", b, "--format", "json", p, p}, &out, &errb); code != 0 {
		t.Fatalf("bound by inputs: exit %d\n%s%s", code, out.String(), errb.String())
	}
	if !strings.Contains(out.String(), `"macs": 36864`) {
		t.Errorf("bound by inputs: MACs not 36864:\n%s", out.String())
	}
	out.Reset()
	b = budgetFile("    dims: {btach: 1}\n")
	code := run([]string{"compare", "--budget", b, p, p}, &out, &errb)
	if want := b + ":7:12: models[0].dims.btach: the model has no input dim of that name"; code == 0 || !strings.Contains(out.String()+errb.String(), want) {
		t.Errorf("exit %d, want an error with %q:\n%s%s", code, want, out.String(), errb.String())
	}
}
